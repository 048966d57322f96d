"""Outputs as artists and testers use them: formats by ending, names by template, several
presets in one call, skipping what exists, earlier renders left out, lines in input order."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from conftest import SCENE, colour_module, run
from crtfilter import formats
from crtfilter.errors import SettingsError
from crtfilter.job import output_name, plan_outputs

QUICK = "scanlines-only-within-1080p"


@pytest.fixture
def frames(tmp_path) -> Path:
    folder = tmp_path / "frames"
    folder.mkdir()
    with Image.open(SCENE) as im:
        frame = im.convert("RGB")
        for n, box in enumerate([(0, 0, 64, 48), (80, 60, 144, 108), (200, 150, 264, 198), (10, 180, 74, 228)]):
            frame.crop(box).save(folder / f"shot-{n}.png")
    return folder


def _mean_luminance(path: Path) -> float:
    """Mean relative luminance of a file decoded by Pillow, with colour-science's sRGB
    decoding (IEC 61966-2-1) and the BT.709 luminance weights: independent of crtfilter."""
    colour = colour_module()
    with Image.open(path) as im:
        codes = np.asarray(im.convert("RGB"), dtype=np.float64) / 255.0
    linear = colour.models.eotf_sRGB(codes)
    return float((linear @ np.array([0.2126, 0.7152, 0.0722])).mean())


@pytest.mark.parametrize("ending", [".jpg", ".webp", ".avif"])
def test_a_lossy_output_is_measured_from_its_decoded_file_and_carries_its_record(frames, tmp_path, ending):
    if formats.format_of(f"x{ending}") not in formats.available():
        pytest.skip(f"this Pillow does not write {ending}")
    out = tmp_path / f"shot{ending}"
    result = run("render", frames / "shot-0.png", "-o", out, "--scale", "4", "--quality", "100" if ending == ".webp"
                 else "95")
    assert result.exit_code == 0, result.stderr
    with Image.open(out) as im:
        assert im.format == {".jpg": "JPEG", ".webp": "WEBP", ".avif": "AVIF"}[ending]
    record = formats.read_record(out)
    # the recorded output luminance is the decoded file's, measured here independently
    assert record["luminance"]["output"] == pytest.approx(_mean_luminance(out), rel=2e-3)
    checked = run("inspect", out)
    assert checked.exit_code == 0, checked.stdout + checked.stderr


def test_jpeg_at_quality_95_and_444_keeps_the_light_of_its_png_twin(frames, tmp_path):
    png, jpg = tmp_path / "twin.png", tmp_path / "twin.jpg"
    for path in (png, jpg):
        assert run("render", frames / "shot-1.png", "-o", path, "--scale", "4").exit_code == 0
    kept_png = formats.read_record(png)["luminance"]["ratio"]
    kept_jpg = formats.read_record(jpg)["luminance"]["ratio"]
    assert abs(kept_jpg - kept_png) < 0.01
    assert _mean_luminance(jpg) == pytest.approx(_mean_luminance(png), rel=0.01)


def test_chroma_subsampling_420_loses_more_light_than_444(frames, tmp_path):
    # 4:2:0 keeps colour at half resolution (ITU-T T.81 allows the sampling factors; the
    # loss on a colour-stripe mask is what README states): it must show in the figure
    kept = {}
    for mode in ("4:4:4", "4:2:0"):
        out = tmp_path / f"s{mode.replace(':', '')}.jpg"
        assert run("render", frames / "shot-1.png", "-o", out, "--scale", "4", "--subsampling", mode).exit_code == 0
        kept[mode] = formats.read_record(out)["luminance"]["ratio"]
    assert abs(kept["4:2:0"] - 1) > abs(kept["4:4:4"] - 1)


@pytest.mark.parametrize("extra, word", [(["--depth", "16"], "8 bits"), (["--output-range", "hdr"], "HDR"),
                                         (["--alpha", "keep"], "transparency")])
def test_what_jpeg_cannot_hold_is_refused_with_what_to_do(frames, tmp_path, extra, word):
    result = run("render", frames / "shot-0.png", "-o", tmp_path / "x.jpg", "--scale", "2", *extra)
    assert result.exit_code == 2 and word in result.stderr and "PNG" in result.stderr
    assert not (tmp_path / "x.jpg").exists()


def test_one_file_name_for_several_inputs_is_refused_with_the_fix(frames, tmp_path):
    result = run("render", frames / "shot-0.png", frames / "shot-1.png", "-o", tmp_path / "two.png")
    assert result.exit_code == 2
    assert "name a folder" in result.stderr and f"-o {tmp_path / 'two'}" in result.stderr
    assert not (tmp_path / "two.png").exists()
    result = run("render", frames / "shot-0.png", "-o", tmp_path / "x.tif")
    assert result.exit_code == 2 and "not tif" in result.stderr


def test_a_folder_of_outputs_takes_its_format_from_the_option(frames, tmp_path):
    out = tmp_path / "jpegs"
    assert run("render", frames, "-o", out, "--scale", "2", "--format", "jpeg").exit_code == 0
    assert sorted(p.name for p in out.iterdir()) == [f"shot-{n}.jpg" for n in range(4)]
    bad = run("render", frames, "-o", tmp_path / "x", "--format", "jpg2000")
    assert bad.exit_code == 2 and "format" in bad.stderr


def test_the_name_template_fills_its_fields(frames, tmp_path):
    out = tmp_path / "named"
    assert run("render", frames, "-o", out, "--scale", "3", "--preset", QUICK,
               "--name", "{stem}_{preset}_{width}x{height}").exit_code == 0
    assert (out / f"shot-0_{QUICK}_192x144.png").is_file()
    assert output_name("{stem}-{preset}", stem="a", preset="b") == "a-b"
    with pytest.raises(SettingsError, match="unknown field"):
        output_name("{stem}-{colour}", stem="a")
    with pytest.raises(SettingsError, match="not a file name"):
        output_name("{stem}/x", stem="a")
    with pytest.raises(SettingsError, match="not both"):
        plan_outputs([frames], out, force=True, skip_existing=True)


def test_several_presets_into_one_folder_twice_with_skip_existing_renders_nothing_again(frames, tmp_path):
    out = tmp_path / "looks"
    presets = f"{QUICK},slot-medium-within-4k"
    first = run("render", frames, "-o", out, "--scale", "2", "--preset", presets)
    assert first.exit_code == 0, first.stderr
    written = {p.name: p.stat().st_mtime_ns for p in out.iterdir()}
    assert len(written) == 8 and f"shot-0-{QUICK}.png" in written and "shot-0-slot-medium-within-4k.png" in written
    again = run("render", frames, "-o", out, "--scale", "2", "--preset", presets, "--skip-existing")
    assert again.exit_code == 0, again.stderr
    assert "0 rendered" in again.stdout and "8 left as they were" in again.stdout
    assert "failed:" not in again.stderr
    assert {p.name: p.stat().st_mtime_ns for p in out.iterdir()} == written
    refused = run("render", frames, "-o", out, "--scale", "2", "--preset", presets)
    assert refused.exit_code == 2 and refused.stderr.count("\n") == 1 and "--skip-existing" in refused.stderr


def test_two_presets_that_would_write_one_name_are_refused(frames, tmp_path):
    result = run("render", frames, "-o", tmp_path / "x", "--preset", f"{QUICK},slot-medium-within-4k", "--name", "{stem}")
    assert result.exit_code == 2 and "{preset}" in result.stderr


def test_earlier_renders_are_passed_over_as_sources_unless_asked(frames, tmp_path):
    first = tmp_path / "crt"
    assert run("render", frames, "-o", first, "--scale", "2").exit_code == 0
    again = run("render", first, "-o", tmp_path / "crt2", "--scale", "2")
    assert again.exit_code == 2 and "rendered by crtfilter" in again.stderr
    taken = run("render", first, "-o", tmp_path / "crt3", "--scale", "2", "--include-renders")
    assert taken.exit_code == 0 and "4 rendered" in taken.stdout
    # a folder holding both: the originals are rendered, the earlier outputs passed over with a word
    mixed = run("render", tmp_path, "-o", tmp_path / "crt4", "--scale", "2")
    assert mixed.exit_code == 0, mixed.stderr
    assert "4 rendered" in mixed.stdout and "passed over (rendered by crtfilter before" in mixed.stdout


def test_batch_lines_come_in_input_order(frames, tmp_path):
    done = subprocess.run([sys.executable, "-m", "crtfilter", "render", str(frames), "-o", str(tmp_path / "o"),
                           "--scale", "3", "--jobs", "2"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    sources = [ln.split(" -> ")[0] for ln in done.stdout.splitlines() if " -> " in ln]
    assert sources == sorted(str(p) for p in frames.glob("*.png"))


def test_a_report_of_several_presets_lists_every_render(frames, tmp_path):
    report = tmp_path / "r.json"
    assert run("render", frames, "-o", tmp_path / "o", "--scale", "2", "--preset", f"{QUICK},slot-medium-within-4k",
               "--report", report).exit_code == 0
    entries = json.loads(report.read_text())
    assert len(entries) == 8 and {e["preset"] for e in entries} == {QUICK, "slot-medium-within-4k"}


def test_pixel_aspect_and_display_aspect_together_are_refused(frames, tmp_path):
    result = run("render", frames / "shot-0.png", "-o", tmp_path / "x.png", "--pixel-aspect", "8:7",
                 "--display-aspect", "4:3")
    assert result.exit_code == 2 and "not both" in result.stderr and not (tmp_path / "x.png").exists()
