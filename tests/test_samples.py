"""Every shipped preset on every bundled sample: light held, checked independently."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from conftest import TOL_ENERGY_FILE, TOL_REPORT, colour_module, sample_paths
from PIL import Image

from crtfilter.job import render_file
from crtfilter.presets import all_presets


def independent_mean_luminance(path, box=None, hdr=None) -> float:
    """Mean relative luminance of an sRGB file (or a PQ one, given its hdr record),
    computed without crtfilter."""
    colour = colour_module()
    if hdr is None:
        with Image.open(path) as im:
            rgb = np.asarray(im.convert("RGB"), dtype=np.float64) / 255.0
    else:
        import imagecodecs

        rgb = imagecodecs.png_decode(Path(path).read_bytes())[..., :3].astype(np.float64) / 65535.0
    if box is not None:
        x, y, w, h = box
        rgb = rgb[y:y + h, x:x + w]
    if hdr is None:
        # reference library: colour-science sRGB EOTF (IEC 61966-2-1)
        linear = colour.cctf_decoding(rgb, function="sRGB")
        # reference library: second row of colour-science's sRGB RGB-to-XYZ matrix (ITU-R BT.709)
        weights = colour.RGB_COLOURSPACES["sRGB"].matrix_RGB_to_XYZ[1]
    else:
        # reference library: colour-science PQ EOTF (SMPTE ST 2084), in cd/m², over reference white
        linear = colour.models.eotf_ST2084(rgb) / hdr["reference_white"]
        # reference library: second row of colour-science's BT.2020 RGB-to-XYZ matrix (ITU-R BT.2020)
        weights = colour.RGB_COLOURSPACES["ITU-R BT.2020"].matrix_RGB_to_XYZ[1]
    return float((linear @ weights).mean())


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    out = tmp_path_factory.mktemp("samples")
    reports = []
    for preset in all_presets():
        for sample in sample_paths():
            dst = out / preset.name / sample.name
            dst.parent.mkdir(exist_ok=True)
            reports.append(render_file(sample, dst, preset=preset))
    return reports


def test_bundled_samples_exist():
    names = {p.name for p in sample_paths()}
    assert {"scene-320x240.png", "scene-256x224.png"} <= names
    assert any(n.startswith("chart-") for n in names)


def test_every_preset_keeps_the_light_of_every_sample(rendered, capsys):
    with capsys.disabled():
        print("\nlight kept (output / input mean luminance, from the written files):")
        for r in rendered:
            lum = r["luminance"]
            print(f"  {r['preset']:<22} {r['input'].split('/')[-1]:<32} "
                  f"{lum['ratio']:.4f}  plain multiply {lum['plain_multiply_ratio']:.4f}")
    for r in rendered:
        assert abs(r["luminance"]["ratio"] - 1) < TOL_ENERGY_FILE, r["output"]


def test_report_ratio_agrees_with_an_independent_measurement(rendered):
    for r in rendered:
        src = independent_mean_luminance(r["input"])
        out = independent_mean_luminance(r["output"], r["geometry"]["picture"], r.get("hdr"))
        assert abs(out / src - r["luminance"]["ratio"]) < TOL_REPORT, r["output"]


def test_plain_multiply_would_have_darkened_every_sample(rendered):
    # common practice, no source: a multiply overlay removes most of the light
    for r in rendered:
        assert r["luminance"]["plain_multiply_ratio"] < 0.8, r["output"]
