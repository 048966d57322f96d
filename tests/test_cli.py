"""The command line end to end: outputs, reports, exit statuses, error lines."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from conftest import SAMPLES, TOL_ENERGY_FILE, run
from conftest import pixels as _pixels
from PIL import Image

from crtfilter.files import read_render_record

SCENE = SAMPLES / "scene-320x240.png"


def _size(path: Path) -> tuple[int, int]:
    with Image.open(path) as im:
        return im.size


def test_render_one_file_writes_output_and_report(small_scene, tmp_path):
    out = tmp_path / "out.png"
    report = tmp_path / "report.json"
    result = run("render", small_scene, "-o", out, "--report", report)
    assert result.exit_code == 0, result.stderr
    assert out.is_file()
    assert "light kept" in result.stdout
    (entry,) = json.loads(report.read_text())
    for key in ("input", "output", "preset", "luminance"):
        assert key in entry
    assert set(entry["luminance"]) >= {"input", "output", "ratio", "plain_multiply_ratio"}
    assert entry["preset"] == "aperture-fine-within-4k"
    assert abs(entry["luminance"]["ratio"] - 1) < TOL_ENERGY_FILE
    assert entry["luminance"]["plain_multiply_ratio"] < 0.5


def test_output_records_its_settings_in_png_text(small_scene, tmp_path):
    out = tmp_path / "o.png"
    assert run("render", small_scene, "-o", out, "--preset", "slot-medium-within-4k").exit_code == 0
    record = read_render_record(out)
    assert record["tool"] == "crtfilter"
    assert record["preset"] == "slot-medium-within-4k"
    assert record["settings"]["mask"]["phosphor"] == "slot"
    assert record["version"]
    # Pillow, an independent reader, sees the same text chunk
    with Image.open(out) as im:
        assert "crtfilter" in im.text


def test_render_folder_mirrors_subfolders(tmp_path, small_scene):
    tree = tmp_path / "tree"
    (tree / "a").mkdir(parents=True)
    (tree / "b").mkdir()
    shutil.copy(small_scene, tree / "a" / "title.png")
    shutil.copy(small_scene, tree / "b" / "title.png")
    (tree / "notes.txt").write_text("not an image")
    out = tmp_path / "out"
    result = run("render", tree, "-o", out, "--scale", "2")
    assert result.exit_code == 0, result.stderr
    assert (out / "a" / "title.png").is_file() and (out / "b" / "title.png").is_file()
    assert "2 rendered, 0 failed, 1 skipped" in result.stdout


def test_scale_and_size_set_the_output_size(small_scene, tmp_path):
    assert run("render", small_scene, "-o", tmp_path / "s.png", "--scale", "3").exit_code == 0
    assert _size(tmp_path / "s.png") == (192, 144)
    assert run("render", small_scene, "-o", tmp_path / "z.png", "--size", "400x200").exit_code == 0
    assert _size(tmp_path / "z.png") == (400, 200)


@pytest.mark.parametrize("case", ["missing", "not-image", "empty", "bad-preset-name",
                                  "bad-preset-value", "exists", "is-input", "scale-too-large-for-size"])
def test_errors_give_one_line_and_status_2_and_no_output(case, tmp_path, small_scene):
    out = tmp_path / "o.png"
    args = ["render", small_scene, "-o", out]
    expect = None
    if case == "missing":
        args[1], expect = tmp_path / "nope.png", "no such file"
    elif case == "not-image":
        bad = tmp_path / "bad.png"
        bad.write_text("hello, this is text")
        args[1], expect = bad, "not an image"
    elif case == "empty":
        bad = tmp_path / "empty.png"
        bad.write_bytes(b"")
        args[1], expect = bad, "empty"
    elif case == "bad-preset-name":
        args += ["--preset", "slot-medium-4"]
        expect = "did you mean 'slot-medium-within-4k'"
    elif case == "bad-preset-value":
        preset = tmp_path / "mine.toml"
        preset.write_text('[mask]\ntriad_pitch = 0.5\n')
        args += ["--preset", preset]
        expect = "mine.toml: [mask] triad_pitch must be between 1.5 and 64"
    elif case == "exists":
        out.write_bytes(b"keep me")
        expect = "use --force"
    elif case == "is-input":
        args[3] = small_scene
        expect = "overwrite the input"
    elif case == "scale-too-large-for-size":
        args += ["--scale", "2", "--size", "100x100"]
        expect = "larger than size 100x100"
    before = small_scene.read_bytes()
    result = run(*args)
    assert result.exit_code == 2
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("crtfilter: error:"), result.stderr
    assert expect in lines[0]
    assert "Traceback" not in result.stderr + result.stdout
    if case == "exists":
        assert out.read_bytes() == b"keep me"
    elif case != "is-input":
        assert not out.exists()
    assert small_scene.read_bytes() == before
    assert not list(tmp_path.rglob("*.part"))


def test_force_replaces_an_existing_output(small_scene, tmp_path):
    out = tmp_path / "o.png"
    out.write_bytes(b"old")
    assert run("render", small_scene, "-o", out, "--force", "--scale", "2").exit_code == 0
    assert _size(out) == (128, 96)


def test_batch_goes_on_past_a_bad_file_and_exits_1(tmp_path, small_scene):
    folder = tmp_path / "in2"
    folder.mkdir()
    shutil.copy(small_scene, folder / "good.png")
    (folder / "broken.png").write_bytes(b"\x89PNG\r\n\x1a\n garbage")
    out = tmp_path / "out"
    result = run("render", folder, "-o", out, "--scale", "2")
    assert result.exit_code == 1
    assert (out / "good.png").is_file() and not (out / "broken.png").exists()
    assert "1 rendered, 1 failed" in result.stdout
    assert "broken.png" in result.stderr


def test_presets_lists_and_json(tmp_path):
    result = run("presets", "--json")
    assert result.exit_code == 0
    rows = json.loads(result.stdout)
    assert 6 <= len(rows) <= 11
    assert all("name" in r and "description" in r for r in rows)
    assert len({r["name"] for r in rows}) == len(rows)
    table = run("presets")
    assert table.exit_code == 0 and "aperture-fine-within-4k" in table.stdout


def test_presets_show_gives_curve_degree_in_words_and_coefficients_only_in_json():
    result = run("presets", "show", "slot-medium-within-4k")
    assert result.exit_code == 0
    assert "degree" in result.stdout and "slope" in result.stdout and "mask mean" in result.stdout
    assert "Horner" not in result.stdout
    assert "Horner" in run("presets", "show", "slot-medium-within-4k", "--json").stdout


def _installed_command() -> list[str]:
    exe = Path(sys.executable).with_name("crtfilter")
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "crtfilter"]


def test_installed_command_runs(small_scene, tmp_path):
    env = dict(os.environ)
    help_ = subprocess.run(_installed_command() + ["--help"], capture_output=True, text=True, env=env)
    assert help_.returncode == 0 and "render" in help_.stdout
    out = tmp_path / "sub.png"
    done = subprocess.run(_installed_command() + ["render", str(small_scene), "-o", str(out)],
                          capture_output=True, text=True, env=env)
    assert done.returncode == 0, done.stderr
    assert out.is_file()
    bad = subprocess.run(_installed_command() + ["render", str(tmp_path / "none.png"), "-o", str(out)],
                         capture_output=True, text=True, env=env)
    assert bad.returncode == 2 and bad.stderr.count("\n") == 1


def test_python_api_matches_the_command(small_scene, tmp_path):
    import crtfilter

    pixels = _pixels(small_scene)
    out = crtfilter.render(pixels, scale=3)
    assert out.dtype == np.uint8 and out.shape == (144, 192, 3)
    report = crtfilter.render_file(small_scene, tmp_path / "api.png", scale=3)
    assert np.array_equal(_pixels(tmp_path / "api.png"), out)
    assert abs(report["luminance"]["ratio"] - 1) < TOL_ENERGY_FILE
    with pytest.raises(crtfilter.InputError, match=r"uint8 array of shape \(H, W, 3\)"):
        crtfilter.render(pixels.astype(np.float32))


def test_aspect_depth_and_transfer_options(small_scene, tmp_path):
    from crtfilter.files import read_png_codes

    # 64x48 source: 8:7 pixels at scale 3 -> 64 * 3 * 8/7 = 219.4 -> 219 columns
    assert run("render", small_scene, "-o", tmp_path / "a.png", "--scale", "3",
               "--pixel-aspect", "8:7").exit_code == 0
    assert _size(tmp_path / "a.png") == (219, 144)
    # a 4:3 display for a 64x48 source is square pixels; 16:9 stretches it
    assert run("render", small_scene, "-o", tmp_path / "b.png", "--scale", "3",
               "--display-aspect", "16:9").exit_code == 0
    assert _size(tmp_path / "b.png") == (256, 144)
    report = tmp_path / "r.json"
    assert run("render", small_scene, "-o", tmp_path / "c.png", "--scale", "2", "--depth", "16",
               "--report", report).exit_code == 0
    assert read_png_codes(tmp_path / "c.png").dtype == np.uint16
    deep = json.loads(report.read_text())[0]
    assert deep["settings"]["output"]["depth"] == 16
    assert abs(deep["luminance"]["ratio"] - 1) < TOL_ENERGY_FILE
    assert run("render", small_scene, "-o", tmp_path / "d.png", "--scale", "2", "--transfer", "gamma-2.2",
               "--report", report).exit_code == 2  # the report of the last run is not replaced without --force
    assert run("render", small_scene, "-o", tmp_path / "d.png", "--scale", "2", "--transfer", "gamma-2.2",
               "--report", report, "--force").exit_code == 0
    power = json.loads(report.read_text())[0]
    assert power["settings"]["source"]["transfer"] == "gamma-2.2"
    assert power["luminance"]["input"] != pytest.approx(deep["luminance"]["input"], rel=1e-3)
    bad = run("render", small_scene, "-o", tmp_path / "e.png", "--depth", "10")
    assert bad.exit_code == 2 and "depth must be 8 or 16 (got 10)" in bad.stderr
    bad = run("render", small_scene, "-o", tmp_path / "e.png", "--transfer", "srbg")
    assert bad.exit_code == 2 and "did you mean 'srgb'" in bad.stderr
