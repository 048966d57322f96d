"""HDR output and source display colour: PQ, BT.2020, the cICP/cLLI chunks, light held in cd/m²,
mask contrast near white, the tone pair with headroom, and the source primaries and whites."""

from __future__ import annotations

import json
import struct
import subprocess
import sys
import zlib
from fractions import Fraction
from pathlib import Path

import imagecodecs
import numpy as np
import pytest
from conftest import SAMPLES, TOL_ENERGY_FILE, TOL_MATRIX, TOL_REPORT, run
from hypothesis import assume, given
from hypothesis import settings as hypothesis_settings
from hypothesis import strategies as st
from PIL import Image

from crtfilter import color
from crtfilter.audit import REFERENCE_SOURCE
from crtfilter.errors import SettingsError
from crtfilter.masks import build_mask
from crtfilter.engine import render_codes
from crtfilter.plots import curve_data
from crtfilter.presets import load_preset
from crtfilter.scale import plan_geometry
from crtfilter.tone import ToneSettings, solve_channels, tone_pair

#: float64 round-off of a few operations on values of order 1 (this file's own tolerance).
ROUND_OFF = 1e-12

#: Half a step of a 16-bit full-range code: how closely a 16-bit code can place a PQ value.
HALF_CODE_16 = 0.5 / 65535

#: Half a unit in the last place of a value printed to 6 / 10 decimals.
HALF_ULP_6 = 5e-7
HALF_ULP_10 = 5e-11

#: Michelson contrast the HDR output must keep at 90 % grey, and the level below which
#: standard-range contrast counts as faded.
HDR_CONTRAST_MIN = 0.8
SDR_CONTRAST_FADED = 0.5

#: 1000 cd/m² peak over 203 cd/m² reference white: the default headroom.
DEFAULT_HEADROOM = 1000.0 / 203.0

#: Mask means drawn for the tone pair: (0.05, 1], leaving out (1 - 1e-5, 1), where the cut
#: curve's division by 1 - mu loses its digits (a known bug, covered in test_tone.py).
MU_TOP = 1.0 - 1e-5

PROPERTY = hypothesis_settings(max_examples=150, deadline=None)

SCENE = SAMPLES / "scene-320x240.png"


def michelson(values: np.ndarray) -> float:
    """(p99 - p1) / (p99 + p1), computed here without crtfilter."""
    lo, hi = np.percentile(np.asarray(values, dtype=np.float64), [1.0, 99.0])
    return float((hi - lo) / (hi + lo))


