"""Resampling kernels, taps, upscaling against Pillow, and output geometry."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest
from conftest import TOL_KERNEL, TOL_RESAMPLE
from hypothesis import given, settings
from hypothesis import strategies as st
from PIL import Image

from crtfilter.errors import SettingsError
from crtfilter.scale import (
    BAND_CELLS,
    whole_cell_sums,
    KERNELS,
    GeometrySettings,
    kernel_keys,
    kernel_lanczos3,
    plan_geometry,
    resample_taps,
    upscale,
)

# float32 weights, and sums of them, against exact arithmetic: a few float32
# rounding steps (2**-24 each) stay well inside this.
TOL_FLOAT32_SUM = 1e-6


def _dense(n_in: int, n_out: int, kernel: str) -> np.ndarray:
    """The (n_out, n_in) weight matrix of resample_taps, in float64."""
    idx, w = resample_taps(n_in, n_out, kernel)
    m = np.zeros((n_out, n_in))
    rows = np.repeat(np.arange(n_out), idx.shape[1])
    np.add.at(m, (rows, idx.ravel()), w.ravel().astype(np.float64))
    return m


def _exact_area_weights(n_in: int, n_out: int) -> list[list[Fraction]]:
    """Share of output pixel i's footprint [i r, (i + 1) r) lying on source pixel j."""
    r = Fraction(n_in, n_out)
    out = []
    for i in range(n_out):
        lo, hi = i * r, (i + 1) * r
        out.append([max(Fraction(0), min(hi, j + 1) - max(lo, j)) / r for j in range(n_in)])
    return out


def _pillow_resize(channel: np.ndarray, width: int, height: int, method) -> np.ndarray:
    im = Image.fromarray(np.ascontiguousarray(channel, dtype=np.float32))
    assert im.mode == "F"
    return np.asarray(im.resize((width, height), method))


# --------------------------------------------------------------------------
# Kernels


@pytest.mark.parametrize(
    "x, weight",
    [
        # Keys 1981 (citation from memory): a = -0.5 kernel values, computed with
        # reference library colour-science kernel_cardinal_spline(x, 0.5, 0)
        (0.0, 1.0),
        (0.5, 0.5625),
        (1.0, 0.0),
        (1.5, -0.0625),
        (2.0, 0.0),
        (0.25, 0.8671875),
        (0.75, 0.2265625),
        (1.25, -0.0703125),
        (1.75, -0.0234375),
    ],
)
def test_kernel_keys_values(x, weight):
    assert abs(float(kernel_keys(x)) - weight) <= TOL_KERNEL
    assert abs(float(kernel_keys(-x)) - weight) <= TOL_KERNEL


@settings(max_examples=50, deadline=None)
@given(x=st.floats(-4, 4))
def test_kernel_keys_equals_reference_library_cardinal_spline(colour, x):
    if not hasattr(colour.algebra, "kernel_cardinal_spline"):
        pytest.skip("installed colour-science has no kernel_cardinal_spline")
    # reference library: colour-science kernel_cardinal_spline(x, 0.5, 0)
    expected = float(colour.algebra.kernel_cardinal_spline(np.array(x), 0.5, 0))
    assert abs(float(kernel_keys(x)) - expected) <= TOL_KERNEL


@pytest.mark.parametrize(
    "x, exact, published",
    [
        # reference library: colour-science kernel_lanczos, sinc(x) sinc(x / 3);
        # closed forms from that definition, published values computed with it
        (0.0, 1.0, 1.0),
        (0.5, 6 / np.pi**2, 0.6079271),
        (1.5, -4 / (3 * np.pi**2), -0.1350949),
        (2.5, 0.24 / np.pi**2, 0.0243171),
    ],
)
def test_kernel_lanczos3_values(x, exact, published):
    k = float(kernel_lanczos3(x))
    assert abs(k - exact) <= TOL_KERNEL
    assert round(k, 7) == published
    assert abs(float(kernel_lanczos3(-x)) - exact) <= TOL_KERNEL


def test_kernel_lanczos3_is_zero_from_three_on():
    x = np.array([3.0, 3.5, 10.0, -3.0, -7.25])
    np.testing.assert_array_equal(kernel_lanczos3(x), 0.0)


