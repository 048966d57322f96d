"""Tests for the area-sampled scanline and phosphor masks."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from conftest import TOL_ENERGY_LINEAR, TOL_MASK_MEAN
from hypothesis import given
from hypothesis import settings as hypothesis_settings
from hypothesis import strategies as st

from crtfilter import color
from crtfilter.errors import SettingsError
from crtfilter.masks import (
    PHOSPHORS,
    MaskSettings,
    beam_mean,
    beam_profile,
    box_profile,
    build_mask,
)
from crtfilter.scale import GeometrySettings, plan_geometry

#: Mask.pixels() expands in float32: a few units of float32 round-off on values
#: in [0, 1] (this follows from the dtype; it is not a tuned tolerance).
F32_ROUND_OFF = 8 * float(np.finfo(np.float32).eps)

PROPERTY = hypothesis_settings(max_examples=100, deadline=None)

#: A Gaussian's full width at half maximum in sigmas, from exp(-w^2 / (8 sigma^2)) = 1/2.
FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))

GEOMETRIES = {
    # 1440 x 1080, 4.5 output rows per source line
    "320x240@4.5": plan_geometry(320, 240, GeometrySettings(scale=4.5)),
    # 1280 x 960, 4 rows per line
    "320x240@4": plan_geometry(320, 240, GeometrySettings(scale=4)),
    # 1200 x 900, 3.75 rows per line
    "320x240@3.75": plan_geometry(320, 240, GeometrySettings(scale=3.75)),
    # 1170 x 896: 8:7 pixels fitted into 1920 x 1080 at a whole scale of 4
    "256x224 8:7 fit": plan_geometry(256, 224, GeometrySettings(fit="1920x1080", pixel_aspect="8:7")),
}
PITCHES = [3.0, 2.5, 3.75, 4.0]


def expand64(mask) -> np.ndarray:
    """The mask in float64 from its factored form m = a[y] + sum_q b[q, y] cols[q, x, c]."""
    m = mask.a[:, None, None] + np.einsum("qy,qxc->yxc", mask.b, mask.cols)
    return m.transpose(1, 0, 2) if mask.transposed else m


def analytic_phosphor_mean(st_: MaskSettings) -> float:
    """Mean of the phosphor layout alone (scanlines off, full strength), per channel.

    Each channel's stripe is a box of width fill * pitch / 3 in each triad.
    - aperture: one term, columns of mean fill / 3, rows all open: fill / 3.
    - slot: two terms; each term's columns light every other triad (period
      2 pitch), mean fill / 6; each term's rows are slots open for
      (1 - gap) of the slot height, mean 1 - gap. Sum: 2 (fill / 6)(1 - gap).
    - dots: two terms; columns one triad row of boxes (period pitch), mean
      fill / 3; rows one dot row of height fill * row_height every other row
      (period 2 row_height), mean fill / 2. Sum: 2 (fill / 3)(fill / 2) = fill^2 / 3.
    """
    f = st_.phosphor_fill
    return {
        "none": 1.0,
        "aperture": f / 3.0,
        "slot": f / 3.0 * (1.0 - st_.slot_gap),
        "dots": f / 3.0 * f,
    }[st_.phosphor]


def assert_in_unit_interval(values: np.ndarray) -> None:
    """In [0, 1] up to the round-off of the area sampling (see test_area_sampled_values_stay_in_the_unit_interval)."""
    assert values.min() >= -TOL_MASK_MEAN, values.min()
    assert values.max() <= 1.0 + TOL_MASK_MEAN, values.max()


def strict_maxima(profile: np.ndarray) -> np.ndarray:
    inner = profile[1:-1]
    return np.flatnonzero((inner > profile[:-2]) & (inner > profile[2:])) + 1


# --------------------------------------------------------------------------
# Area sampling of the 1-D profiles


@pytest.mark.parametrize("pitch, cell", [(3.0, 3), (2.5, 5), (3.75, 15)])
@pytest.mark.parametrize("fill", [1.0, 0.6, 0.2])
@pytest.mark.parametrize("slot", [0, 1, 2])
def test_box_profile_mean_over_a_cell_is_the_box_fraction(pitch, cell, fill, slot):
    # A triad's stripe of one phosphor: width fill * pitch / 3, centred in its third.
    third = pitch / 3.0
    width = fill * third
    start = slot * third + (third - width) / 2.0
    profile = box_profile(cell, period=pitch, start=start, width=width)
    assert profile.dtype == np.float64 and profile.shape == (cell,)
    assert float(profile.mean()) == pytest.approx(fill / 3.0, abs=TOL_MASK_MEAN)
    # Two cells hold twice the light.
    longer = box_profile(2 * cell, period=pitch, start=start, width=width)
    assert float(longer.mean()) == pytest.approx(fill / 3.0, abs=TOL_MASK_MEAN)


def _covered_fraction(n: int, period: float, start: float, width: float) -> np.ndarray:
    """Overlap of each pixel [i, i + 1) with the boxes [start + k P, start + k P + width), box by box."""
    out = np.zeros(n)
    first = math.floor((0 - start - width) / period)
    last = math.ceil((n - start) / period)
    for k in range(first, last + 1):
        lo, hi = start + k * period, start + k * period + width
        for i in range(max(0, math.floor(lo)), min(n, math.ceil(hi))):
            out[i] += max(0.0, min(hi, i + 1.0) - max(lo, float(i)))
    return out


@pytest.mark.parametrize("pitch", [2.5, 3.75, 1.6, 7.3])
@pytest.mark.parametrize("start, width_share", [(0.0, 1 / 3), (0.3, 0.25), (-1.7, 0.9), (5.2, 0.5)])
def test_box_profile_is_the_covered_fraction_of_each_pixel(pitch, start, width_share):
    width = width_share * pitch
    profile = box_profile(40, period=pitch, start=start, width=width)
    np.testing.assert_allclose(profile, _covered_fraction(40, pitch, start, width), rtol=0, atol=TOL_MASK_MEAN)
    assert_in_unit_interval(profile)


@PROPERTY
@given(
    numerator=st.integers(min_value=3, max_value=97),
    denominator=st.integers(min_value=1, max_value=12),
    start_share=st.floats(min_value=-2.0, max_value=2.0),
    width_share=st.floats(min_value=0.0, max_value=1.0),
)
def test_box_profile_mean_at_rational_periods(numerator, denominator, start_share, width_share):
    period = Fraction(numerator, denominator)
    if period < 1:
        period = 1 + period
    p = float(period)
    cell = period.numerator  # a whole number of pixels holding period.denominator periods
    width = width_share * p
    profile = box_profile(cell, period=p, start=start_share * p, width=width)
    assert float(profile.mean()) == pytest.approx(width / p, abs=TOL_MASK_MEAN)


@pytest.mark.parametrize(
    "period, cell",
    [(3.0, 3), (9.0, 9), (4.5, 9), (135 / 14, 135)],
    ids=["3", "9", "4.5", "135/14"],
)
@pytest.mark.parametrize("beam_width", [0.3, 0.75, 1.5, 2.0])
def test_beam_profile_mean_over_a_cell_is_the_beam_mean(period, cell, beam_width):
    fwhm = beam_width * period
    profile = beam_profile(cell, period=period, fwhm=fwhm)
    assert profile.dtype == np.float64 and profile.shape == (cell,)
    assert profile.min() >= 0.0 and profile.max() <= 1.0  # the beam sum peaks at 1 at a centre
    assert float(profile.mean()) == pytest.approx(beam_mean(period=period, fwhm=fwhm), abs=TOL_MASK_MEAN)


@pytest.mark.parametrize("period", [3.0, 4.5, 135 / 14, 9.0])
@pytest.mark.parametrize("beam_width", [0.3, 0.75, 2.0])
def test_beam_mean_is_the_mean_of_the_sum_of_gaussians(period, beam_width):
    # Independent of the module: sample the sum of Gaussians (lines centred at
    # (j + 0.5) P, peak scaled to 1 at a centre) and average it over one period.
    # The trapezoid rule on a periodic smooth function converges geometrically.
    sigma = beam_width * period / FWHM_PER_SIGMA
    reach = int(math.ceil(12 * sigma / period)) + 2
    centres = (np.arange(-reach, reach + 1) + 0.5) * period

    def beam(y):
        return np.exp(-((y[:, None] - centres[None, :]) ** 2) / (2 * sigma**2)).sum(axis=1)

    y = np.arange(4096) * (period / 4096)
    mean = float(beam(y).mean() / beam(np.array([0.5 * period]))[0])
    assert beam_mean(period=period, fwhm=beam_width * period) == pytest.approx(mean, abs=TOL_MASK_MEAN)


@pytest.mark.parametrize(
    "values",
    [
        # -2.8e-14 at pixels 29, 44, 104, ... (aperture stripe at pitch 2.5, over 1440 columns)
        lambda: box_profile(1440, period=2.5, start=0.0, width=2.5 / 3),
        # 1.0000000000000036 where a pixel is fully covered
        lambda: box_profile(40, period=3.75, start=-1.7, width=0.9 * 3.75),
        # the same stripes through the whole mask: pixels() promises range [0, 1]
        lambda: build_mask(plan_geometry(320, 240, GeometrySettings(scale=4.5)),
                           MaskSettings(triad_pitch=2.5, scanlines=False)).pixels(),
    ],
    ids=["box below 0", "box above 1", "mask below 0"],
)
def test_area_sampled_values_stay_in_the_unit_interval(values):
    v = values()
    assert v.min() >= 0.0 and v.max() <= 1.0, (v.min(), v.max())


# --------------------------------------------------------------------------
# Scanlines follow the source lines


def test_beam_is_symmetric_about_each_line_centre_at_a_whole_period():
    period, lines = 9, 12
    profile = beam_profile(period * lines, period=float(period), fwhm=0.75 * period)
    for j in range(lines):
        centre = period * j + 4  # the pixel [9 j + 4, 9 j + 5) holds the centre (j + 0.5) 9
        for d in range(1, 5):
            assert profile[centre - d] == pytest.approx(profile[centre + d], abs=TOL_MASK_MEAN)
            assert profile[centre] > profile[centre + d]


def test_beam_is_symmetric_about_each_line_centre_at_a_fractional_period():
    # At 4.5 rows per line the centres (j + 0.5) 4.5 fall a quarter into a pixel,
    # so the pixel grid has no mirror image about them. Sample the same beam on a
    # grid four times finer, where each centre falls on a grid line, and check
    # that the pixel values are its four-sample averages.
    period, lines, fine = 4.5, 16, 4
    fwhm = 0.75 * period
    n = int(period * lines)
    coarse = beam_profile(n, period=period, fwhm=fwhm)
    finer = beam_profile(n * fine, period=period * fine, fwhm=fwhm * fine)
    np.testing.assert_allclose(coarse, finer.reshape(n, fine).mean(axis=1), rtol=0, atol=TOL_MASK_MEAN)
    step = int(period * fine)  # 18 fine samples per line
    for j in range(lines):
        edge = step * j + step // 2  # fine-grid line through the centre (j + 0.5) 4.5
        left = finer[edge - step // 2:edge][::-1]
        right = finer[edge:edge + step // 2]
        np.testing.assert_allclose(left, right, rtol=0, atol=TOL_MASK_MEAN)
        assert right[0] == finer[step * j:step * (j + 1)].max()


@pytest.mark.parametrize("scale", [9, 4.5, 3.75])
def test_scanlines_peak_once_per_source_line(scale):
    geometry = plan_geometry(320, 240, GeometrySettings(scale=scale))
    period = float(geometry.line_period)
    assert period == scale
    mask = build_mask(geometry, MaskSettings(phosphor="none"))
    column = mask.pixels(columns=slice(0, 1))[:, 0, 0]
    maxima = strict_maxima(column)
    assert len(maxima) == 240
    # Each peak is the pixel that holds the line centre (j + 0.5) P.
    expected = np.floor((np.arange(240) + 0.5) * period).astype(int)
    np.testing.assert_array_equal(maxima, expected)


# --------------------------------------------------------------------------
# Whole masks: means over a cell, over the picture, and analytic


@pytest.mark.parametrize("geometry", GEOMETRIES.values(), ids=GEOMETRIES.keys())
@pytest.mark.parametrize("pitch", PITCHES)
@pytest.mark.parametrize("kind", sorted(PHOSPHORS))
@pytest.mark.parametrize("scanlines", [False, True])
def test_mask_mean_is_the_mean_over_one_cell(geometry, pitch, kind, scanlines):
    mask = build_mask(geometry, MaskSettings(phosphor=kind, triad_pitch=pitch, scanlines=scanlines))
    rows, columns = mask.cell
    assert mask.shape == (geometry.pic_h, geometry.pic_w)
    assert mask.mean.dtype == np.float64 and mask.mean.shape == (3,)
    cell = mask.pixels(rows=slice(0, rows), columns=slice(0, columns))
    assert cell.dtype == np.float32 and cell.shape == (rows, columns, 3)
    assert_in_unit_interval(cell)
    np.testing.assert_allclose(cell.mean(axis=(0, 1), dtype=np.float64), mask.mean, rtol=0, atol=F32_ROUND_OFF)
    exact = expand64(mask)[:rows, :columns]
    np.testing.assert_allclose(exact.mean(axis=(0, 1)), mask.mean, rtol=0, atol=TOL_MASK_MEAN)


@pytest.mark.parametrize("pitch", [2.5, 3.75])
@pytest.mark.parametrize("kind", sorted(PHOSPHORS))
@pytest.mark.parametrize("scanlines", [False, True])
def test_mask_mean_is_the_mean_over_the_picture(pitch, kind, scanlines):
    geometry = GEOMETRIES["320x240@4.5"]
    mask = build_mask(geometry, MaskSettings(phosphor=kind, triad_pitch=pitch, scanlines=scanlines))
    rows, columns = mask.cell
    # The picture holds a whole number of cells.
    assert geometry.pic_h % rows == 0 and geometry.pic_w % columns == 0
    picture = mask.pixels()
    assert_in_unit_interval(picture)
    np.testing.assert_allclose(picture.mean(axis=(0, 1), dtype=np.float64), mask.mean, rtol=0, atol=F32_ROUND_OFF)
    np.testing.assert_allclose(expand64(mask).mean(axis=(0, 1)), mask.mean, rtol=0, atol=TOL_MASK_MEAN)


@pytest.mark.parametrize("geometry", GEOMETRIES.values(), ids=GEOMETRIES.keys())
@pytest.mark.parametrize("pitch", PITCHES)
@pytest.mark.parametrize("kind", sorted(PHOSPHORS))
@pytest.mark.parametrize("fill", [1.0, 0.7])
def test_mask_mean_without_scanlines_is_the_layout_mean(geometry, pitch, kind, fill):
    settings = MaskSettings(phosphor=kind, triad_pitch=pitch, phosphor_fill=fill, scanlines=False)
    mask = build_mask(geometry, settings)
    np.testing.assert_allclose(mask.mean, analytic_phosphor_mean(settings), rtol=0, atol=TOL_MASK_MEAN)


@pytest.mark.parametrize("geometry", GEOMETRIES.values(), ids=GEOMETRIES.keys())
@pytest.mark.parametrize("kind", ["none", "aperture"])
@pytest.mark.parametrize("beam_width, strength", [(0.75, 0.8), (0.4, 1.0), (1.5, 0.3)])
def test_mask_mean_with_scanlines_is_the_product_of_means(geometry, kind, beam_width, strength):
    # Aperture stripes do not vary along y, so the mean factors into the
    # layout's mean and the scanline mean 1 - strength (1 - beam mean).
    settings = MaskSettings(phosphor=kind, triad_pitch=2.5, beam_width=beam_width, scanline_strength=strength)
    mask = build_mask(geometry, settings)
    period = float(geometry.line_period)
    scan = 1.0 - strength * (1.0 - beam_mean(period=period, fwhm=beam_width * period))
    np.testing.assert_allclose(mask.mean, analytic_phosphor_mean(settings) * scan, rtol=0, atol=TOL_MASK_MEAN)


# --------------------------------------------------------------------------
# Strength, orientation, order


@pytest.mark.parametrize("strength", [0.0, 0.25, 0.6, 1.0])
@pytest.mark.parametrize("pitch", [3.0, 3.75])
def test_phosphor_strength_mixes_towards_open(strength, pitch):
    geometry = GEOMETRIES["320x240@4"]
    full = build_mask(geometry, MaskSettings(triad_pitch=pitch, scanlines=False)).pixels()
    weak = build_mask(geometry, MaskSettings(triad_pitch=pitch, scanlines=False, phosphor_strength=strength))
    np.testing.assert_allclose(weak.pixels(), 1.0 - strength * (1.0 - full), rtol=0, atol=F32_ROUND_OFF)
    if strength == 0.0:
        np.testing.assert_array_equal(weak.pixels(), 1.0)
        np.testing.assert_array_equal(weak.mean, 1.0)


@pytest.mark.parametrize("strength", [0.0, 0.4, 1.0])
@pytest.mark.parametrize("kind", ["aperture", "slot", "dots"])
def test_phosphor_strength_with_scanlines_follows_the_factored_form(strength, kind):
    # m = S (1 - s + s P) = S (1 - s) + s m_full, S the scanlines alone (module docstring).
    geometry = GEOMETRIES["320x240@4.5"]
    window = dict(rows=slice(0, 90), columns=slice(0, 120))
    scan = build_mask(geometry, MaskSettings(phosphor="none")).pixels(**window)
    full = build_mask(geometry, MaskSettings(phosphor=kind)).pixels(**window)
    weak = build_mask(geometry, MaskSettings(phosphor=kind, phosphor_strength=strength)).pixels(**window)
    np.testing.assert_allclose(weak, scan * (1.0 - strength) + strength * full, rtol=0, atol=F32_ROUND_OFF)


@pytest.mark.parametrize("geometry", [GEOMETRIES["320x240@4.5"], GEOMETRIES["256x224 8:7 fit"]], ids=["4.5", "8:7"])
@pytest.mark.parametrize("kind", sorted(PHOSPHORS))
def test_vertical_mask_is_the_transposed_horizontal_mask(geometry, kind):
    settings = dict(phosphor=kind, triad_pitch=2.5)
    vertical = build_mask(geometry, MaskSettings(orientation="vertical", **settings))
    turned = build_mask(geometry.transposed(), MaskSettings(orientation="horizontal", **settings))
    assert vertical.shape == (geometry.pic_h, geometry.pic_w)
    assert vertical.cell == turned.cell[::-1]
    np.testing.assert_array_equal(vertical.mean, turned.mean)
    np.testing.assert_array_equal(vertical.pixels(), turned.pixels().transpose(1, 0, 2))


@pytest.mark.parametrize("orientation", ["horizontal", "vertical"])
def test_a_window_of_the_mask_is_that_part_of_the_whole(orientation):
    mask = build_mask(GEOMETRIES["320x240@4.5"], MaskSettings(phosphor="slot", orientation=orientation))
    whole = mask.pixels()
    rows, columns = slice(256, 512), slice(100, 317)
    np.testing.assert_array_equal(mask.pixels(rows=rows), whole[rows])
    np.testing.assert_array_equal(mask.pixels(rows=rows, columns=columns), whole[rows, columns])


@pytest.mark.parametrize("kind", ["aperture", "slot", "dots"])
@pytest.mark.parametrize("pitch", [3.0, 3.75])
def test_bgr_order_swaps_the_red_and_blue_columns(kind, pitch):
    geometry = GEOMETRIES["320x240@4.5"]
    rgb = build_mask(geometry, MaskSettings(phosphor=kind, triad_pitch=pitch, order="rgb"))
    bgr = build_mask(geometry, MaskSettings(phosphor=kind, triad_pitch=pitch, order="bgr"))
    window = dict(rows=slice(0, 36), columns=slice(0, 60))
    a, b = rgb.pixels(**window), bgr.pixels(**window)
    assert not np.array_equal(a[..., 0], a[..., 2])  # the swap is visible
    np.testing.assert_array_equal(b[..., 0], a[..., 2])
    np.testing.assert_array_equal(b[..., 1], a[..., 1])
    np.testing.assert_array_equal(b[..., 2], a[..., 0])
    np.testing.assert_array_equal(bgr.mean, rgb.mean[::-1])


@pytest.mark.parametrize("pitch", [3.0, 3.75, 6.0])
@pytest.mark.parametrize("fill", [1.0, 0.6])
def test_bgr_stripes_are_rgb_stripes_seen_in_a_mirror(pitch, fill):
    # Each phosphor's stripe is centred in its third of the triad, so a triad
    # read right to left is the other order; 1440 columns hold whole triads.
    geometry = GEOMETRIES["320x240@4.5"]
    assert (geometry.pic_w / pitch).is_integer()
    settings = dict(triad_pitch=pitch, phosphor_fill=fill, scanlines=False)
    rgb = build_mask(geometry, MaskSettings(order="rgb", **settings)).pixels(rows=slice(0, 1))
    bgr = build_mask(geometry, MaskSettings(order="bgr", **settings)).pixels(rows=slice(0, 1))
    np.testing.assert_allclose(bgr, rgb[:, ::-1], rtol=0, atol=F32_ROUND_OFF)


# --------------------------------------------------------------------------
# A plain multiply, for reference


@pytest.mark.parametrize("pitch", [3.0, 2.5])
@pytest.mark.parametrize("code", [64, 128, 255])
def test_plain_multiply_by_rgb_stripes_keeps_a_third_of_the_light(uniform, pitch, code):
    geometry = GEOMETRIES["320x240@4.5"]
    mask = build_mask(geometry, MaskSettings(triad_pitch=pitch, scanlines=False))
    field = color.decode(uniform(code, geometry.pic_w, geometry.pic_h))
    kept = color.mean_luminance(field * mask.pixels()) / color.mean_luminance(field)
    # common practice, no source: RGB stripes keep about a third of the light
    assert kept == pytest.approx(1.0 / 3.0, rel=TOL_ENERGY_LINEAR)


# --------------------------------------------------------------------------
# Bad settings


@pytest.mark.parametrize(
    "settings, message",
    [
        (dict(triad_pitch=0.5), r"triad_pitch must be between 1\.5 and 64\.0 \(got 0\.5\)"),
        (dict(triad_pitch=100), r"triad_pitch must be between 1\.5 and 64\.0 \(got 100\)"),
        (dict(phosphor_fill=0.1), r"phosphor_fill must be between 0\.2 and 1\.0"),
        (dict(slot_gap=0.95), r"slot_gap must be between 0\.0 and 0\.9"),
        (dict(phosphor_strength=1.5), r"phosphor_strength must be between 0\.0 and 1\.0"),
        (dict(scanline_strength=-0.1), r"scanline_strength must be between 0\.0 and 1\.0"),
        (dict(beam_width=0.1), r"beam_width must be between 0\.2 and 2\.0"),
        (dict(triad_pitch=float("nan")), r"triad_pitch must be between 1\.5 and 64\.0 \(got nan\)"),
        (dict(phosphor="slott"), r"unknown phosphor layout 'slott'; did you mean 'slot'\?"),
        (dict(order="grb"), r"order must be one of rgb, bgr \(got 'grb'\)"),
        (dict(orientation="diagonal"), r"orientation must be one of horizontal, vertical"),
        (dict(scanlines="yes"), r"scanlines must be true or false"),
    ],
)
def test_bad_settings_are_refused_with_the_allowed_range(settings, message):
    with pytest.raises(SettingsError, match=message):
        MaskSettings(**settings)
