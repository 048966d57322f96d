"""Energy held through the whole pipeline, and mask visibility."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from conftest import TOL_ENERGY_FILE, TOL_ENERGY_LINEAR

from crtfilter import color
from crtfilter.audit import michelson
from crtfilter.masks import MaskSettings
from crtfilter.engine import render_codes
from crtfilter.pipeline import render_linear
from crtfilter.plan import Settings
from crtfilter.presets import all_presets, load_preset
from crtfilter.scale import GeometrySettings
from crtfilter.tone import ToneSettings

GREY_CODES = [3, 20, 60, 118, 160, 200, 240, 255]


def _whole_cell_source(settings: Settings) -> tuple[int, int]:
    """Smallest source size (from 16 up) whose picture holds whole mask cells."""
    from crtfilter.masks import build_mask
    from crtfilter.scale import plan_geometry

    def fits(w, h):
        g = plan_geometry(w, h, settings.geometry)
        rows, cols = build_mask(g, settings.mask).cell
        return g.pic_w % cols == 0 and g.pic_h % rows == 0 and rows < g.pic_h and cols < g.pic_w

    for n in range(16, 400, 2):
        if fits(n, n):
            return n, n
    raise AssertionError("no small source holds whole cells")


def _settings(phosphor: str, pitch: float, scale: float, *, scanlines: bool = True,
              kernel: str = "sharp", curve: str = "blend") -> Settings:
    return Settings(
        geometry=GeometrySettings(scale=scale),
        kernel=kernel,
        mask=MaskSettings(phosphor=phosphor, triad_pitch=pitch, slot_height=2 * pitch,
                          dot_row_height=pitch, phosphor_fill=0.9, scanlines=scanlines),
        tone=ToneSettings(curve=curve),
    )


@pytest.mark.parametrize("phosphor", ["none", "aperture", "slot", "dots"])
@pytest.mark.parametrize("pitch", [2.5, 3.0, 3.75, 4.5])
@pytest.mark.parametrize("scale", [4, 4.5])
def test_uniform_fields_keep_their_light_before_encoding(phosphor, pitch, scale):
    # Over a cell of constant x the blended output averages to x exactly; the
    # source size is chosen so that the picture holds whole period cells.
    settings = _settings(phosphor, pitch, scale)
    w, h = _whole_cell_source(settings)
    for code in GREY_CODES:
        src = np.full((h, w, 3), code, np.uint8)
        out, r = render_linear(src, settings)
        got = color.channel_means(out)
        want = r.source_channels
        assert np.allclose(got, want, rtol=TOL_ENERGY_LINEAR, atol=1e-7), (code, got, want)


def test_partial_cells_at_the_picture_edge_cost_little():
    # A picture that ends mid-cell is off by at most the share of that last cell.
    settings = _settings("slot", 4.5, 4.5)
    out, r = render_linear(np.full((47, 61, 3), 118, np.uint8), settings)
    g = r.geometry
    rows, cols = r.mask.cell
    bound = (rows / g.pic_h + cols / g.pic_w)
    assert abs(color.mean_luminance(out) / r.source_luminance - 1) < bound


@pytest.mark.parametrize("curve", ["blend", "integer", "exponent", "piecewise"])
def test_every_curve_family_keeps_the_light_of_uniform_fields(curve):
    settings = _settings("slot", 3.0, 4, curve=curve)
    w, h = _whole_cell_source(settings)
    for code in GREY_CODES:
        out, r = render_linear(np.full((h, w, 3), code, np.uint8), settings)
        assert color.mean_luminance(out) == pytest.approx(r.source_luminance, rel=TOL_ENERGY_LINEAR, abs=1e-7)


def test_coloured_uniform_fields_keep_each_channel():
    settings = _settings("dots", 3.75, 4.5)
    w, h = _whole_cell_source(settings)
    src = np.zeros((h, w, 3), np.uint8)
    src[...] = (230, 90, 15)
    out, r = render_linear(src, settings)
    assert np.allclose(color.channel_means(out), r.source_channels, rtol=TOL_ENERGY_LINEAR)


def test_plain_multiply_ratio_is_the_mask_mean_on_uniform_fields():
    settings = _settings("aperture", 3.0, 4)
    w, h = _whole_cell_source(settings)
    out, r = render_linear(np.full((h, w, 3), 180, np.uint8), settings)
    # A plain multiply keeps exactly the mask's mean of a uniform field.
    assert r.plain_multiply_luminance / r.source_luminance == pytest.approx(r.mask.mean[1], rel=1e-6)
    # and the tone pair keeps all of it
    assert color.mean_luminance(out) / r.source_luminance == pytest.approx(1.0, rel=TOL_ENERGY_LINEAR)


def test_written_codes_keep_the_light_of_busy_pictures():
    rng = np.random.default_rng(7)
    # blocky random art: 8x8 source blocks, like tiles
    src = np.kron(rng.integers(0, 256, (12, 16, 3)), np.ones((8, 8, 1))).astype(np.uint8)
    for preset in all_presets():
        r = render_codes(src, preset.settings)
        g = r.geometry
        pic = r.codes[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w]
        out = color.channel_means(r.encoding.decode(pic)) @ r.encoding.luma
        ratio = out / r.source_luminance
        assert abs(ratio - 1) < TOL_ENERGY_FILE, (preset.name, ratio)


def _grey_contrast_of_render(settings: Settings, channel: int | None) -> float:
    # 18 % grey: sRGB code 118 decodes to 0.1812 (IEC 61966-2-1 EOTF)
    src = np.full((240, 320, 3), 118, np.uint8)
    r = render_codes(src, settings)
    lin = r.encoding.decode(r.codes)
    values = color.luminance(lin, r.encoding.luma) if channel is None else lin[..., channel]
    return michelson(values)


def test_default_preset_shows_its_mask_at_18_percent_grey():
    contrast = _grey_contrast_of_render(load_preset().settings, channel=1)
    assert contrast >= 0.5, contrast


@pytest.mark.parametrize("preset", [p.name for p in all_presets()])
def test_no_preset_hides_its_mask_at_18_percent_grey(preset):
    settings = load_preset(preset).settings
    contrast = _grey_contrast_of_render(settings, channel=1)
    assert contrast >= 0.25, (preset, contrast)


def test_mask_fades_towards_white_on_standard_range():
    # DESIGN: L(1) = 1 and C(1) = 1 - without headroom the mask must vanish at white.
    settings = load_preset().settings
    assert _grey_contrast_of_render(settings, 1) > 0.5
    white = render_codes(np.full((24, 32, 3), 255, np.uint8), settings).codes
    assert (white == 255).all()


def test_borders_stay_black_and_are_left_out_of_the_picture():
    settings = dataclasses.replace(load_preset().settings,
                                   geometry=GeometrySettings(size="1600x900"))
    r = render_codes(np.full((240, 320, 3), 200, np.uint8), settings)
    g = r.geometry
    assert (g.out_w, g.out_h) == (1600, 900)
    # whole scale 3 by default: a 960x720 picture centred on black
    assert (g.pic_x, g.pic_y, g.pic_w, g.pic_h) == (320, 90, 960, 720)
    inside = np.zeros(r.codes.shape[:2], bool)
    inside[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w] = True
    assert (r.codes[~inside] == 0).all()
    assert r.codes[inside].mean() > 50


def test_alpha_is_composited_over_black_in_linear_light():
    src = np.full((20, 30, 3), 255, np.uint8)
    alpha = np.full((20, 30), 0.25, np.float32)
    out, r = render_linear(src, _settings("aperture", 3.0, 3), alpha=alpha)
    assert r.source_luminance == pytest.approx(0.25, rel=1e-6)
    assert color.mean_luminance(out) == pytest.approx(0.25, rel=TOL_ENERGY_LINEAR)


def test_sixteen_bit_output_is_finer_than_eight_bit():
    settings = dataclasses.replace(load_preset().settings, depth=16,
                                   geometry=GeometrySettings(scale=3))
    r = render_codes(np.full((30, 40, 3), 118, np.uint8), settings)
    assert r.codes.dtype == np.uint16
    ratio = color.mean_luminance(color.decode(r.codes)) / r.source_luminance
    assert abs(ratio - 1) < TOL_ENERGY_LINEAR


def _checkerboard(w: int, h: int) -> np.ndarray:
    board = (np.indices((h, w)).sum(axis=0) % 2 * 255).astype(np.uint8)
    return np.repeat(board[..., None], 3, axis=2)


def test_balancing_holds_the_light_where_the_picture_locks_onto_the_mask():
    # A 1-pixel checkerboard at 4.5x against a 3-pixel stripe pitch: the picture's
    # period (9 px) locks onto the mask's, so without balancing the light drifts.
    src = _checkerboard(60, 40)
    loose = _settings("aperture", 3.0, 4.5, scanlines=False)
    loose = dataclasses.replace(loose, tone=ToneSettings(balance_tiles=False))
    tight = dataclasses.replace(loose, tone=ToneSettings(balance_tiles=True))
    out_loose, r_loose = render_linear(src, loose)
    out_tight, r_tight = render_linear(src, tight)
    drift = abs(color.mean_luminance(out_loose) / r_loose.source_luminance - 1)
    assert drift > 0.01
    assert color.mean_luminance(out_tight) == pytest.approx(r_tight.source_luminance, rel=1e-5)
    assert 0 < r_tight.balance_removed < 1
    assert r_loose.balance_removed == 0
    assert out_tight.min() >= 0 and out_tight.max() <= 1


def test_balancing_leaves_uniform_fields_alone():
    settings = _settings("slot", 3.75, 4.5)
    w, h = _whole_cell_source(settings)
    src = np.full((h, w, 3), 100, np.uint8)
    off = dataclasses.replace(settings, tone=ToneSettings(balance_tiles=False))
    on, r = render_linear(src, settings)
    plain, _ = render_linear(src, off)
    assert r.balance_removed < 1e-5
    np.testing.assert_allclose(on, plain, atol=1e-5)


def test_balanced_deviations_cancel_in_every_tile():
    from crtfilter.pipeline import balance_tiles

    rng = np.random.default_rng(5)
    d = rng.normal(size=(40, 36, 3)).astype(np.float32)
    out, removed = balance_tiles(d, (8, 6))
    sums = out.reshape(5, 8, 6, 6, 3).sum(axis=(1, 3), dtype=np.float64)
    assert np.abs(sums).max() < 1e-4
    # only shrinks: same sign, never larger
    assert (out * d >= 0).all() and (np.abs(out) <= np.abs(d) + 1e-7).all()
    assert removed == pytest.approx(float(np.abs(d).sum() - np.abs(out).sum()), rel=1e-4)