@settings(max_examples=50, deadline=None)
@given(x=st.floats(-5, 5))
def test_kernel_lanczos3_equals_reference_library(colour, x):
    if not hasattr(colour.algebra, "kernel_lanczos"):
        pytest.skip("installed colour-science has no kernel_lanczos")
    # reference library: colour-science kernel_lanczos(x, a=3)
    expected = float(colour.algebra.kernel_lanczos(np.array(x), 3))
    assert abs(float(kernel_lanczos3(x)) - expected) <= TOL_KERNEL


# --------------------------------------------------------------------------
# Taps


@settings(max_examples=50, deadline=None)
@given(
    n_in=st.integers(1, 40),
    n_out=st.integers(1, 300),
    kernel=st.sampled_from(sorted(KERNELS)),
)
def test_resample_taps_rows_sum_to_one_and_indices_in_range(n_in, n_out, kernel):
    idx, w = resample_taps(n_in, n_out, kernel)
    assert idx.shape == w.shape and idx.shape[0] == n_out
    assert w.dtype == np.float32
    assert idx.min() >= 0 and idx.max() < n_in
    np.testing.assert_allclose(w.astype(np.float64).sum(axis=1), 1.0, rtol=0, atol=TOL_FLOAT32_SUM)


def test_resample_taps_cubic_impulse_matches_pillow():
    column = _dense(8, 16, "cubic")[:, 3]
    # reference library: Pillow Image.resize(BICUBIC) of the impulse
    # [0, 0, 0, 1, 0, 0, 0, 0] from 8 to 16 px (computed values)
    expected = np.zeros(16)
    expected[3:11] = [-0.0234375, -0.0703125, 0.2265625, 0.8671875,
                      0.8671875, 0.2265625, -0.0703125, -0.0234375]
    np.testing.assert_allclose(column, expected, rtol=0, atol=TOL_FLOAT32_SUM)


def test_resample_taps_rejects_unknown_kernel_with_suggestion():
    with pytest.raises(SettingsError, match=r"unknown kernel 'cubik'; did you mean 'cubic'\?"):
        resample_taps(4, 8, "cubik")


def test_resample_taps_rejects_empty_sizes():
    with pytest.raises(SettingsError, match=r"sizes must be >= 1 \(got 0 -> 8\)"):
        resample_taps(0, 8, "cubic")


# --------------------------------------------------------------------------
# Upscaling against Pillow


PILLOW_METHODS = {
    "cubic": Image.Resampling.BICUBIC,
    "lanczos3": Image.Resampling.LANCZOS,
    "bilinear": Image.Resampling.BILINEAR,
}


@pytest.mark.parametrize("kernel", sorted(PILLOW_METHODS))
@pytest.mark.parametrize("scale_x, scale_y", [(2, 2), (3, 3), (2.5, 2.5), (4.5, 4.5), (3, 2.5)])
@pytest.mark.parametrize("seed, shape", [(0, (12, 16)), (1, (9, 7)), (2, (5, 11))])
def test_upscale_matches_pillow_mode_f(kernel, scale_x, scale_y, seed, shape):
    h, w = shape
    img = np.random.default_rng(seed).random((h, w, 3), dtype=np.float32)
    width, height = round(w * scale_x), round(h * scale_y)
    out = upscale(img, width, height, kernel)
    assert out.dtype == np.float32 and out.shape == (height, width, 3)
    for c in range(3):
        # reference library: Pillow Image.resize(BICUBIC / LANCZOS / BILINEAR) in
        # mode 'F', plainly clipped to [0, 1] as upscale() without a cell does
        expected = np.clip(_pillow_resize(img[..., c], width, height, PILLOW_METHODS[kernel]), 0, 1)
        np.testing.assert_allclose(out[..., c], expected, rtol=0, atol=TOL_RESAMPLE)


@pytest.mark.parametrize("kernel", ["cubic", "lanczos3"])
def test_upscale_clips_the_overshoot_of_negative_lobes(kernel):
    img = np.zeros((6, 8, 1), np.float32)
    img[:, 4:] = 1.0
    # reference library: Pillow Image.resize in mode 'F' rings past the step
    raw = _pillow_resize(img[..., 0], 20, 15, PILLOW_METHODS[kernel])
    assert raw.min() < 0 and raw.max() > 1
    out = upscale(img, 20, 15, kernel)
    assert out.min() >= 0 and out.max() <= 1
    np.testing.assert_allclose(out[..., 0], np.clip(raw, 0, 1), rtol=0, atol=TOL_RESAMPLE)


