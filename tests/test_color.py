"""Transfer tables, sRGB encoding, luminance weights and float64 accumulation."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import TOL_MATRIX, TOL_TRANSFER
from hypothesis import given, settings
from hypothesis import strategies as st

from crtfilter.color import (
    LUMA_BT709,
    TRANSFERS,
    DecodeSettings,
    decode,
    decode_table,
    encode_srgb,
    mean_luminance,
)
from crtfilter.errors import SettingsError

CODES_8 = np.arange(256, dtype=np.uint8)
CODES_16 = np.arange(65536, dtype=np.uint16)


def _iec_decode(v: np.ndarray) -> np.ndarray:
    # IEC 61966-2-1:1999: breakpoint 0.04045, linear segment V / 12.92,
    # curve ((V + 0.055) / 1.055) ** 2.4
    v = np.asarray(v, dtype=np.float64)
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)


def _iec_encode(x: np.ndarray) -> np.ndarray:
    # IEC 61966-2-1:1999: breakpoint 0.0031308, linear segment 12.92 L,
    # curve 1.055 L ** (1 / 2.4) - 0.055
    x = np.asarray(x, dtype=np.float64)
    return np.where(x <= 0.0031308, 12.92 * x, 1.055 * x ** (1 / 2.4) - 0.055)


# --------------------------------------------------------------------------
# sRGB decoding


def test_srgb_table_8bit_matches_reference_library(colour):
    table = decode_table("srgb", 8)
    # reference library: colour-science eotf_sRGB
    expected = colour.models.eotf_sRGB(np.arange(256) / 255)
    assert table.dtype == np.float32 and table.shape == (256,)
    np.testing.assert_allclose(table, expected, rtol=0, atol=TOL_TRANSFER)


@pytest.mark.parametrize(
    "code, linear",
    [
        # reference library: colour-science eotf_sRGB (computed values)
        (0, 0.0),
        (1, 0.000303527),
        (10, 0.00303527),
        (64, 0.0512695),
        (128, 0.215861),
        (188, 0.502886),
        (255, 1.0),
    ],
)
def test_srgb_table_8bit_matches_published_values(code, linear):
    assert abs(float(decode_table("srgb", 8)[code]) - linear) <= TOL_TRANSFER


def test_srgb_table_matches_iec_formula_at_both_depths():
    np.testing.assert_allclose(
        decode_table("srgb", 8), _iec_decode(np.arange(256) / 255), rtol=0, atol=TOL_TRANSFER
    )
    np.testing.assert_allclose(
        decode_table("srgb", 16), _iec_decode(np.arange(65536) / 65535), rtol=0, atol=TOL_TRANSFER
    )


def test_srgb_table_16bit_matches_reference_library(colour):
    # A spread over the range, with the codes on either side of the breakpoint
    # (0.04045 * 65535 = 2650.9) and both ends.
    codes = np.unique(np.concatenate([
        np.linspace(0, 65535, 257).round().astype(np.int64),
        [1, 2, 2649, 2650, 2651, 2652, 32767, 32768, 65534],
    ]))
    table = decode_table("srgb", 16)
    assert table.dtype == np.float32 and table.shape == (65536,)
    # reference library: colour-science eotf_sRGB
    expected = colour.models.eotf_sRGB(codes / 65535)
    np.testing.assert_allclose(table[codes], expected, rtol=0, atol=TOL_TRANSFER)


def test_decode_looks_up_the_table_for_each_depth():
    img8 = np.array([[[0, 128, 255]]], np.uint8)
    img16 = np.array([[[0, 32768, 65535]]], np.uint16)
    out8, out16 = decode(img8), decode(img16)
    assert out8.dtype == np.float32 and out8.shape == img8.shape
    np.testing.assert_array_equal(out8, decode_table("srgb", 8)[img8])
    np.testing.assert_array_equal(out16, decode_table("srgb", 16)[img16])


def test_decode_rejects_float_input():
    with pytest.raises(SettingsError, match="must be uint8 or uint16"):
        decode(np.zeros((2, 2, 3), np.float32))


def test_decode_table_rejects_other_bit_depths():
    with pytest.raises(SettingsError, match=r"bits must be 8 or 16 \(got 12\)"):
        decode_table("srgb", 12)


def test_decode_table_is_read_only():
    with pytest.raises(ValueError, match="read-only"):
        decode_table("srgb", 8)[0] = 1.0


@pytest.mark.parametrize("transfer", list(TRANSFERS))
def test_decode_tables_rise_from_zero_to_one(transfer):
    table = decode_table(transfer, 8)
    assert table[0] == 0.0 and table[-1] == 1.0
    assert np.all(np.diff(table) > 0)


# --------------------------------------------------------------------------
# sRGB encoding


@pytest.mark.parametrize("depth", [8, 16])
def test_encode_matches_reference_library_on_a_dense_ramp(colour, depth):
    top = 2**depth - 1
    x = np.linspace(0, 1, 200_001, dtype=np.float32)
    # reference library: colour-science eotf_inverse_sRGB, evaluated in float64
    ref = colour.models.eotf_inverse_sRGB(x.astype(np.float64))
    code = encode_srgb(x, depth)
    assert code.dtype == (np.uint8 if depth == 8 else np.uint16)
    # Correct rounding up to the float32 evaluation error of the curve.
    assert np.all(np.abs(code / top - ref) <= 0.5 / top + TOL_TRANSFER)
    # Away from the half-code boundaries the codes agree exactly.
    clear = np.abs((ref * top) % 1 - 0.5) > TOL_TRANSFER * top
    np.testing.assert_array_equal(code[clear], np.floor(ref[clear] * top + 0.5))


@settings(max_examples=50, deadline=None)
@given(x=st.floats(0, 1, width=32), depth=st.sampled_from([8, 16]))
def test_encode_rounds_reference_library_curve(colour, x, depth):
    top = 2**depth - 1
    # reference library: colour-science eotf_inverse_sRGB
    ref = float(colour.models.eotf_inverse_sRGB(np.float64(x)))
    code = int(encode_srgb(np.array([x], np.float32), depth)[0])
    assert abs(code / top - ref) <= 0.5 / top + TOL_TRANSFER


@pytest.mark.parametrize("depth", [8, 16])
def test_encode_matches_iec_formula(depth):
    top = 2**depth - 1
    x = np.linspace(0, 1, 100_003, dtype=np.float32)
    code = encode_srgb(x, depth)
    # IEC 61966-2-1:1999: inverse of the sRGB EOTF, hand-written above
    assert np.all(np.abs(code / top - _iec_encode(x)) <= 0.5 / top + TOL_TRANSFER)


@pytest.mark.parametrize(
    "linear, encoded",
    [
        # reference library: colour-science eotf_inverse_sRGB (computed values)
        (0.18, 0.461356),
        (0.5, 0.735357),
    ],
)
@pytest.mark.parametrize("depth", [8, 16])
def test_encode_matches_published_values(linear, encoded, depth):
    top = 2**depth - 1
    assert int(encode_srgb(np.array(linear), depth)) == round(encoded * top)


@pytest.mark.parametrize("depth, dtype", [(8, np.uint8), (16, np.uint16)])
def test_decode_encode_round_trip_returns_every_code(depth, dtype):
    codes = np.arange(2**depth).astype(dtype)
    np.testing.assert_array_equal(encode_srgb(decode(codes), depth), codes)


def test_decode_encode_decode_is_stable_for_every_8bit_code():
    linear = decode(CODES_8)
    np.testing.assert_array_equal(decode(encode_srgb(linear, 8)), linear)


@pytest.mark.parametrize("depth", [8, 16])
def test_encode_clips_out_of_range_input(depth):
    top = 2**depth - 1
    x = np.array([-1e6, -1.0, -1e-9, -0.0, 1.0 + 1e-6, 1.5, 1e6, np.inf, -np.inf])
    expected = [0, 0, 0, 0, top, top, top, top, 0]
    np.testing.assert_array_equal(encode_srgb(x, depth), expected)


@settings(max_examples=50, deadline=None)
@given(x=st.one_of(st.floats(max_value=0.0, width=32), st.floats(min_value=1.0, width=32)))
def test_encode_of_out_of_range_equals_encode_of_clipped(x):
    clipped = min(max(x, 0.0), 1.0)
    assert encode_srgb(np.array([x]), 16)[0] == encode_srgb(np.array([clipped]), 16)[0]


def test_encode_clips_float64_beyond_float32_range_quietly():
    x = np.array([-1e39, 1e39], np.float64)
    np.testing.assert_array_equal(encode_srgb(x, 8), [0, 255])


def test_encode_takes_nan_as_black():
    np.testing.assert_array_equal(encode_srgb(np.array([np.nan, 0.5]), 8), [0, 188])


def test_encode_rejects_other_depths():
    with pytest.raises(SettingsError, match=r"depth must be 8 or 16 \(got 10\)"):
        encode_srgb(np.zeros(3), 10)


# --------------------------------------------------------------------------
# BT.1886 and gamma 2.2


@pytest.mark.parametrize("bits", [8, 16])
def test_bt1886_table_matches_reference_library(colour, bits):
    v = np.arange(2**bits) / (2**bits - 1)
    # reference library: colour-science eotf_BT1886 with L_B = 0, L_W = 1
    expected = colour.models.eotf_BT1886(v, L_B=0, L_W=1)
    np.testing.assert_allclose(decode_table("bt1886", bits), expected, rtol=0, atol=TOL_TRANSFER)


def test_bt1886_with_black_zero_is_the_annex_formula():
    v = np.arange(256) / 255
    # ITU-R BT.1886 Annex 1: L = a max(V + b, 0)^2.4; with Lb = 0 and Lw = 1,
    # a = 1 and b = 0
    np.testing.assert_allclose(decode_table("bt1886", 8), v**2.4, rtol=0, atol=TOL_TRANSFER)


def test_bt1886_matches_published_midpoint():
    # reference library: colour-science eotf_BT1886(0.5, L_B=0, L_W=100) = 18.946457
    # (computed value), scaled here to L_W = 1
    assert abs(float(TRANSFERS["bt1886"](np.array(0.5))) - 18.946457 / 100) <= TOL_TRANSFER


def test_gamma22_table_is_a_plain_power():
    for bits in (8, 16):
        v = np.arange(2**bits) / (2**bits - 1)
        np.testing.assert_allclose(decode_table("gamma-2.2", bits), v**2.2, rtol=0, atol=TOL_TRANSFER)


# --------------------------------------------------------------------------
# Luminance


def test_luma_weights_are_the_rounded_iec_matrix_row(colour):
    # reference library: colour-science RGB_COLOURSPACES['sRGB'].matrix_RGB_to_XYZ,
    # second row, as rounded in IEC 61966-2-1:1999
    row = colour.RGB_COLOURSPACES["sRGB"].matrix_RGB_to_XYZ[1]
    np.testing.assert_array_equal(LUMA_BT709, row)
    np.testing.assert_array_equal(LUMA_BT709, [0.2126, 0.7152, 0.0722])


def test_luma_weights_match_the_bt709_normalised_primary_matrix(colour):
    # ITU-R BT.709-6: primaries R(0.64, 0.33), G(0.30, 0.60), B(0.15, 0.06), white D65
    primaries = np.array([[0.64, 0.33], [0.30, 0.60], [0.15, 0.06]])
    white = np.array([0.3127, 0.3290])
    # reference library: colour-science RGB_COLOURSPACES['ITU-R BT.709'] holds the same
    space = colour.RGB_COLOURSPACES["ITU-R BT.709"]
    np.testing.assert_array_equal(space.primaries, primaries)
    np.testing.assert_array_equal(space.whitepoint, white)
    # reference library: colour-science normalised_primary_matrix (computed row,
    # 10 decimals)
    row = colour.normalised_primary_matrix(primaries, white)[1]
    np.testing.assert_array_equal(np.round(row, 10), [0.2126390059, 0.7151686788, 0.0721923154])
    np.testing.assert_allclose(LUMA_BT709, row, rtol=0, atol=TOL_MATRIX)


def test_mean_luminance_weights_each_primary():
    for k, weight in enumerate([0.2126, 0.7152, 0.0722]):  # ITU-R BT.709-6 item 3.2
        img = np.zeros((4, 5, 3), np.float32)
        img[..., k] = 1.0
        assert mean_luminance(img) == weight


def test_mean_luminance_accumulates_in_float64():
    values = np.array([0.1, 0.3, 0.7], np.float32)
    img = np.empty((2160, 3840, 3), np.float32)
    img[...] = values
    exact = float(np.dot(values.astype(np.float64), [0.2126, 0.7152, 0.0722]))
    # The image is one where a float32 running sum drifts far from the truth.
    drifted = img.reshape(-1, 3).sum(axis=0, dtype=np.float32) / np.float32(2160 * 3840)
    assert np.abs(drifted.astype(np.float64) - values).max() > 1e-4
    assert abs(mean_luminance(img) - exact) <= 1e-9


# --------------------------------------------------------------------------
# Settings


def test_misspelt_transfer_suggests_the_right_name():
    with pytest.raises(SettingsError, match=r"unknown transfer 'srbg'; did you mean 'srgb'\?"):
        DecodeSettings("srbg")


def test_unknown_transfer_lists_the_allowed_names():
    with pytest.raises(SettingsError, match="allowed: srgb, gamma-2.2, bt1886"):
        DecodeSettings("pq")
