"""Shared fixtures and the one place where tolerances live."""

from __future__ import annotations

import os
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


# --------------------------------------------------------------------------
# A real browser: Debian's chromium, driven by selenium

#: Debian's packages; selenium must never fetch a browser or a driver of its own.
CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")


def _in_ci() -> bool:
    return os.environ.get("CI", "").strip().lower() in {"1", "true", "yes", "on"}


def browser_missing(chromium: Path = CHROMIUM, chromedriver: Path = CHROMEDRIVER) -> str | None:
    """Why the browser tests cannot run here, or None when they can."""
    missing = [f"{p} not found" for p in (chromium, chromedriver) if not p.is_file()]
    try:
        import selenium  # noqa: F401
    except ImportError:
        missing.append("the selenium package is not installed (pip install -e '.[test]')")
    if not missing:
        return None
    return "headless browser test needs Debian's chromium and chromium-driver and selenium: " + "; ".join(missing)


def require_browser(**paths) -> None:
    """Skip where the browser is missing; in CI (CI set to a true value) fail instead."""
    reason = browser_missing(**paths)
    if reason is None:
        return
    if _in_ci():
        pytest.fail(f"{reason} (CI is set, so this test must run)", pytrace=False)
    pytest.skip(reason)


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    """Debian's chromium, headless, with a fresh profile; closed even when a test fails."""
    require_browser()
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    profile = tmp_path_factory.mktemp("chromium-profile")
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                "--disable-component-update", "--no-first-run", "--disable-sync", "--disable-quic",
                f"--user-data-dir={profile}", "--window-size=1400,1800"):
        options.add_argument(arg)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(options=options, service=Service(str(CHROMEDRIVER)))
    try:
        yield driver
    finally:
        driver.quit()