#: A mask period cell for the clipping tests: 9 rows (one source line at 9x), 3 columns.
CELL = (9, 3)


def _strokes() -> np.ndarray:
    # thin bright strokes one source pixel wide: the lobes' undershoot dominates
    img = np.zeros((24, 32, 3), np.float32)
    img[::3, :] = 1.0
    img[:, ::4] = 1.0
    return img


@pytest.mark.parametrize("kernel", ["cubic", "lanczos3"])
def test_cell_clip_keeps_the_mean_that_a_plain_clip_moves(kernel):
    img = _strokes()
    plain = upscale(img, 32 * 9, 24 * 9, kernel)
    kept = upscale(img, 32 * 9, 24 * 9, kernel, cell=CELL)
    # reference library: Pillow's unclipped mode 'F' result: the light the kernel gives
    raw = _pillow_resize(img[..., 0], 32 * 9, 24 * 9, PILLOW_METHODS[kernel])
    light = raw.mean(dtype=np.float64)
    assert light == pytest.approx(img[..., 0].mean(dtype=np.float64), rel=5e-3)
    assert abs(plain[..., 0].mean(dtype=np.float64) / light - 1) > 5e-3
    # what is lost is the overshoot of patches already at white (light no display shows)
    assert kept[..., 0].mean(dtype=np.float64) == pytest.approx(light, rel=5e-4)
    assert kept.min() >= 0 and kept.max() <= 1


def _picture(name: str) -> np.ndarray:
    if name == "strokes":
        return _strokes()
    img = np.zeros((13, 17, 3), np.float32)
    if name == "edge":
        img[4:9, 5:12] = 1.0
    elif name == "dots":
        img[::4, ::3] = 1.0
    else:
        img[...] = np.random.default_rng(1).random((13, 17, 3), dtype=np.float32) ** 3
    return img


@pytest.mark.parametrize("kernel", ["cubic", "lanczos3"])
@pytest.mark.parametrize("picture", ["strokes", "edge", "dots", "random"])
def test_cell_clip_keeps_each_cells_own_light_up_to_its_bands_share(kernel, picture):
    img = _picture(picture)
    h, w = img.shape[:2]
    kept = upscale(img, w * 9, h * 9, kernel, cell=CELL)[..., 0]
    # reference library: Pillow's unclipped mode 'F' upscale, summed per cell and
    # limited to what a cell can hold: the light each cell of the kernel's own
    # upscale has. What no cell can hold (ringing below black, overshoot above
    # white) is shared over the band in proportion to each cell's light, so
    # every lit cell of a band is off by the same share, and dark cells never
    # take the light of bright ones.
    raw = _pillow_resize(img[..., 0], w * 9, h * 9, PILLOW_METHODS[kernel])
    area = CELL[0] * CELL[1]
    want = np.clip(whole_cell_sums(raw, CELL), 0, area)
    have = whole_cell_sums(kept, CELL)
    assert kept.mean(dtype=np.float64) == pytest.approx(raw.mean(dtype=np.float64), rel=5e-4)
    unclipped = whole_cell_sums(raw, CELL)
    for top in range(0, want.shape[0], BAND_CELLS):
        rows = slice(top, top + BAND_CELLS)
        share = unclipped[rows].sum() / want[rows].sum() - 1  # what the band's cells could not hold
        lit = want[rows] > 0.01 * area
        error = have[rows][lit] / want[rows][lit] - 1
        # cells with pixels at white take less than their share, the others a little more
        assert error.min() >= min(0.0, 2 * share) - 1e-4, (top, share, error.min())
        assert error.max() <= max(0.0, 2 * share) + 1e-4, (top, share, error.max())


