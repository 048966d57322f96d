"""Shared fixtures and the one place where tolerances live."""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "samples"

# One tolerance per kind of check.
TOL_TRANSFER = 1e-6       # float32 transfer curves against float64 references
TOL_MATRIX = 1e-4         # rounded IEC matrix row against the exact BT.709 one
TOL_KERNEL = 1e-12        # kernel values against published values (float64)
TOL_RESAMPLE = 1e-5       # our float32 resampler against Pillow's mode 'F' (doubles)
TOL_ENERGY_LINEAR = 1e-3  # energy held before encoding: 0.1 %
TOL_ENERGY_FILE = 1e-2    # energy held in a written 8-bit file: 1 %
TOL_REPORT = 3e-3         # report ratio against an independent measurement
TOL_MASK_MEAN = 1e-9      # area-sampled cell mean against the analytic mean


def colour_module():
    """colour-science, imported without its warnings about missing optional packages."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*related API features are not available")
        import colour
    return colour


@pytest.fixture(scope="session")
def colour():
    return colour_module()


def sample_paths() -> list[Path]:
    return sorted(SAMPLES.glob("*.png"))


SCENE = SAMPLES / "scene-320x240.png"


def run(*args):
    """Run the command line in-process (typer's CliRunner); arguments may be paths or numbers."""
    from typer.testing import CliRunner

    from crtfilter.cli import app

    return CliRunner().invoke(app, [str(a) for a in args])


def pixels(path: Path) -> np.ndarray:
    """An image file's pixels as uint8 RGB, the file closed again."""
    from PIL import Image

    with Image.open(path) as im:
        return np.asarray(im.convert("RGB"))


@pytest.fixture
def small_scene(tmp_path) -> Path:
    """A 64x48 crop of a bundled scene, in its own folder, so that end-to-end runs stay quick."""
    from PIL import Image

    path = tmp_path / "in" / "scene.png"
    path.parent.mkdir()
    with Image.open(SCENE) as im:
        im.convert("RGB").crop((40, 100, 104, 148)).save(path)
    return path


@pytest.fixture
def uniform():
    def make(code: int, w: int = 64, h: int = 48) -> np.ndarray:
        return np.full((h, w, 3), code, np.uint8)
    return make
