"""Pictures for people: comparison sheets, overviews, curve plots, mask previews, energy maps."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from conftest import SAMPLES, TOL_ENERGY_FILE, run
from conftest import pixels as _pixels
from PIL import Image

from crtfilter import pictures
from crtfilter.audit import REFERENCE_SOURCE, local_energy
from crtfilter.color import decode
from crtfilter.compare import compare_sheet, parse_crop
from crtfilter.errors import SettingsError
from crtfilter.masks import build_mask
from crtfilter.plots import curve_data, plot_curves
from crtfilter.presets import load_preset
from crtfilter.scale import Geometry, plan_geometry
from crtfilter.tone import ToneSettings, solve_channels, tone_pair

SCENE = SAMPLES / "scene-320x240.png"

#: The small source every sheet here is drawn from.
SMALL = (64, 48)

#: A picture "is not blank" when it has at least this many distinct colours.
MIN_COLOURS = 8

#: Printed figures carry four decimals.
TOL_PRINTED = 5e-5


def _assert_not_blank(rgb: np.ndarray) -> None:
    assert rgb.var() > 0
    assert len(np.unique(rgb.reshape(-1, 3), axis=0)) >= MIN_COLOURS


def _one_error_line(result, expect: str) -> None:
    assert result.exit_code == 2, result.stdout
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("crtfilter: error:"), result.stderr
    assert expect in lines[0]
    assert "Traceback" not in result.stderr + result.stdout


@pytest.fixture(scope="module")
def scene(tmp_path_factory) -> Path:
    """A 64x48 crop of a bundled scene, so that every render stays small."""
    path = tmp_path_factory.mktemp("in") / "scene.png"
    with Image.open(SCENE) as im:
        im.convert("RGB").crop((40, 100, 40 + SMALL[0], 100 + SMALL[1])).save(path)
    return path


@pytest.fixture(scope="module")
def small_presets(tmp_path_factory) -> list[Path]:
    """Twelve preset files that render a 64x48 source at 320x240 and differ a little (the pitch)."""
    folder = tmp_path_factory.mktemp("presets")
    paths = []
    for k in range(12):
        path = folder / f"small-{k:02d}.toml"
        path.write_text('extends = "aperture-fine-within-1080p"\n'
                        '[output]\nfit = "320x240"\n'
                        f"[mask]\ntriad_pitch = {3.0 + 0.25 * k}\n")
        paths.append(path)
    return paths


def _expected_sheet_size(names: list[str], crop: tuple[int, int, int, int]) -> tuple[int, int]:
    boxes = [pictures.crop_box(plan_geometry(*SMALL, load_preset(n).settings.geometry), crop) for n in names]
    width, height, _cols, _rows = pictures.sheet_size(len(names) + 2, max(b[2] for b in boxes),
                                                      max(b[3] for b in boxes), 3)
    return width, height


# --------------------------------------------------------------------------
# compare


@pytest.mark.parametrize("n_presets", [2, 5, 12])
def test_compare_sheet_has_the_expected_pixel_size_for_the_number_of_presets(n_presets, scene, small_presets,
                                                                             tmp_path):
    names = [str(p) for p in small_presets[:n_presets]]
    if n_presets == 2:
        # a preset of another geometry: its larger crop sets the panel size
        names[0] = "scanlines-only-within-1080p"
    out = tmp_path / "sheet.png"
    result = run("compare", scene, "--presets", ",".join(names), "-o", out)
    assert result.exit_code == 0, result.stderr
    assert out.is_file()
    found = re.search(r"crop (\d+),(\d+) (\d+)x(\d+) source px", result.stdout)
    assert found, result.stdout
    crop = tuple(int(v) for v in found.groups())
    with Image.open(out) as im:
        assert im.size == _expected_sheet_size(names, crop)
    assert result.stdout.count("light kept") == n_presets + 2


def test_compare_sheet_is_not_blank(scene, small_presets):
    sheet, _figures = compare_sheet(scene, [load_preset(p) for p in small_presets[:2]])
    assert sheet.dtype == np.uint8 and sheet.ndim == 3 and sheet.shape[2] == 3
    _assert_not_blank(sheet)


def test_compare_sheet_size_matches_the_layout_function(scene, small_presets):
    presets = [load_preset(p) for p in small_presets[:5]]
    sheet, figures = compare_sheet(scene, presets)
    width, height = _expected_sheet_size([str(p) for p in small_presets[:5]], tuple(figures["crop"]))
    assert sheet.shape[:2] == (height, width)


def test_plain_multiply_panel_keeps_clearly_less_light_than_the_presets(scene, small_presets):
    _sheet, figures = compare_sheet(scene, [load_preset(p) for p in small_presets[:2]])
    panels = figures["panels"]
    assert len(panels) == 4
    nearest, multiply, *balanced = panels
    assert "nearest" in nearest["name"] and "multiply" in multiply["name"]
    # common practice, no source: a plain multiply by an aperture mask keeps about a third of the light
    assert multiply["ratio"] < 0.6
    for panel in balanced:
        assert abs(panel["ratio"] - 1) < TOL_ENERGY_FILE, panel
        assert panel["contrast"] > 0
    assert abs(nearest["ratio"] - 1) < TOL_ENERGY_FILE


def test_crop_option_sets_the_region_shown(scene, small_presets, tmp_path):
    names = [str(p) for p in small_presets[:2]]
    out = tmp_path / "sheet.png"
    result = run("compare", scene, "--presets", ",".join(names), "-o", out, "--crop", "8,6,24,18")
    assert result.exit_code == 0, result.stderr
    assert "crop 8,6 24x18 source px" in result.stdout
    with Image.open(out) as im:
        assert im.size == _expected_sheet_size(names, (8, 6, 24, 18))

    sheet, figures = compare_sheet(scene, [load_preset(p) for p in names], (8, 6, 24, 18))
    assert figures["crop"] == [8, 6, 24, 18]
    # The first panel is the nearest upscale at 5x (64x48 -> 320x240): its 1:1 crop,
    # centred in its panel under the title, is the source region with each pixel repeated.
    ch, cw = 18 * 5, 24 * 5
    panel_w = max(cw, pictures.SHEET_OVERVIEW[0])
    left = pictures.SHEET_PAD + (panel_w - cw) // 2
    top = pictures.SHEET_TITLE + pictures.SHEET_PAD
    source = _pixels(scene)[6:6 + 18, 8:8 + 24]
    expected = np.repeat(np.repeat(source, 5, axis=0), 5, axis=1)
    assert np.array_equal(sheet[top:top + ch, left:left + cw], expected)


def test_crop_past_the_source_is_one_error_line(scene, small_presets, tmp_path):
    out = tmp_path / "sheet.png"
    result = run("compare", scene, "--presets", f"{small_presets[0]},{small_presets[1]}", "-o", out,
                 "--crop", "50,40,20,10")
    _one_error_line(result, "crop 50,40,20,10 reaches past the 64x48 source")
    assert not out.exists()
    with pytest.raises(SettingsError, match="reaches past the 64x48 source"):
        compare_sheet(scene, [load_preset(small_presets[0])], (0, 0, 65, 10))


@pytest.mark.parametrize(("text", "expect"), [
    ("1,2,3", "crop must look like X,Y,W,H"),
    ("a,b,c,d", "crop must look like X,Y,W,H"),
    ("1.5,2,3,4", "crop must look like X,Y,W,H"),
    ("0,0,0,5", "w, h >= 1"),
    ("-1,0,5,5", "x, y >= 0"),
])
def test_malformed_crop_is_one_error_line(text, expect, scene, small_presets, tmp_path):
    out = tmp_path / "sheet.png"
    result = run("compare", scene, "--presets", f"{small_presets[0]},{small_presets[1]}", "-o", out,
                 f"--crop={text}")
    _one_error_line(result, expect)
    assert not out.exists()
    with pytest.raises(SettingsError, match=re.escape(expect)):
        parse_crop(text)


def test_more_than_twelve_presets_are_refused(scene, small_presets, tmp_path):
    out = tmp_path / "sheet.png"
    names = [str(p) for p in small_presets] + [str(small_presets[0])]
    result = run("compare", scene, "--presets", ",".join(names), "-o", out)
    _one_error_line(result, "name one to twelve presets (got 13)")
    assert not out.exists()


# --------------------------------------------------------------------------
# busiest region and overview


def test_busiest_region_finds_the_one_textured_patch():
    rng = np.random.default_rng(7)
    linear = np.full((60, 80, 3), 0.3, np.float32)
    x, y, w, h = 50, 20, 16, 12
    linear[y:y + h, x:x + w] = rng.random((h, w, 1), dtype=np.float32)
    found = pictures.busiest_region(linear, w, h)
    assert found[2:] == (w, h)
    # the window may slide by one pixel onto the patch's border, whose step is also detail
    assert abs(found[0] - x) <= 1 and abs(found[1] - y) <= 1, found


def test_busiest_region_window_is_clamped_to_the_picture():
    linear = np.zeros((10, 12, 3), np.float32)
    assert pictures.busiest_region(linear, 40, 30) == (0, 0, 12, 10)


def test_overview_averages_in_linear_light():
    codes = np.zeros((360, 480, 3), np.uint8)
    codes[:, ::2] = 255  # 1-px black and white stripes
    small = pictures.overview(codes, 240, 180)
    assert small.shape == (180, 240, 3) and small.dtype == np.uint8
    # each overview pixel covers one black and one white stripe: half the light
    assert abs(float(decode(small).mean()) - 0.5) < 0.005
    # IEC 61966-2-1: linear 0.5 encodes to 0.735, code 188; averaging codes would give ~128
    assert np.all(np.abs(small.astype(int) - 188) <= 1)


# --------------------------------------------------------------------------
# curves


def _pairs(mu: float = 0.3, blue: float | None = None, **tone) -> tuple:
    settings = ToneSettings(**tone)
    pair = tone_pair(mu, settings)
    return (pair, pair, pair if blue is None else tone_pair(blue, settings))


def test_curve_plot_is_written_not_blank_and_of_plausible_size(tmp_path):
    out = tmp_path / "curves.png"
    plot_curves(_pairs(), out, title="test")
    assert out.is_file()
    with Image.open(out) as im:
        w, h = im.size
        rgb = np.asarray(im.convert("RGB"))
    assert 400 <= w <= 3000 and 300 <= h <= 2000 and w > h
    _assert_not_blank(rgb)


@pytest.mark.parametrize(("mu", "tone"), [(0.3, {}), (0.2, {"softness": 0.4}), (0.45, {"curve": "exponent"}),
                                          (0.25, {"curve": "integer"}), (0.3, {"curve": "piecewise"})])
def test_plot_data_matches_the_tone_pair_solver_at_sample_points(mu, tone, tmp_path):
    data = plot_curves(_pairs(mu, **tone), tmp_path / "c.png")
    solved = tone_pair(mu, ToneSettings(**tone))
    (ch,) = data["channels"]
    x = np.asarray(data["x"])
    assert x[0] == 0.0 and x[-1] == 1.0
    for i in (0, 13, 40, 77, 128, 200, 256):
        xi = np.array([x[i]])
        assert ch["lift"][i] == pytest.approx(float(solved.lift(xi)[0]), abs=1e-12)
        assert ch["cut"][i] == pytest.approx(float(solved.cut(xi)[0]), abs=1e-12)
        assert ch["visibility"][i] == pytest.approx(float(solved.visibility(xi)[0]), abs=1e-12)
    assert ch["mu"] == solved.mu and ch["slope"] == solved.slope and ch["curve"] == solved.curve


def test_identical_channels_are_drawn_once_and_a_different_blue_apart():
    same = curve_data(_pairs(0.3))
    assert [ch["label"] for ch in same["channels"]] == ["RGB"]
    split = curve_data(_pairs(0.3, blue=0.2))
    assert [ch["label"] for ch in split["channels"]] == ["RG", "B"]
    assert [ch["mu"] for ch in split["channels"]] == [pytest.approx(0.3), pytest.approx(0.2)]


def test_chosen_degree_is_in_the_data_and_the_legend(tmp_path, monkeypatch):
    from matplotlib.figure import Figure

    legends = []
    save = Figure.savefig

    def keep_legend(fig, *args, **kwargs):
        legends.extend(t.get_text() for ax in fig.axes if ax.get_legend() for t in ax.get_legend().get_texts())
        return save(fig, *args, **kwargs)

    monkeypatch.setattr(Figure, "savefig", keep_legend)
    pairs = _pairs(0.3, blue=0.15)
    data = plot_curves(pairs, tmp_path / "c.png")
    for ch, mu in zip(data["channels"], (0.3, 0.15), strict=True):
        degree = tone_pair(mu).degree
        assert ch["degree"] == degree
        assert any(f"degree {degree}," in text and text.startswith(ch["label"] + " ") for text in legends), legends
    # mu 0.3: slope 1/0.3 = 3.33, degree 3; mu 0.15: slope 6.67, degree 6 (tone module docs: n = floor(s))
    assert [ch["degree"] for ch in data["channels"]] == [3, 6]


def test_curves_command_for_a_preset_and_for_a_mean(tmp_path):
    out = tmp_path / "preset.png"
    result = run("curves", "aperture-fine-within-1080p", "-o", out)
    assert result.exit_code == 0, result.stderr
    assert out.is_file()
    preset = load_preset("aperture-fine-within-1080p")
    pairs = solve_channels(build_mask(plan_geometry(*REFERENCE_SOURCE, preset.settings.geometry),
                                      preset.settings.mask).mean, preset.settings.tone)
    assert f"degree {pairs[0].degree}" in result.stdout
    assert f"mask mean {pairs[0].mu:.4f}" in result.stdout

    out = tmp_path / "mean.png"
    result = run("curves", "--mean", "0.3", "-o", out)
    assert result.exit_code == 0, result.stderr
    assert out.is_file()
    assert "RGB: mask mean 0.3000, blend curve" in result.stdout
    assert f"degree {tone_pair(0.3).degree}" in result.stdout


@pytest.mark.parametrize("args, expect", [(["aperture-fine-within-1080p", "--mean", "0.3"], "not both"),
                                          ([], "(one of them)")])
def test_curves_command_wants_a_preset_or_a_mean_not_both(args, expect, tmp_path):
    out = tmp_path / "c.png"
    result = run("curves", *args, "-o", out)
    _one_error_line(result, f"give a preset or --mean MU{' ' if expect[0] == '(' else ', '}{expect}")
    assert not out.exists()


# --------------------------------------------------------------------------
# mask preview


def test_mask_preview_grows_with_zoom_and_prints_cell_and_means(tmp_path):
    name = "aperture-fine-within-1080p"
    preset = load_preset(name)
    built = build_mask(plan_geometry(*REFERENCE_SOURCE, preset.settings.geometry), preset.settings.mask)
    sizes = []
    for zoom in (4, 12):
        out = tmp_path / f"mask-{zoom}.png"
        result = run("mask", name, "-o", out, "--zoom", zoom)
        assert result.exit_code == 0, result.stderr
        assert out.is_file()
        rgb = _pixels(out)
        _assert_not_blank(rgb)
        sizes.append(rgb.shape[:2])
        found = re.search(r"cell (\d+)x(\d+) px, mask mean ([\d.]+) ([\d.]+) ([\d.]+)", result.stdout)
        assert found, result.stdout
        assert (int(found[2]), int(found[1])) == tuple(built.cell)  # shown width x height
        printed = np.array([float(found[k]) for k in (3, 4, 5)])
        assert np.allclose(printed, built.mean, rtol=0, atol=TOL_PRINTED)
    (h4, w4), (h12, w12) = sizes
    assert w12 > w4 and h12 >= h4


# --------------------------------------------------------------------------
# energy map


def _energy():
    """Left third gains 20 % of the light, middle third loses 20 %, right third is black input."""
    h, w = 40, 60
    input_y = np.full((h, w), 0.5, np.float32)
    output_y = input_y.copy()
    output_y[:, :20] = 0.6
    output_y[:, 20:40] = 0.4
    input_y[:, 40:] = output_y[:, 40:] = 0.0
    return local_energy(input_y, output_y, (4, 4)), Geometry(w, h, w, h, 0, 0, w, h)


def test_energy_map_size_follows_the_width_argument():
    local, geometry = _energy()
    narrow = pictures.energy_map_picture(local, geometry, width=30)
    wide = pictures.energy_map_picture(local, geometry, width=54)
    assert wide.shape[1] - narrow.shape[1] == 54 - 30
    # the map keeps the picture's shape: 40/60 of its width in height
    assert wide.shape[0] - narrow.shape[0] == round(54 * 40 / 60) - round(30 * 40 / 60)
    capped = pictures.energy_map_picture(local, geometry, width=600)
    assert capped.shape == pictures.energy_map_picture(local, geometry, width=60).shape


def test_energy_map_colours_gain_red_loss_blue_black_input_grey():
    local, geometry = _energy()
    assert np.isnan(local.grid[:, -1]).all() and (local.grid[:, 0] > 0).all() and (local.grid[:, 7] < 0).all()
    picture = pictures.energy_map_picture(local, geometry, width=60)
    row = 16 + 20  # the map sits one pad in from the corner; sample its middle row
    gained, lost, black = (picture[row, 16 + c].astype(int) for c in (10, 30, 50))
    # common practice, no source: diverging maps show gain red, loss blue
    assert gained[0] > gained[2] + 30 and gained[0] > gained[1], gained
    assert lost[2] > lost[0] + 30 and lost[2] > lost[1], lost
    assert black[0] == black[1] == black[2] and 40 < black[0] < 200, black