@pytest.mark.parametrize("kernel", ["cubic", "lanczos3"])
def test_cell_clip_changes_nothing_where_nothing_clips(kernel):
    img = 0.3 + 0.4 * np.random.default_rng(3).random((12, 16, 3), dtype=np.float32)
    plain = upscale(img, 16 * 5, 12 * 5, kernel)
    kept = upscale(img, 16 * 5, 12 * 5, kernel, cell=CELL)
    assert 0 < plain.min() and plain.max() < 1
    np.testing.assert_array_equal(kept, plain)


# --------------------------------------------------------------------------
# Nearest and sharp


@pytest.mark.parametrize("scale", [1, 2, 3, 4, 5])
@pytest.mark.parametrize("kernel", ["nearest", "sharp"])
def test_whole_number_upscale_repeats_pixels_exactly(kernel, scale):
    img = np.random.default_rng(scale).random((7, 9, 3), dtype=np.float32)
    out = upscale(img, 9 * scale, 7 * scale, kernel)
    np.testing.assert_array_equal(out, np.repeat(np.repeat(img, scale, axis=0), scale, axis=1))


@pytest.mark.parametrize("scale", [1, 2, 3, 4, 5, 9])
def test_sharp_equals_nearest_at_whole_number_scales(scale):
    img = np.random.default_rng(10 + scale).random((24, 32, 3), dtype=np.float32)
    sharp = upscale(img, 32 * scale, 24 * scale, "sharp")
    nearest = upscale(img, 32 * scale, 24 * scale, "nearest")
    np.testing.assert_array_equal(sharp, nearest)


@settings(max_examples=50, deadline=None)
@given(n_in=st.integers(1, 20), n_out=st.integers(1, 80))
def test_sharp_weights_are_exact_area_shares(n_in, n_out):
    exact = np.array(_exact_area_weights(n_in, n_out), dtype=np.float64)
    np.testing.assert_allclose(_dense(n_in, n_out, "sharp"), exact, rtol=0, atol=TOL_FLOAT32_SUM)


@settings(max_examples=50, deadline=None)
@given(n_in=st.integers(1, 40), n_out=st.integers(1, 300))
def test_sharp_weights_are_convex_and_spread_each_source_pixel_fully(n_in, n_out):
    m = _dense(n_in, n_out, "sharp")
    assert m.min() >= 0
    np.testing.assert_allclose(m.sum(axis=1), 1.0, rtol=0, atol=TOL_FLOAT32_SUM)
    # Each source pixel's area is handed out in full: column sums n_out / n_in.
    np.testing.assert_allclose(m.sum(axis=0), n_out / n_in, rtol=TOL_FLOAT32_SUM, atol=0)