def png_chunks(data: bytes) -> list[tuple[int, bytes, bytes, int]]:
    """(offset, type, body, stored CRC) of every chunk of a PNG file."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    chunks, pos = [], 8
    while pos + 12 <= len(data):
        (length,) = struct.unpack(">I", data[pos:pos + 4])
        kind = data[pos + 4:pos + 8]
        body = data[pos + 8:pos + 8 + length]
        (crc,) = struct.unpack(">I", data[pos + 8 + length:pos + 12 + length])
        chunks.append((pos, kind, body, crc))
        pos += 12 + length
    return chunks


@pytest.fixture(scope="module")
def scene(tmp_path_factory) -> Path:
    """A 64x48 crop of a bundled scene, so that end-to-end runs stay quick."""
    path = tmp_path_factory.mktemp("hdr-in") / "scene.png"
    with Image.open(SCENE) as im:
        im.convert("RGB").crop((40, 100, 104, 148)).save(path)
    return path


@pytest.fixture(scope="module")
def hdr_render(scene, tmp_path_factory) -> tuple[Path, dict]:
    """The scene rendered by the command with --output-range hdr: the file and its report."""
    folder = tmp_path_factory.mktemp("hdr-out")
    out, report = folder / "hdr.png", folder / "hdr.json"
    result = run("render", scene, "-o", out, "--scale", 3, "--output-range", "hdr", "--report", report)
    assert result.exit_code == 0, result.stderr
    (entry,) = json.loads(report.read_text())
    return out, entry


def colour_srgb_luminance(path: Path, colour) -> float:
    """Mean relative luminance of an 8-bit sRGB file, computed with colour-science only."""
    with Image.open(path) as im:
        rgb = np.asarray(im.convert("RGB"), dtype=np.float64) / 255.0
    # reference library: colour-science sRGB decoding (IEC 61966-2-1)
    linear = colour.cctf_decoding(rgb, function="sRGB")
    # reference library: second row of colour-science's sRGB RGB-to-XYZ matrix (ITU-R BT.709)
    return float((linear @ colour.RGB_COLOURSPACES["sRGB"].matrix_RGB_to_XYZ[1]).mean())


def colour_pq_nits(codes: np.ndarray, colour) -> np.ndarray:
    """cd/m² per sample of 16-bit full-range PQ codes, computed with colour-science only."""
    # reference library: colour-science eotf_ST2084 (SMPTE ST 2084), in cd/m²
    return colour.models.eotf_ST2084(codes.astype(np.float64) / 65535.0)


# --------------------------------------------------------------------------
# SMPTE ST 2084 (PQ)


def test_pq_constants_are_the_published_fractions():
    # SMPTE ST 2084 (as read in colour-science's CONSTANTS_ST2084): m1 = 2610/16384,
    # m2 = 2523/32 (= 2523/4096 * 128), c1 = 3424/4096, c2 = 2413/128 (= 2413/4096 * 32),
    # c3 = 2392/128 (= 2392/4096 * 32)
    assert Fraction(color._PQ_M1) == Fraction(2610, 16384)
    assert Fraction(color._PQ_M2) == Fraction(2523, 32)
    assert Fraction(color._PQ_C1) == Fraction(3424, 4096)
    assert Fraction(color._PQ_C2) == Fraction(2413, 128)
    assert Fraction(color._PQ_C3) == Fraction(2392, 128)
    # follows from the fractions above: c3 = c1 + c2 - 1, so that 10000 cd/m² encodes to exactly 1
    assert Fraction(color._PQ_C3) == Fraction(color._PQ_C1) + Fraction(color._PQ_C2) - 1
    assert color.PQ_PEAK == 10000.0


def test_pq_16bit_codes_match_reference_library(colour):
    nits = np.concatenate([[0.0], np.geomspace(1e-3, 10000.0, 241), [100.0, 203.0, 1000.0]])
    # reference library: colour-science eotf_inverse_ST2084 (SMPTE ST 2084), rounded to 16 bits
    expected = np.round(65535.0 * colour.models.eotf_inverse_ST2084(nits))
    codes = color.encode_pq(nits, 16)
    assert codes.dtype == np.uint16
    np.testing.assert_array_equal(codes.astype(np.int64), expected.astype(np.int64))


@pytest.mark.parametrize(
    "nits, n, full10, narrow10",
    [
        # reference library: colour-science eotf_inverse_ST2084 (SMPTE ST 2084), computed values;
        # 10-bit codes: full range round(1023 N), narrow range round(64 + 876 N) (ITU-R BT.2100
        # quantisation, from memory)
        (100.0, 0.508078, 520, 509),
        (203.0, 0.580689, 594, 573),
        (1000.0, 0.751827, 769, 723),
        (10000.0, 1.0, 1023, 940),
    ],
)
def test_pq_encodes_the_published_table(nits, n, full10, narrow10):
    code = int(color.encode_pq(np.array([nits]), 16)[0])
    got = code / 65535.0
    # a 16-bit code places N within half a code; the table's N is printed to 6 decimals
    assert abs(got - n) <= HALF_CODE_16 + HALF_ULP_6
    assert round(1023 * got) == full10
    assert round(64 + 876 * got) == narrow10


def test_pq_of_zero_nits_is_not_zero_but_rounds_to_code_zero(colour):
    # reference library: colour-science eotf_inverse_ST2084(0) = c1^m2 = 7.3e-7 (SMPTE ST 2084)
    assert colour.models.eotf_inverse_ST2084(0.0) == pytest.approx(7.3e-7, rel=0.01)
    assert color.encode_pq(np.array([0.0]), 16)[0] == 0
    assert color.encode_pq(np.array([0.0]), 8)[0] == 0


def test_pq_8bit_codes_and_bad_depth():
    # reference library: colour-science eotf_inverse_ST2084 (SMPTE ST 2084): N(100) = 0.508078
    assert color.encode_pq(np.array([100.0, 10000.0]), 8).tolist() == [round(255 * 0.508078), 255]
    with pytest.raises(SettingsError, match=r"depth must be 8 or 16 \(got 10\)"):
        color.encode_pq(np.array([100.0]), 10)


def test_pq_decode_table_matches_reference_library(colour):
    table = color.pq_decode_table(16)
    assert table.shape == (65536,) and table.dtype == np.float64 and not table.flags.writeable
    # reference library: colour-science eotf_ST2084 (SMPTE ST 2084)
    expected = colour.models.eotf_ST2084(np.arange(65536) / 65535.0)
    np.testing.assert_allclose(table, expected, rtol=ROUND_OFF, atol=0)
    # SMPTE ST 2084: code 0 is 0 cd/m², the top code 10000 cd/m²
    assert table[0] == 0.0 and table[-1] == pytest.approx(10000.0, rel=ROUND_OFF)


def test_pq_encode_then_decode_returns_the_luminance():
    nits = np.array([0.5, 5.0, 48.0, 100.0, 203.0, 1000.0, 4000.0])
    back = color.pq_decode_table(16)[color.encode_pq(nits, 16)]
    # computed here from the SMPTE ST 2084 curve: from 0.5 cd/m² up one 16-bit step is at most
    # 0.036 % of the level, and the round trip is off by at most half a step
    np.testing.assert_allclose(back, nits, rtol=5e-4)


# --------------------------------------------------------------------------
# BT.709 to BT.2020


def test_bt709_to_bt2020_matrix_matches_reference_library(colour):
    ours = color.source_matrix("srgb", "d65", "hdr")
    # reference library: colour-science matrix_RGB_to_RGB(BT.709, BT.2020) (ITU-R BT.2020)
    theirs = colour.matrix_RGB_to_RGB(colour.RGB_COLOURSPACES["ITU-R BT.709"],
                                      colour.RGB_COLOURSPACES["ITU-R BT.2020"])
    np.testing.assert_allclose(ours, theirs, rtol=0, atol=ROUND_OFF)


def test_bt709_to_bt2020_matrix_matches_published_digits():
    ours = color.source_matrix("srgb", "d65", "hdr")
    # reference library: colour-science 0.4.7 matrix_RGB_to_RGB, computed to 10 decimals
    ten = np.array([[0.6274038959, 0.3292830384, 0.0433130657],
                    [0.0690972894, 0.9195403951, 0.0113623156],
                    [0.0163914389, 0.0880133079, 0.8955952532]])
    np.testing.assert_allclose(ours, ten, rtol=0, atol=HALF_ULP_10)
    # from memory: the ITU-R BT.2087-0 table to 4 decimals (not read here)
    four = np.array([[0.6274, 0.3293, 0.0433],
                     [0.0691, 0.9195, 0.0114],
                     [0.0164, 0.0880, 0.8956]])
    np.testing.assert_array_equal(np.round(ours, 4), four)


def test_bt2020_luminance_row_matches_reference_library(colour):
    # reference library: second row of colour-science's BT.2020 RGB-to-XYZ matrix (ITU-R BT.2020),
    # computed: [0.2627002120, 0.6779980715, 0.0593017165]
    row = colour.RGB_COLOURSPACES["ITU-R BT.2020"].matrix_RGB_to_XYZ[1]
    np.testing.assert_allclose(row, [0.2627002120, 0.6779980715, 0.0593017165], rtol=0, atol=HALF_ULP_10)
    # from memory: ITU-R BT.2020 prints these coefficients to 4 decimals
    np.testing.assert_allclose(color.LUMA_BT2020, row, rtol=0, atol=TOL_MATRIX)


# --------------------------------------------------------------------------
# Source primaries and whites


@pytest.mark.parametrize(
    "key, primaries, white",
    [
        # reference library: colour-science RGB_COLOURSPACES["ITU-R BT.709"] (ITU-R BT.709-6)
        ("srgb", [[0.64, 0.33], [0.30, 0.60], [0.15, 0.06]], [0.3127, 0.3290]),
        # reference library: colour-science RGB_COLOURSPACES["SMPTE C"] (SMPTE RP 145:2004), D65
        ("smpte-c", [[0.630, 0.340], [0.310, 0.595], [0.155, 0.070]], [0.3127, 0.3290]),
        # reference library: colour-science RGB_COLOURSPACES["EBU Tech. 3213-E"] (EBU Tech 3213)
        ("ebu", [[0.64, 0.33], [0.29, 0.60], [0.15, 0.06]], [0.313, 0.329]),
        # reference library: colour-science RGB_COLOURSPACES["NTSC (1953)"] (ITU-R BT.470 System M),
        # Illuminant C
        ("ntsc-1953", [[0.67, 0.33], [0.21, 0.71], [0.14, 0.08]], [0.31006, 0.31616]),
    ],
)
def test_source_primaries_name_the_published_colourspaces(colour, key, primaries, white):
    space = colour.RGB_COLOURSPACES[color.PRIMARIES[key]]
    np.testing.assert_allclose(space.primaries, primaries, rtol=0, atol=ROUND_OFF)
    np.testing.assert_allclose(space.whitepoint, white, rtol=0, atol=ROUND_OFF)


def test_source_whites_d65_and_c_are_the_cie_illuminants(colour):
    # reference library: colour-science CCS_ILLUMINANTS, CIE 1931 2° observer: D65 (0.3127, 0.3290)
    np.testing.assert_allclose(color.white_xy("d65"), [0.3127, 0.3290], rtol=0, atol=ROUND_OFF)
    # reference library: colour-science, Illuminant C (0.31006, 0.31616), the white of
    # RGB_COLOURSPACES["NTSC (1953)"] (ITU-R BT.470 System M)
    np.testing.assert_allclose(color.white_xy("C"), [0.31006, 0.31616], rtol=0, atol=ROUND_OFF)
    np.testing.assert_allclose(color.white_xy("C"), colour.RGB_COLOURSPACES["NTSC (1953)"].whitepoint,
                               rtol=0, atol=ROUND_OFF)


def test_9300k_white_is_on_the_daylight_locus_not_the_planckian(colour):
    # common practice, no source: a "9300 K" white is no standard and makers varied.
    ours = color.white_xy("9300k")
    # reference library: colour-science CCT_to_xy_CIE_D(9300), the CIE daylight locus
    np.testing.assert_allclose(ours, colour.temperature.CCT_to_xy_CIE_D(9300.0), rtol=0, atol=ROUND_OFF)
    # reference library: colour-science CCT_to_xy_CIE_D(9300), computed: (0.283145, 0.297113)
    np.testing.assert_allclose(ours, [0.283145, 0.297113], rtol=0, atol=HALF_ULP_6)
    # reference library: colour-science sd_blackbody(9300) with the CIE 1931 2° observer,
    # computed: the Planckian locus point (0.284865, 0.293223) is a different white
    assert np.hypot(*(ours - np.array([0.284865, 0.293223]))) > 3e-3


@pytest.mark.parametrize("target", ["sdr", "hdr"])
@pytest.mark.parametrize("white", color.WHITES)
@pytest.mark.parametrize("primaries", list(color.PRIMARIES))
def test_bradford_maps_source_white_to_output_white(primaries, white, target):
    m = color.source_matrix(primaries, white, target)
    if m is None:
        assert (primaries, white, target) == ("srgb", "d65", "sdr")
        return
    assert m.shape == (3, 3) and not m.flags.writeable
    # white stays white: the eye adapted to the old set's white
    np.testing.assert_allclose(m @ np.ones(3), np.ones(3), rtol=0, atol=ROUND_OFF)


@pytest.mark.parametrize("target", ["sdr", "hdr"])
@pytest.mark.parametrize("primaries", list(color.PRIMARIES))
def test_unadapted_whites_keep_their_colour(primaries, target):
    for white in ("9300k", "C"):
        w = color.source_matrix(primaries, white, target, adaptation="none") @ np.ones(3)
        # both whites lie bluewards of D65 on the chromaticity diagram (CIE 1931 xy above)
        assert w.argmax() == 2 and w.max() == pytest.approx(1.0, abs=ROUND_OFF)
        assert w.min() < 0.99
    w = color.source_matrix(primaries, "d65", target, adaptation="none")
    w = np.ones(3) if w is None else w @ np.ones(3)
    np.testing.assert_allclose(w, np.ones(3), rtol=0, atol=ROUND_OFF)


def test_unadapted_9300k_is_bluer_than_unadapted_c():
    blue_9300 = color.source_matrix("srgb", "9300k", "sdr", adaptation="none") @ np.ones(3)
    blue_c = color.source_matrix("srgb", "C", "sdr", adaptation="none") @ np.ones(3)
    # from memory: Illuminant C is about 6774 K, nearer D65 (about 6504 K) than 9300 K is
    assert blue_9300[0] < blue_c[0]


@pytest.mark.parametrize("target", ["sdr", "hdr"])
@pytest.mark.parametrize("white", color.WHITES)
@pytest.mark.parametrize("primaries", list(color.PRIMARIES))
def test_source_red_lands_on_its_adapted_primary(colour, primaries, white, target):
    m = color.source_matrix(primaries, white, target)
    m = np.eye(3) if m is None else m
    out_space = colour.RGB_COLOURSPACES[color.TARGETS[target]]
    # reference library: colour-science RGB_COLOURSPACES[...].matrix_RGB_to_XYZ of the output
    # (ITU-R BT.709 or BT.2020) and XYZ_to_xy
    got = colour.XYZ_to_xy(out_space.matrix_RGB_to_XYZ @ (m @ np.array([1.0, 0.0, 0.0])))
    source_red = colour.RGB_COLOURSPACES[color.PRIMARIES[primaries]].primaries[0]
    # reference library: colour-science chromatic_adaptation, von Kries with the Bradford
    # transform, from the source white to D65
    adapted = colour.chromatic_adaptation(colour.xy_to_XYZ(source_red), colour.xy_to_XYZ(color.white_xy(white)),
                                          colour.xy_to_XYZ(color.white_xy("d65")),
                                          method="Von Kries", transform="Bradford")
    np.testing.assert_allclose(got, colour.XYZ_to_xy(adapted), rtol=0, atol=ROUND_OFF)


def test_srgb_red_is_the_bt709_red_primary_in_bt2020(colour):
    red = color.source_matrix("srgb", "d65", "hdr") @ np.array([1.0, 0.0, 0.0])
    # reference library: colour-science BT.2020 RGB-to-XYZ matrix; ITU-R BT.709-6: red (0.64, 0.33)
    xy = colour.XYZ_to_xy(colour.RGB_COLOURSPACES["ITU-R BT.2020"].matrix_RGB_to_XYZ @ red)
    np.testing.assert_allclose(xy, [0.64, 0.33], rtol=0, atol=ROUND_OFF)


def test_ntsc_1953_red_falls_outside_bt709_and_is_clipped(colour):
    m = color.source_matrix("ntsc-1953", "C", "sdr")
    red = m @ np.array([1.0, 0.0, 0.0])
    # ITU-R BT.470 System M red (0.67, 0.33) lies outside the BT.709 triangle (ITU-R BT.709-6)
    assert red.min() < -0.01
    pixels = np.zeros((4, 4, 3), np.float32)
    pixels[:2] = [1.0, 0.0, 0.0]
    pixels[2:] = [0.5, 0.5, 0.5]
    converted, clipped = color.convert_gamut(pixels, m)
    assert clipped == pytest.approx(0.5)  # the red half, not the grey half
    assert converted.dtype == np.float32
    assert converted.min() >= 0.0 and converted.max() <= 1.0
    np.testing.assert_allclose(converted[2:], 0.5, rtol=0, atol=1e-6)


def test_unknown_source_colour_names_are_refused_with_a_suggestion():
    with pytest.raises(SettingsError, match=r"unknown primaries 'smpte_c'; did you mean 'smpte-c'\?"):
        color.source_matrix("smpte_c")
    with pytest.raises(SettingsError, match=r"unknown white '9300K'; did you mean '9300k'\?"):
        color.white_xy("9300K")


# --------------------------------------------------------------------------
# The written HDR file: cICP, cLLI, 16 bits


def test_cicp_chunk_bytes_and_place_before_idat(hdr_render, colour):
    out, _ = hdr_render
    data = out.read_bytes()
    at = data.find(b"cICP")
    assert at > 0
    # PNG Third Edition, cICP example for PQ (computed whole chunk):
    # length 4, "cICP", primaries 9, transfer 16, matrix 0, full range 1, CRC 4d 23 23 fe
    assert data[at - 4:at + 12] == bytes.fromhex("00000004 63494350 09100001 4d2323fe")
    # PNG Third Edition: cICP comes before PLTE and IDAT
    assert at < data.find(b"IDAT")
    # reference library: colour-science ITU-T H.273 tables: primaries 9 = BT.2020,
    # transfer 16 = ST 2084, matrix 0 = identity (RGB)
    body = data[at + 4:at + 8]
    np.testing.assert_allclose(colour.models.COLOUR_PRIMARIES_ITUTH273[body[0]],
                               colour.RGB_COLOURSPACES["ITU-R BT.2020"].primaries, rtol=0, atol=ROUND_OFF)
    assert colour.models.TRANSFER_CHARACTERISTICS_ITUTH273[body[1]] is colour.models.eotf_inverse_ST2084
    assert colour.models.MATRIX_COEFFICIENTS_ITUTH273[body[2]] == "Identity"


def test_every_chunk_crc_is_right_and_colour_chunks_precede_idat(hdr_render):
    out, _ = hdr_render
    chunks = png_chunks(out.read_bytes())
    # PNG Third Edition: each chunk ends with the CRC-32 of its type and data
    for _, kind, body, crc in chunks:
        assert zlib.crc32(kind + body) == crc, kind
    kinds = [kind for _, kind, _, _ in chunks]
    assert kinds[0] == b"IHDR" and kinds[-1] == b"IEND"
    assert kinds.count(b"cICP") == 1 and kinds.count(b"cLLI") == 1
    # PNG Third Edition: cICP and cLLI come before PLTE and IDAT
    first_idat = kinds.index(b"IDAT")
    assert kinds.index(b"cICP") < first_idat and kinds.index(b"cLLI") < first_idat


def test_clli_chunk_holds_the_reported_light_levels(hdr_render, colour):
    out, report = hdr_render
    (body,) = [body for _, kind, body, _ in png_chunks(out.read_bytes()) if kind == b"cLLI"]
    # PNG Third Edition: cLLI is u32 MaxCLL, u32 MaxFALL, in units of 0.0001 cd/m²
    assert len(body) == 8
    max_cll, max_fall = (v / 10000 for v in struct.unpack(">II", body))
    assert abs(max_cll - report["hdr"]["max_cll"]) <= 0.5e-4 + ROUND_OFF
    assert abs(max_fall - report["hdr"]["max_fall"]) <= 0.5e-4 + ROUND_OFF
    # Measured again from the file without crtfilter: the brightest component of any pixel,
    # and the frame's mean of each pixel's brightest component (no borders at this scale)
    nits = colour_pq_nits(imagecodecs.png_decode(out.read_bytes())[..., :3], colour)
    assert report["hdr"]["max_cll"] == pytest.approx(nits.max(), rel=TOL_REPORT)
    assert report["hdr"]["max_fall"] == pytest.approx(nits.max(axis=-1).mean(), rel=TOL_REPORT)
    assert 203.0 < max_cll <= 1000.0  # above reference white, within the peak
    assert report["hdr"]["peak"] == 1000.0 and report["hdr"]["reference_white"] == 203.0
    assert report["hdr"]["headroom"] == pytest.approx(DEFAULT_HEADROOM, rel=ROUND_OFF)


def test_hdr_file_is_16_bit(hdr_render):
    out, report = hdr_render
    data = out.read_bytes()
    # PNG Third Edition, IHDR: the bit depth follows width and height, byte 24 of the file
    assert data[12:16] == b"IHDR" and data[24] == 16
    codes = imagecodecs.png_decode(data)
    assert codes.dtype == np.uint16 and codes.shape == (144, 192, 3)
    assert report["settings"]["output"]["depth"] == 16


def test_sdr_render_has_no_cicp(scene, tmp_path):
    out = tmp_path / "sdr.png"
    result = run("render", scene, "-o", out, "--scale", 3)
    assert result.exit_code == 0, result.stderr
    data = out.read_bytes()
    kinds = [kind for _, kind, _, _ in png_chunks(data)]
    assert b"cICP" not in kinds and b"cLLI" not in kinds
    assert data[24] == 8


# --------------------------------------------------------------------------
# Light held in cd/m²


def test_hdr_output_nits_equal_input_times_reference_white(hdr_render, scene, colour):
    out, report = hdr_render
    lum = report["luminance"]
    assert lum["input_nits"] == pytest.approx(lum["input"] * 203.0, rel=ROUND_OFF)
    # the figure: output mean in cd/m² = input mean x reference white, within 1 %
    assert abs(lum["output_nits"] / (lum["input_nits"]) - 1) < TOL_ENERGY_FILE
    # the input measured as sRGB without crtfilter, times the reference white
    # (203 cd/m²: common practice, no source; ITU-R BT.2408 as quoted secondhand, from memory)
    src_nits = colour_srgb_luminance(scene, colour) * 203.0
    assert lum["input_nits"] == pytest.approx(src_nits, rel=TOL_REPORT)
    # the output decoded from the file without crtfilter
    x, y, w, h = report["geometry"]["picture"]
    nits = colour_pq_nits(imagecodecs.png_decode(out.read_bytes())[y:y + h, x:x + w, :3], colour)
    # reference library: second row of colour-science's BT.2020 RGB-to-XYZ matrix (ITU-R BT.2020)
    out_nits = float((nits @ colour.RGB_COLOURSPACES["ITU-R BT.2020"].matrix_RGB_to_XYZ[1]).mean())
    assert lum["output_nits"] == pytest.approx(out_nits, rel=TOL_REPORT)
    assert abs(out_nits / src_nits - 1) < TOL_ENERGY_FILE


@pytest.mark.parametrize("peak, white", [(4000.0, 100.0), (600.0, 300.0)])
def test_hdr_light_held_at_other_reference_whites(scene, tmp_path, colour, peak, white):
    out, report = tmp_path / "o.png", tmp_path / "o.json"
    result = run("render", scene, "-o", out, "--scale", 3, "--output-range", "hdr",
                 "--peak", peak, "--reference-white", white, "--report", report)
    assert result.exit_code == 0, result.stderr
    (entry,) = json.loads(report.read_text())
    assert entry["hdr"]["headroom"] == pytest.approx(peak / white, rel=ROUND_OFF)
    nits = colour_pq_nits(imagecodecs.png_decode(out.read_bytes())[..., :3], colour)
    # reference library: colour-science BT.2020 luminance row (ITU-R BT.2020)
    out_nits = float((nits @ colour.RGB_COLOURSPACES["ITU-R BT.2020"].matrix_RGB_to_XYZ[1]).mean())
    assert abs(out_nits / (colour_srgb_luminance(scene, colour) * white) - 1) < TOL_ENERGY_FILE
    assert nits.max() <= peak * (1 + TOL_REPORT)


def test_peak_below_reference_white_is_refused(scene, tmp_path):
    out = tmp_path / "bad.png"
    result = run("render", scene, "-o", out, "--output-range", "hdr", "--peak", 100)
    assert result.exit_code == 2
    assert "peak must be between reference_white (203) and 10000" in result.stderr
    assert result.stderr.count("\n") == 1 and not out.exists()


# --------------------------------------------------------------------------
# Mask contrast near white


def _grey_field(preset: str, output_range: str, colour) -> tuple[np.ndarray, object]:
    """Linear output (decoded with colour-science) of a uniform 90 % field, and the render."""
    code = int(color.encode_srgb(np.float32(0.9)))
    settings = load_preset(preset).with_options(scale=3, output_range=output_range).settings
    r = render_codes(np.full((48, 64, 3), code, np.uint8), settings)
    g = r.geometry
    # the 192x144 picture holds whole mask cells (3-px and 6-px triads, 3 rows per line)
    assert g.pic_w % r.mask.cell[1] == 0 and g.pic_h % r.mask.cell[0] == 0
    pic = r.codes[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w, :3]
    if output_range == "hdr":
        # reference library: colour-science eotf_ST2084 (SMPTE ST 2084), over the reference white
        lin = colour_pq_nits(pic, colour) / settings.reference_white
    else:
        # reference library: colour-science sRGB decoding (IEC 61966-2-1)
        lin = colour.cctf_decoding(pic.astype(np.float64) / (2**settings.depth - 1), function="sRGB")
    return lin, r


def test_90_percent_grey_code():
    # IEC 61966-2-1:1999: encode 0.9 -> 1.055 * 0.9^(1/2.4) - 0.055 = 0.95469, code 243
    assert int(color.encode_srgb(np.float32(0.9))) == 243


def test_hdr_keeps_mask_contrast_near_white_where_sdr_fades(colour):
    hdr, r_hdr = _grey_field("aperture-fine-within-4k", "hdr", colour)
    sdr, _ = _grey_field("aperture-fine-within-4k", "sdr", colour)
    mu = r_hdr.mask.mean
    assert r_hdr.encoding.headroom == pytest.approx(DEFAULT_HEADROOM, rel=ROUND_OFF)
    assert (1.0 / mu <= DEFAULT_HEADROOM).all()  # the condition under which the mask never fades
    assert all(p.linear for p in r_hdr.pairs)
    # reference library: colour-science BT.709 / BT.2020 luminance rows
    y_hdr = hdr @ colour.RGB_COLOURSPACES["ITU-R BT.2020"].matrix_RGB_to_XYZ[1]
    y_sdr = sdr @ colour.RGB_COLOURSPACES["sRGB"].matrix_RGB_to_XYZ[1]
    for hdr_values, sdr_values in ((hdr[..., 1], sdr[..., 1]), (y_hdr, y_sdr)):
        assert michelson(hdr_values) >= HDR_CONTRAST_MIN
        assert michelson(sdr_values) < SDR_CONTRAST_FADED
    # and both still hold the light of the 90 % field (IEC 61966-2-1:1999 decode, computed:
    # code 243 -> 0.896269)
    assert abs(y_hdr.mean() / 0.896269 - 1) < TOL_ENERGY_FILE
    assert abs(y_sdr.mean() / 0.896269 - 1) < TOL_ENERGY_FILE


def test_hdr_beats_sdr_near_white_even_when_the_mask_needs_more_than_the_headroom(colour):
    hdr, r_hdr = _grey_field("aperture-coarse-within-4k", "hdr", colour)
    sdr, _ = _grey_field("aperture-coarse-within-4k", "sdr", colour)
    assert (1.0 / r_hdr.mask.mean > DEFAULT_HEADROOM).all()
    assert not any(p.linear for p in r_hdr.pairs)
    # reference library: colour-science BT.709 / BT.2020 luminance rows
    y_hdr = hdr @ colour.RGB_COLOURSPACES["ITU-R BT.2020"].matrix_RGB_to_XYZ[1]
    y_sdr = sdr @ colour.RGB_COLOURSPACES["sRGB"].matrix_RGB_to_XYZ[1]
    assert michelson(hdr[..., 1]) > 2 * michelson(sdr[..., 1])
    assert michelson(y_hdr) > 2 * michelson(y_sdr)
    assert abs(y_hdr.mean() / y_sdr.mean() - 1) < TOL_ENERGY_FILE


# --------------------------------------------------------------------------
# The tone pair with headroom

means = st.one_of(st.floats(min_value=0.05, max_value=MU_TOP, exclude_min=True), st.just(1.0))
GRID = np.linspace(0.0, 1.0, 1025)


@PROPERTY
@given(mu=means, h=st.floats(min_value=1.0, max_value=12.0), softness=st.floats(0.0, 1.0),
       curve=st.sampled_from(["blend", "integer", "exponent"]))
def test_tone_pair_with_headroom_is_admissible_and_linear_exactly_within_it(mu, h, softness, curve):
    s = 1.0 + (1.0 / mu - 1.0) * (1.0 - softness)
    assume(abs(s - h) > 1e-9)
    pair = tone_pair(mu, ToneSettings(curve=curve, softness=softness), headroom=h)
    assert pair.headroom == h
    lift, cut = pair.lift(GRID), pair.cut(GRID)
    tol = ROUND_OFF * 1000  # a few float64 operations on values up to h = 12
    assert (cut >= -tol).all() and (cut <= GRID + tol).all()
    assert (lift >= GRID - tol).all() and (lift <= h + tol).all()
    is_line = bool(np.allclose(lift, s * GRID, rtol=0, atol=tol))
    assert is_line == (s <= h)
    if h > 1.0 and mu < 1.0:
        assert pair.linear == (s <= h)
    if pair.linear:
        assert pair.slope == pytest.approx(s, rel=ROUND_OFF)


@pytest.mark.parametrize("headroom", [0.5, 0.999, 1001.0])
def test_tone_pair_refuses_headroom_out_of_range(headroom):
    with pytest.raises(SettingsError, match=rf"headroom must be between 1 and 1000 \(got {headroom}\)"):
        tone_pair(0.3, headroom=headroom)


def test_curves_command_refuses_headroom_below_one(tmp_path):
    out = tmp_path / "c.png"
    result = run("curves", "--mean", 0.3, "--headroom", 0.5, "-o", out)
    assert result.exit_code == 2
    assert result.stderr == "crtfilter: error: headroom must be between 1 and 1000 (got 0.5)\n"
    assert not out.exists()


def test_piecewise_and_multiply_stay_within_headroom():
    for curve in ("piecewise", "multiply"):
        pair = tone_pair(0.2, ToneSettings(curve=curve), headroom=DEFAULT_HEADROOM)
        lift, cut = pair.lift(GRID), pair.cut(GRID)
        assert (lift <= DEFAULT_HEADROOM + ROUND_OFF).all() and (cut >= -ROUND_OFF).all()
        assert not pair.linear


# --------------------------------------------------------------------------
# Source colour from the command and from preset files


def test_render_with_ebu_primaries_and_9300k_white_records_gamut(scene, tmp_path):
    out, report = tmp_path / "ebu.png", tmp_path / "ebu.json"
    result = run("render", scene, "-o", out, "--scale", 3, "--primaries", "ebu", "--white", "9300k",
                 "--report", report)
    assert result.exit_code == 0, result.stderr
    (entry,) = json.loads(report.read_text())
    assert entry["gamut"]["primaries"] == "ebu" and entry["gamut"]["white"] == "9300k"
    assert 0.0 <= entry["gamut"]["clipped"] <= 1.0
    assert entry["settings"]["source"]["primaries"] == "ebu"
    assert abs(entry["luminance"]["ratio"] - 1) < TOL_ENERGY_FILE


@pytest.mark.parametrize(
    "flag, value, message",
    [
        ("--primaries", "ebuu", "unknown primaries 'ebuu'; did you mean 'ebu'?"),
        ("--white", "9300", "unknown white '9300'; did you mean '9300k'?"),
        ("--output-range", "hdr10", "unknown output range 'hdr10'; did you mean 'hdr'?"),
    ],
)
def test_unknown_source_colour_option_suggests_and_exits_2(scene, tmp_path, flag, value, message):
    out = tmp_path / "x.png"
    result = run("render", scene, "-o", out, "--scale", 3, flag, value)
    assert result.exit_code == 2
    assert message in result.stderr
    assert result.stderr.count("\n") == 1 and "Traceback" not in result.stderr
    assert not out.exists()


def test_preset_file_source_primaries_and_white(tmp_path):
    preset = tmp_path / "old-set.toml"
    preset.write_text('description = "an old set"\n\n[source]\nprimaries = "ntsc-1953"\nwhite = "C"\n\n'
                      '[output]\nscale = 3\n', encoding="utf-8")
    picture = np.full((48, 64, 3), 128, np.uint8)
    picture[:, :32] = (255, 0, 0)  # pure source red, outside BT.709 once converted
    src = tmp_path / "half-red.png"
    Image.fromarray(picture).save(src)
    out, report = tmp_path / "o.png", tmp_path / "o.json"
    result = run("render", src, "-o", out, "-p", preset, "--report", report)
    assert result.exit_code == 0, result.stderr
    (entry,) = json.loads(report.read_text())
    assert entry["gamut"]["primaries"] == "ntsc-1953" and entry["gamut"]["white"] == "C"
    assert entry["gamut"]["clipped"] == pytest.approx(0.5)  # the red half only
    bad = tmp_path / "bad.toml"
    bad.write_text('[source]\nprimaries = "pal"\n', encoding="utf-8")
    with pytest.raises(SettingsError, match=r"unknown primaries 'pal'"):
        load_preset(bad)


# --------------------------------------------------------------------------
# inspect, the caution in --help, curves


def test_inspect_holds_every_figure_of_an_hdr_file(hdr_render):
    out, _ = hdr_render
    result = run("inspect", out, "--json")
    assert result.exit_code == 0, result.stdout + result.stderr
    found = json.loads(result.stdout)
    assert found["input_found"] and found["holds"]
    figures = {row["figure"] for row in found["checks"]}
    assert {"luminance.output", "luminance.input", "luminance.ratio", "local.p99"} <= figures
    assert all(row["holds"] for row in found["checks"])
    assert found["record"]["settings"]["output"]["range"] == "hdr"
    text = run("inspect", out)
    assert text.exit_code == 0 and "DOES NOT HOLD" not in text.stdout


@pytest.mark.parametrize("args", [["--help"], ["render", "--help"]])
def test_help_cautions_about_bright_hdr_output(args):
    result = run(*args)
    assert result.exit_code == 0
    words = " ".join(result.stdout.split())
    assert "very bright" in words
    assert "HDR-capable viewer" in words


def test_installed_command_help_cautions_about_hdr():
    exe = Path(sys.executable).with_name("crtfilter")
    cmd = [str(exe)] if exe.exists() else [sys.executable, "-m", "crtfilter"]
    done = subprocess.run(cmd + ["--help"], check=False, capture_output=True, text=True)
    assert done.returncode == 0
    words = " ".join(done.stdout.split())
    assert "very bright" in words and "HDR-capable viewer" in words


def test_curves_of_the_hdr_preset(tmp_path):
    out = tmp_path / "curves.png"
    result = run("curves", "aperture-hdr-within-4k", "-o", out)
    assert result.exit_code == 0, result.stderr
    with Image.open(out) as im:
        assert im.format == "PNG" and im.width > 100
    p = load_preset("aperture-hdr-within-4k")
    g = plan_geometry(*REFERENCE_SOURCE, p.settings.geometry)
    pairs = solve_channels(build_mask(g, p.settings.mask).mean, p.settings.tone,
                           headroom=p.settings.encoding.headroom)
    data = curve_data(pairs)
    assert data["channels"]
    for ch in data["channels"]:
        assert ch["headroom"] == pytest.approx(DEFAULT_HEADROOM, rel=ROUND_OFF)
        assert round(ch["headroom"], 3) == 4.926
        assert ch["linear"] is True
        lift = np.asarray(ch["lift"])
        np.testing.assert_allclose(lift, ch["slope"] * np.asarray(data["x"]), rtol=0, atol=ROUND_OFF)
        assert lift.max() <= ch["headroom"]
