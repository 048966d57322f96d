"""Measurements of a render: local energy, energy maps, dither, inspect, preset diffs."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from conftest import SAMPLES, TOL_ENERGY_FILE, run
from conftest import pixels as _pixels
from PIL import Image

from crtfilter import color
from crtfilter.audit import local_energy, preset_figures
from crtfilter.errors import SettingsError
from crtfilter.files import (
    encode_png,
    read_png_codes,
    read_png_text,
    read_render_record,
)
from crtfilter.job import render_file
from crtfilter.pictures import nice_bound
from crtfilter.pipeline import render_linear
from crtfilter.plan import Settings
from crtfilter.presets import load_preset

# Tolerances of this file's own kinds of check.
TOL_LOCAL_UNIFORM = 1e-5   # local energy error of a uniform field before encoding (float32 round-off)
TOL_DITHER_MEAN = 1e-3     # mean light of a dithered 8-bit ramp against the ramp: 0.1 %

#: A flat run longer than this many pixels along a row counts as a band.
# common practice, no source: a smooth ramp shows bands where one code value
# spans many pixels; dither breaks such runs up.
BAND_RUN = 8

SCENE = SAMPLES / "scene-320x240.png"
QUICK = "aperture-fine-within-1080p"
FRACTIONAL = 4.5


def _whole_cell_source(settings: Settings) -> tuple[int, int]:
    """Smallest square source (from 16 up) whose picture holds whole mask cells."""
    from crtfilter.masks import build_mask
    from crtfilter.scale import plan_geometry

    for n in range(16, 400, 2):
        g = plan_geometry(n, n, settings.geometry)
        rows, cols = build_mask(g, settings.mask).cell
        if g.pic_w % cols == 0 and g.pic_h % rows == 0 and rows < g.pic_h and cols < g.pic_w:
            return n, n
    raise AssertionError("no small source holds whole cells")


def _write(path: Path, codes: np.ndarray) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    Image.fromarray(codes).save(path)
    return path


def _checker(w: int = 32, h: int = 24) -> np.ndarray:
    board = (np.indices((h, w)).sum(axis=0) % 2 * 255).astype(np.uint8)
    return np.repeat(board[..., None], 3, axis=2)


@pytest.fixture
def unbalanced(tmp_path) -> Path:
    """The default preset with tile balancing turned off."""
    path = tmp_path / "unbalanced.toml"
    path.write_text('extends = "aperture-fine-within-4k"\n[tone]\nbalance_tiles = false\n')
    return path


# ---------------------------------------------------------------------------
# Local energy


@pytest.mark.parametrize("preset", [QUICK, "slot-coarse-within-1080p"])
@pytest.mark.parametrize("code", [60, 118, 220])
def test_local_energy_of_a_uniform_field_is_zero(preset, code):
    settings = load_preset(preset).settings
    w, h = _whole_cell_source(settings)
    out, render = render_linear(np.full((h, w, 3), code, np.uint8), settings)
    local = local_energy(render.input_luminance, color.luminance(out), render.mask.cell)
    assert local.window == render.mask.cell
    assert local.measured == 1.0
    assert local.p50 < TOL_LOCAL_UNIFORM
    assert local.p99 < TOL_LOCAL_UNIFORM
    assert local.max < TOL_LOCAL_UNIFORM


@pytest.fixture
def checker_reports(tmp_path, unbalanced):
    """A 1-px checkerboard rendered at a fractional scale, with and without tile balancing."""
    src = _write(tmp_path / "checker.png", _checker())
    reports = {}
    for balanced, preset in ((True, "aperture-fine-within-4k"), (False, unbalanced)):
        out = tmp_path / f"balanced-{balanced}.png"
        report = render_file(src, out, preset=preset, scale=FRACTIONAL)
        reports[balanced] = (report, read_render_record(out))
    return reports


def test_local_energy_of_a_checkerboard_at_a_fractional_scale_is_reported(checker_reports):
    for report, record in checker_reports.values():
        local = report["local"]
        assert {"window", "p50", "p99", "max", "measured"} <= set(local)
        assert 0 <= local["p50"] <= local["p99"] <= local["max"]
        # the PNG's own record carries the same figures as the report
        assert record["local"] == local
    off = checker_reports[False][0]["local"]
    on = checker_reports[True][0]["local"]
    # without balancing, a cell that cuts a source pixel keeps a clearly wrong share of light
    assert off["p99"] > 0.01
    assert off["max"] > 0
    assert on["p99"] < off["p99"] / 10
    assert on["max"] < off["max"]
    assert checker_reports[True][0]["balance"]["deviation_removed"] > 0
    assert checker_reports[False][0]["balance"]["tiles"] is None


# ---------------------------------------------------------------------------
# Energy map


def _coloured(pixels: np.ndarray) -> int:
    """Pixels clearly bluish (light lost) or reddish (light gained)."""
    r, b = pixels[..., 0].astype(int), pixels[..., 2].astype(int)
    return int((np.abs(b - r) > 40).sum())


def test_energy_map_is_a_png_with_the_diverging_colours_where_there_is_error(tmp_path, unbalanced):
    checker = _write(tmp_path / "in" / "checker.png", _checker())
    flat = _write(tmp_path / "in" / "flat.png", np.full((24, 32, 3), 118, np.uint8))
    maps = {}
    for name, src in (("checker", checker), ("flat", flat)):
        path = tmp_path / f"{name}-map.png"
        result = run("render", src, "-o", tmp_path / f"{name}.png", "--preset", unbalanced,
                     "--scale", FRACTIONAL, "--energy-map", path)
        assert result.exit_code == 0, result.stderr
        # reference library: Pillow decodes the map, independently of the writer
        with Image.open(path) as im:
            assert im.format == "PNG"
        maps[name] = _pixels(path)
    assert maps["checker"].shape == maps["flat"].shape
    assert maps["checker"].std() > 0
    # both maps share the legend's colour bar; only the checker's cells add colour
    assert _coloured(maps["checker"]) > _coloured(maps["flat"]) + 1000


@pytest.mark.parametrize(("value", "bound"), [(0.0, 0.01), (0.003, 0.01), (0.013, 0.02),
                                              (0.02, 0.02), (0.06, 0.1), (0.3, 0.5)])
def test_nice_bound_rounds_up_to_1_2_5_steps_with_a_floor(value, bound):
    # common practice, no source: scale bounds at 1, 2 or 5 times a power of ten
    assert nice_bound(value) == pytest.approx(bound, rel=1e-12)


# ---------------------------------------------------------------------------
# Dither


@pytest.fixture(scope="module")
def ramp() -> np.ndarray:
    """A smooth linear ramp from black to white, float32 (64, 4096, 3)."""
    row = np.linspace(0.0, 1.0, 4096, dtype=np.float32)
    return np.broadcast_to(row[None, :, None], (64, 4096, 3)).copy()


def _bands(codes: np.ndarray) -> int:
    """Flat runs longer than BAND_RUN pixels along the rows of the green channel."""
    count = 0
    for row in codes[..., 1].astype(np.int32):
        edges = np.concatenate([[-1], np.flatnonzero(np.diff(row)), [row.size - 1]])
        count += int((np.diff(edges) > BAND_RUN).sum())
    return count


@pytest.mark.parametrize("kind", ["ordered", "noise"])
def test_dither_keeps_the_mean_of_a_smooth_ramp_and_breaks_up_bands(kind, ramp):
    plain = color.encode_srgb(ramp, 8, dither=color.dither_offsets("none", ramp.shape))
    dithered = color.encode_srgb(ramp, 8, dither=color.dither_offsets(kind, ramp.shape))
    want = color.mean_luminance(ramp)
    got = color.mean_luminance(color.decode(dithered))
    assert got == pytest.approx(want, rel=TOL_DITHER_MEAN)
    assert _bands(dithered) < 0.75 * _bands(plain)


def test_dither_offsets_are_zero_mean_within_their_range():
    shape = (64, 64, 3)
    assert color.dither_offsets("none", shape) is None
    ordered = np.broadcast_to(color.dither_offsets("ordered", shape), shape)
    # common practice, no source: an 8x8 Bayer matrix holds each of its 64
    # thresholds once, so over whole 8x8 tiles the offsets cancel
    assert abs(float(ordered.mean(dtype=np.float64))) < 1e-7
    assert ordered.min() > -0.5 and ordered.max() < 0.5
    assert len(np.unique(ordered)) == 64
    noise = color.dither_offsets("noise", shape)
    assert noise.shape == shape
    # common practice, no source: the difference of two uniform draws is
    # triangular on (-1, 1), mean 0, standard deviation 1/sqrt(6)
    assert noise.min() > -1 and noise.max() < 1
    assert abs(float(noise.mean(dtype=np.float64))) < 4 / np.sqrt(6 * noise.size)
    assert float(noise.std()) == pytest.approx(1 / np.sqrt(6), rel=0.05)


@pytest.mark.parametrize("kind", [
    "ordered",
    "noise",
])
def test_dither_offsets_do_not_depend_on_how_the_picture_is_cut_into_bands(kind):
    w, c = 24, 3
    whole = np.broadcast_to(color.dither_offsets(kind, (16, w, c)), (16, w, c))
    halves = np.concatenate([
        np.broadcast_to(color.dither_offsets(kind, (8, w, c), top=0), (8, w, c)),
        np.broadcast_to(color.dither_offsets(kind, (8, w, c), top=8), (8, w, c)),
    ])
    assert np.array_equal(whole, halves)


def test_unknown_dither_is_refused_with_a_suggestion(small_scene, tmp_path):
    with pytest.raises(SettingsError, match=r"unknown dither 'orderd'; did you mean 'ordered'\?"):
        color.dither_offsets("orderd", (8, 8, 3))
    with pytest.raises(SettingsError, match=r"unknown dither 'nosie'; did you mean 'noise'\?"):
        Settings(dither="nosie")
    result = run("render", small_scene, "-o", tmp_path / "o.png", "--dither", "nosie")
    assert result.exit_code == 2 and "did you mean 'noise'" in result.stderr


@pytest.mark.parametrize("kind", ["ordered", "noise"])
def test_render_with_dither_keeps_the_light_and_records_it(kind, small_scene, tmp_path):
    plain, out, report = tmp_path / "plain.png", tmp_path / "dithered.png", tmp_path / "r.json"
    assert run("render", small_scene, "-o", plain, "--preset", QUICK, "--scale", 2).exit_code == 0
    result = run("render", small_scene, "-o", out, "--preset", QUICK, "--scale", 2,
                 "--dither", kind, "--report", report)
    assert result.exit_code == 0, result.stderr
    (entry,) = json.loads(report.read_text())
    assert abs(entry["luminance"]["ratio"] - 1) < TOL_ENERGY_FILE
    assert entry["settings"]["output"]["dither"] == kind
    assert read_render_record(out)["settings"]["output"]["dither"] == kind
    assert not np.array_equal(read_png_codes(out), read_png_codes(plain))


# ---------------------------------------------------------------------------
# inspect


@pytest.fixture
def rendered(small_scene, tmp_path) -> Path:
    out = tmp_path / "rendered.png"
    result = run("render", small_scene, "-o", out, "--preset", QUICK, "--scale", 2)
    assert result.exit_code == 0, result.stderr
    return out


def test_inspect_a_fresh_render_every_figure_holds(rendered):
    result = run("inspect", rendered)
    assert result.exit_code == 0, result.stderr
    assert "DOES NOT HOLD" not in result.stdout
    found = json.loads(run("inspect", rendered, "--json").stdout)
    assert found["holds"] is True and found["input_found"] is True
    figures = {row["figure"] for row in found["checks"]}
    assert figures == {"luminance.output", "luminance.input", "luminance.ratio",
                       "local.p50", "local.p99", "local.max"}
    assert all(row["holds"] for row in found["checks"])


@pytest.mark.parametrize("alpha", ["over:black", "over:white", "keep"])
def test_inspect_a_fresh_render_of_a_transparent_input_every_figure_holds(alpha, tmp_path):
    rgba = np.zeros((24, 32, 4), np.uint8)
    rgba[..., :3] = 150
    rgba[..., 3] = np.linspace(0, 255, 32).astype(np.uint8)[None, :]
    src = tmp_path / "in" / "sprite.png"
    src.parent.mkdir()
    Image.fromarray(rgba, "RGBA").save(src)
    out = tmp_path / "sprite-out.png"
    made = run("render", src, "-o", out, "--preset", QUICK, "--scale", 2, "--alpha", alpha)
    assert made.exit_code == 0, made.stderr
    found = json.loads(run("inspect", out, "--json").stdout)
    assert [row["figure"] for row in found["checks"] if not row["holds"]] == []


def test_inspect_tampered_pixels_exit_1_and_name_the_figure(rendered):
    text = read_png_text(rendered)["crtfilter"]
    codes = read_png_codes(rendered)
    top = codes[:20].astype(np.int32) + 60
    codes[:20] = np.minimum(top, 255).astype(codes.dtype)
    rendered.write_bytes(encode_png(codes, {"crtfilter": text}))

    result = run("inspect", rendered)
    assert result.exit_code == 1
    line = next(ln for ln in result.stdout.splitlines() if "output luminance" in ln)
    assert "DOES NOT HOLD" in line
    found = json.loads(run("inspect", rendered, "--json").stdout)
    verdict = {row["figure"]: row["holds"] for row in found["checks"]}
    assert found["holds"] is False
    assert verdict["luminance.output"] is False
    assert verdict["luminance.input"] is True  # the input was not touched


def test_inspect_a_png_without_a_record_exits_2(tmp_path):
    plain = _write(tmp_path / "plain.png", np.full((8, 8, 3), 100, np.uint8))
    result = run("inspect", plain)
    assert result.exit_code == 2
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("crtfilter: error:")
    assert "no crtfilter record" in lines[0]


def test_inspect_without_the_recorded_input_checks_only_the_output(rendered, small_scene):
    small_scene.unlink()
    result = run("inspect", rendered)
    assert result.exit_code == 0, result.stderr
    assert "not found" in result.stdout
    found = json.loads(run("inspect", rendered, "--json").stdout)
    assert found["input_found"] is False
    assert [row["figure"] for row in found["checks"]] == ["luminance.output"]
    assert found["holds"] is True


# ---------------------------------------------------------------------------
# presets diff


def test_presets_diff_lists_differing_keys_and_mask_changes():
    a, b = "aperture-fine-within-4k", "slot-medium-within-4k"
    result = run("presets", "diff", a, b)
    assert result.exit_code == 0, result.stderr
    assert 'mask.phosphor: "aperture" -> "slot"' in result.stdout
    fa = preset_figures(load_preset(a).settings)
    fb = preset_figures(load_preset(b).settings)
    mean_a = " ".join(f"{m:.4f}" for m in fa["mask_mean"])
    mean_b = " ".join(f"{m:.4f}" for m in fb["mask_mean"])
    assert f"mask mean (R G B): {mean_a} -> {mean_b}" in result.stdout
    assert f"curve degree {fa['degree'][1]} -> {fb['degree'][1]}" in result.stdout

    found = json.loads(run("presets", "diff", a, b, "--json").stdout)
    assert set(found) >= {"settings", "figures"}
    keys = {row["key"] for row in found["settings"]}
    assert "mask.phosphor" in keys and "output.fit" not in keys
    assert found["figures"]["mask_mean"] == {"a": fa["mask_mean"], "b": fb["mask_mean"]}
    assert found["figures"]["degree"] == {"a": fa["degree"], "b": fb["degree"]}


def test_presets_diff_of_a_preset_with_itself_finds_nothing():
    result = run("presets", "diff", QUICK, QUICK)
    assert result.exit_code == 0
    assert "no resolved setting differs" in result.stdout
    found = json.loads(run("presets", "diff", QUICK, QUICK, "--json").stdout)
    assert found["settings"] == []
    assert all(v["a"] == v["b"] for v in found["figures"].values())


# ---------------------------------------------------------------------------
# The multiply curve


MULTIPLY = '[output]\nfit = "1920x1080"\n[tone]\ncurve = "multiply"\n'


def test_multiply_curve_keeps_about_the_mask_mean_of_the_light(small_scene, tmp_path):
    preset = tmp_path / "multiply.toml"
    preset.write_text(MULTIPLY)
    report = render_file(small_scene, tmp_path / "scene.png", preset=preset)
    lum = report["luminance"]
    assert lum["ratio"] < 0.5
    assert lum["ratio"] == pytest.approx(lum["plain_multiply_ratio"], rel=TOL_ENERGY_FILE)

    # on a uniform grey of whole mask cells, y = m x keeps exactly the mask's mean
    settings = load_preset(preset).settings
    w, h = _whole_cell_source(settings)
    grey = _write(tmp_path / "grey.png", np.full((h, w, 3), 118, np.uint8))
    flat = render_file(grey, tmp_path / "grey-out.png", preset=preset)
    # ITU-R BT.709-6, item 3.2: luminance weights of the per-channel mask means
    mask_mean = float(np.dot(flat["mask_mean"], [0.2126, 0.7152, 0.0722]))
    assert flat["luminance"]["ratio"] == pytest.approx(mask_mean, rel=TOL_ENERGY_FILE)