@settings(max_examples=50, deadline=None)
@given(
    h=st.integers(1, 12), w=st.integers(1, 12),
    height=st.integers(1, 60), width=st.integers(1, 60),
    seed=st.integers(0, 2**32 - 1),
)
def test_sharp_output_stays_between_its_source_neighbours(h, w, height, width, seed):
    img = np.random.default_rng(seed).random((h, w, 1), dtype=np.float32)
    out = upscale(img, width, height, "sharp")[..., 0]
    ry, rx = Fraction(h, height), Fraction(w, width)
    for i in range(height):
        y0, y1 = int(i * ry), -(-(i + 1) * ry // 1)
        for j in range(width):
            x0, x1 = int(j * rx), -(-(j + 1) * rx // 1)
            patch = img[y0:int(y1), x0:int(x1), 0]
            assert patch.min() - TOL_FLOAT32_SUM <= out[i, j] <= patch.max() + TOL_FLOAT32_SUM


@settings(max_examples=50, deadline=None)
@given(
    h=st.integers(1, 30), w=st.integers(1, 30),
    height=st.integers(1, 200), width=st.integers(1, 200),
    seed=st.integers(0, 2**32 - 1),
)
def test_sharp_keeps_the_image_mean(h, w, height, width, seed):
    img = np.random.default_rng(seed).random((h, w, 3), dtype=np.float32)
    out = upscale(img, width, height, "sharp")
    before = img.mean(axis=(0, 1), dtype=np.float64)
    after = out.mean(axis=(0, 1), dtype=np.float64)
    np.testing.assert_allclose(after, before, rtol=TOL_FLOAT32_SUM, atol=0)


def test_upscale_rejects_unknown_kernel_with_suggestion():
    with pytest.raises(SettingsError, match=r"did you mean 'sharp'\?"):
        upscale(np.zeros((2, 2, 3), np.float32), 4, 4, "sharpe")


# --------------------------------------------------------------------------
# Geometry


@pytest.mark.parametrize(
    "src, picture",
    [((320, 240), (2880, 2160)), ((256, 224), (2304, 2016)), ((640, 480), (2560, 1920))],
)
def test_default_fit_takes_the_largest_whole_scale_without_borders(src, picture):
    g = plan_geometry(*src)
    assert (g.out_w, g.out_h) == picture
    assert (g.pic_x, g.pic_y, g.pic_w, g.pic_h) == (0, 0, *picture)
    assert g.line_period.denominator == 1


def test_fixed_size_centres_the_picture_between_pillars():
    g = plan_geometry(320, 240, GeometrySettings(size="3840x2160"))
    assert (g.out_w, g.out_h) == (3840, 2160)
    assert (g.pic_w, g.pic_h) == (2880, 2160)
    assert (g.pic_x, g.pic_y) == (480, 0)


def test_pixel_aspect_widens_the_picture():
    g = plan_geometry(256, 224, GeometrySettings(pixel_aspect="8:7"))
    # whole scale 9 on 224 lines; 256 * 9 * 8 / 7 = 2633.14
    assert (g.pic_w, g.pic_h) == (2633, 2016)


def test_display_aspect_sets_the_picture_shape():
    g = plan_geometry(256, 224, GeometrySettings(display_aspect="4:3"))
    assert (g.pic_w, g.pic_h) == (2688, 2016)
    assert Fraction(g.pic_w, g.pic_h) == Fraction(4, 3)


def test_display_aspect_overrides_pixel_aspect():
    both = plan_geometry(256, 224, GeometrySettings(pixel_aspect="8:7", display_aspect="4:3"))
    only = plan_geometry(256, 224, GeometrySettings(display_aspect="4:3"))
    assert both == only


def test_fractional_fit_fills_the_box():
    g = plan_geometry(256, 224, GeometrySettings(whole_scale=False))
    # 2160 / 224 = 9.6428...; 256 * 9.6428... = 2468.57
    assert (g.out_w, g.out_h) == (2469, 2160)
    g = plan_geometry(320, 240, GeometrySettings(size="1920x1080", whole_scale=False))
    assert (g.pic_w, g.pic_h, g.pic_x, g.pic_y) == (1440, 1080, 240, 0)


def test_explicit_scale_overrides_the_fit():
    g = plan_geometry(320, 240, GeometrySettings(scale=3))
    assert (g.out_w, g.out_h) == (960, 720)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"fit": "3840by2160"}, r"fit must look like 3840x2160 \(got '3840by2160'\)"),
        ({"size": "3840x"}, r"size must look like 3840x2160 \(got '3840x'\)"),
        ({"size": "0x2160"}, r"size must be between 1x1 and 32768x32768 \(got '0x2160'\)"),
        ({"pixel_aspect": "8:0"}, r"pixel aspect must look like 8:7 or 1.25 \(got '8:0'\)"),
        ({"pixel_aspect": "9:1"}, r"pixel aspect must be between 1:8 and 8:1 \(got '9:1'\)"),
        ({"display_aspect": "wide"}, r"display aspect must look like 8:7 or 1.25 \(got 'wide'\)"),
        ({"scale": 0}, r"scale must be in \(0, 64\] \(got 0\)"),
        ({"scale": 65}, r"scale must be in \(0, 64\] \(got 65\)"),
    ],
)
def test_bad_geometry_settings_are_refused(kwargs, message):
    with pytest.raises(SettingsError, match=message):
        GeometrySettings(**kwargs)


def test_scale_larger_than_the_fixed_size_is_refused():
    with pytest.raises(SettingsError, match=r"scale 10 makes a 3200x2400 picture, larger than size 3840x2160"):
        plan_geometry(320, 240, GeometrySettings(size="3840x2160", scale=10))


def test_too_large_output_is_refused():
    with pytest.raises(SettingsError, match=r"output 32000x32000 is too large"):
        plan_geometry(1000, 1000, GeometrySettings(fit="32768x32768"))
