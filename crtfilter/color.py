"""Transfer functions and relative luminance.

Everything inside the pipeline is linear light, float32, shape (H, W, 3), in
[0, 1]. This module converts at the edges: code values to linear light on the
way in (by table for integer input) and linear light to code values on the way
out. Every curve and matrix is written out from its standard; the tables are
built from them once per bit depth and cached. colour-science is the reference
the tests hold them to (it is not imported here).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from .errors import SettingsError, check_choice

#: ITU-R BT.709-6 luminance coefficients (the second row of the RGB-to-XYZ
#: matrix for BT.709 primaries and D65, as rounded in IEC 61966-2-1).
LUMA_BT709 = np.array([0.2126, 0.7152, 0.0722], dtype=np.float64)

#: Source display primaries, keyed by the names used in presets and the CLI,
#: valued by colour-science's colourspace names (what the tests compare with).
PRIMARIES = {
    "srgb": "ITU-R BT.709",          # ITU-R BT.709 / IEC 61966-2-1
    "smpte-c": "SMPTE C",            # SMPTE RP 145
    "ebu": "EBU Tech. 3213-E",       # EBU Tech 3213
    "ntsc-1953": "NTSC (1953)",      # ITU-R BT.470 System M
}

#: Source display whites. 9300 K is common practice, not a standard; its
#: chromaticity here is on the CIE daylight locus.
WHITES = ("d65", "9300k", "C")

#: Output colourspaces by output range.
TARGETS = {"sdr": "ITU-R BT.709", "hdr": "ITU-R BT.2020"}

#: Relative luminance coefficients of BT.2020 RGB (ITU-R BT.2020, table 4).
LUMA_BT2020 = np.array([0.2627, 0.6780, 0.0593], dtype=np.float64)


# Every curve and matrix is written out here from its standard rather than taken
# from colour-science: importing colour-science costs about half a second, in every
# process of a batch. The tests hold them to colour-science's functions.


def _srgb_decode(v: np.ndarray) -> np.ndarray:
    # IEC 61966-2-1:1999: L = V / 12.92 for V <= 0.04045, else ((V + 0.055) / 1.055)^2.4
    v = np.asarray(v, dtype=np.float64)
    return np.where(v <= 0.04045, v / 12.92, np.power((v + 0.055) / 1.055, 2.4))


def _gamma22_decode(v: np.ndarray) -> np.ndarray:
    return np.power(v, 2.2)


def _bt1886_decode(v: np.ndarray) -> np.ndarray:
    # ITU-R BT.1886 with black level 0 and white 1: a = 1, b = 0, so L = V^2.4,
    # the ideal display the Recommendation describes.
    return np.power(np.maximum(np.asarray(v, dtype=np.float64), 0.0), 2.4)


#: Source transfer functions, keyed by the names used in presets and the CLI.
TRANSFERS = {
    "srgb": _srgb_decode,
    "gamma-2.2": _gamma22_decode,
    "bt1886": _bt1886_decode,
}


@dataclass(frozen=True)
class DecodeSettings:
    """How source code values become linear light.

    Parameters
    ----------
    transfer : str
        One of :data:`TRANSFERS`: ``"srgb"`` (IEC 61966-2-1, the default),
        ``"gamma-2.2"`` (a pure 2.2 power) or ``"bt1886"`` (ITU-R BT.1886 with
        black level 0).
    alpha : str
        What transparency becomes: ``"over:COLOR"`` composites the picture
        over a colour in linear light (COLOR: a name or ``#rrggbb``; default
        black), ``"keep"`` leaves colour alone and carries alpha through to an
        RGBA output.
    primaries : str
        The source display's primaries, a key of :data:`PRIMARIES`.
    white : str
        The source display's white, one of :data:`WHITES`.
    white_adaptation : str
        ``"bradford"``: adapt the source white to the output's D65 (white
        stays white, as the eye adapted to the old set); ``"none"``: keep the
        source white's own colour (a 9300 K white shows bluish), scaled to fit.
    """

    transfer: str = "srgb"
    alpha: str = "over:black"
    primaries: str = "srgb"
    white: str = "d65"
    white_adaptation: str = "bradford"

    def __post_init__(self):
        check_choice("transfer", self.transfer, TRANSFERS)
        backdrop_code(self.alpha)
        check_choice("primaries", self.primaries, PRIMARIES)
        check_choice("white", self.white, WHITES)
        check_choice("white adaptation", self.white_adaptation, ("bradford", "none"))

    @property
    def keep_alpha(self) -> bool:
        return self.alpha == "keep"


def backdrop_code(alpha: str) -> tuple[int, int, int] | None:
    """The 8-bit sRGB colour an ``"over:COLOR"`` alpha setting composites over (None for keep).

    Raises
    ------
    SettingsError
        For anything but ``keep`` or ``over:`` and a colour Pillow knows.
    """
    text = str(alpha)
    if text == "keep":
        return None
    kind, _, colour = text.partition(":")
    if kind != "over":
        raise SettingsError(f"alpha must be keep or over:COLOR, e.g. over:black or over:#202830 (got {alpha!r})")
    from PIL import ImageColor

    try:
        rgb = ImageColor.getrgb(colour or "black")
    except ValueError:
        raise SettingsError(f"alpha: unknown colour {colour!r}; use a name (black, white, grey) "
                            f"or #rrggbb") from None
    return tuple(rgb[:3])


@lru_cache(maxsize=8)
def decode_table(transfer: str = "srgb", bits: int = 8) -> np.ndarray:
    """Return the table mapping every code value to linear light.

    Parameters
    ----------
    transfer : str
        A key of :data:`TRANSFERS`.
    bits : int
        8 or 16.

    Returns
    -------
    numpy.ndarray
        float32, shape (2**bits,), range [0, 1]; read-only.
    """
    DecodeSettings(transfer)
    if bits not in (8, 16):
        raise SettingsError(f"bits must be 8 or 16 (got {bits})")
    codes = np.arange(2**bits, dtype=np.float64) / (2**bits - 1)
    table = np.clip(TRANSFERS[transfer](codes), 0.0, 1.0).astype(np.float32)
    table.flags.writeable = False
    return table


def decode(codes: np.ndarray, settings: DecodeSettings = DecodeSettings()) -> np.ndarray:
    """Convert integer code values to linear light by table look-up.

    Parameters
    ----------
    codes : numpy.ndarray
        uint8 or uint16, any shape.
    settings : DecodeSettings

    Returns
    -------
    numpy.ndarray
        float32, same shape, range [0, 1].

    References
    ----------
    IEC 61966-2-1:1999 (sRGB); ITU-R BT.1886 (reference EOTF).
    """
    if codes.dtype == np.uint8:
        bits = 8
    elif codes.dtype == np.uint16:
        bits = 16
    else:
        raise SettingsError(f"code values must be uint8 or uint16 (got {codes.dtype})")
    return decode_table(settings.transfer, bits)[codes]


def encode_srgb(linear: np.ndarray, depth: int = 8, *, dither: np.ndarray | None = None) -> np.ndarray:
    """Encode linear light with the sRGB OETF and round to integer codes.

    Parameters
    ----------
    linear : numpy.ndarray
        float, any shape; values outside [0, 1] are clipped, NaN is taken as 0.
    depth : int
        8 or 16 bits per sample.
    dither : numpy.ndarray, optional
        Offsets in code values added before rounding (broadcast against
        ``linear``), from :func:`dither_offsets`.

    Returns
    -------
    numpy.ndarray
        uint8 (depth 8) or uint16 (depth 16), same shape.

    References
    ----------
    IEC 61966-2-1:1999, the inverse of the sRGB EOTF:
    V = 12.92 L for L <= 0.0031308, else 1.055 L^(1/2.4) - 0.055.
    """
    if depth not in (8, 16):
        raise SettingsError(f"depth must be 8 or 16 (got {depth})")
    top = float(2**depth - 1)
    # Clip in the input's own precision first: a float64 value beyond the
    # float32 range must not overflow on the way in. NaN becomes black.
    x = np.nan_to_num(np.clip(np.asarray(linear), 0.0, 1.0), nan=0.0).astype(np.float32, copy=False)
    v = np.where(
        x <= 0.0031308,
        x * np.float32(12.92),
        np.float32(1.055) * np.power(x, np.float32(1 / 2.4)) - np.float32(0.055),
    )
    v *= np.float32(top)
    v += np.float32(0.5)
    if dither is not None:
        v += dither
        np.clip(v, 0.0, top, out=v)
    return v.astype(np.uint8 if depth == 8 else np.uint16)


#: Dithering before rounding to code values, keyed by the names used in presets and the CLI.
DITHERS = {
    "none": "round to the nearest code",
    "ordered": "an 8x8 Bayer threshold matrix: a fine fixed pattern, no noise",
    "noise": "triangular-PDF noise of two code values' width: no pattern, no banding",
}


def _bayer(n: int) -> np.ndarray:
    m = np.zeros((1, 1), np.int64)
    while m.shape[0] < n:
        m = np.block([[4 * m, 4 * m + 2], [4 * m + 3, 4 * m + 1]])
    return m


_BAYER8 = ((_bayer(8) + 0.5) / 64.0 - 0.5).astype(np.float32)


def dither_offsets(kind: str, shape: tuple[int, int, int], *, top: int = 0, seed: int = 0) -> np.ndarray | None:
    """Return the offsets (in code values) that dither a band of an image.

    Parameters
    ----------
    kind : str
        A key of :data:`DITHERS`.
    shape : (h, w, channels)
        The band's shape.
    top : int
        Row of the band's first line in the whole picture, so that the ordered
        pattern and the noise do not depend on how the picture is cut into bands.
    seed : int
        Seed of the noise.

    Returns
    -------
    numpy.ndarray or None
        float32, broadcastable to ``shape``; zero-mean: ordered offsets are
        uniform on (-0.5, 0.5), noise is triangular on (-1, 1). None for "none".
    """
    check_choice("dither", kind, DITHERS)
    h, w, c = shape
    if kind == "none":
        return None
    if kind == "ordered":
        rows = (np.arange(top, top + h) % 8)[:, None]
        cols = (np.arange(w) % 8)[None, :]
        return _BAYER8[rows, cols][..., None]
    rows = np.arange(top, top + h, dtype=np.uint64)[:, None, None]
    cols = np.arange(w, dtype=np.uint64)[None, :, None]
    chans = np.arange(c, dtype=np.uint64)[None, None, :]
    return noise_offsets(rows, cols, chans, seed)


#: Largest picture width the noise counter leaves room for (a power of two).
_NOISE_COLUMNS = np.uint64(1 << 20)


def _mix64(z: np.ndarray) -> np.ndarray:
    """The splitmix64 finaliser: a bijection of 64-bit words whose output bits all
    depend on every input bit (common practice, no source)."""
    with np.errstate(over="ignore"):
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


def noise_offsets(rows: np.ndarray, cols: np.ndarray, chans: np.ndarray, seed: int = 0) -> np.ndarray:
    """Triangular noise on (-1, 1) for each (row, column, channel), from a counter.

    Each value depends only on its position and the seed (a hash of a counter,
    no generator state), so any band of a picture, computed by any route, gets
    the same noise. The fast path computes the same words in its own code.

    Returns
    -------
    numpy.ndarray
        float32, the broadcast shape of the three index arrays.
    """
    base = ((rows * _NOISE_COLUMNS + cols) * np.uint64(4) + chans) * np.uint64(2)
    key = np.uint64(seed) * np.uint64(0x9E3779B97F4A7C15)
    with np.errstate(over="ignore"):
        first = _mix64(base + key)
        second = _mix64(base + np.uint64(1) + key)
    scale = np.float32(2.0**-24)
    return ((first >> np.uint64(40)).astype(np.float32) - (second >> np.uint64(40)).astype(np.float32)) * scale


def mean_luminance(linear: np.ndarray) -> float:
    """Return the mean relative luminance of a linear RGB image.

    Parameters
    ----------
    linear : numpy.ndarray
        Linear BT.709/sRGB values, shape (..., 3).

    Returns
    -------
    float
        Mean of Y = 0.2126 R + 0.7152 G + 0.0722 B, accumulated in float64.

    References
    ----------
    ITU-R BT.709-6, item 3.2 (derivation of luminance).
    """
    return float(np.dot(channel_means(linear), LUMA_BT709))


def channel_means(linear: np.ndarray) -> np.ndarray:
    """Return the per-channel means of an image, accumulated in float64.

    Returns
    -------
    numpy.ndarray
        float64, shape (3,).
    """
    flat = np.asarray(linear).reshape(-1, linear.shape[-1])
    return flat.mean(axis=0, dtype=np.float64)


def luminance(linear: np.ndarray, weights: np.ndarray = LUMA_BT709) -> np.ndarray:
    """Return the relative luminance Y per pixel.

    Parameters
    ----------
    linear : numpy.ndarray
        Linear RGB, shape (..., 3).
    weights : numpy.ndarray
        The primaries' luminance coefficients: :data:`LUMA_BT709` (default) or
        :data:`LUMA_BT2020`.

    Returns
    -------
    numpy.ndarray
        float32, shape (...), linear.
    """
    w = np.asarray(weights).astype(np.float32)
    return linear[..., 0] * w[0] + linear[..., 1] * w[1] + linear[..., 2] * w[2]


# --------------------------------------------------------------------------
# Source display colour: primaries and white, adapted to the output's D65.

#: CIE 1931 xy of each display's red, green and blue primaries.
PRIMARY_XY = {
    "srgb": ((0.64, 0.33), (0.30, 0.60), (0.15, 0.06)),         # ITU-R BT.709-6, table 1
    "smpte-c": ((0.630, 0.340), (0.310, 0.595), (0.155, 0.070)),  # SMPTE RP 145
    "ebu": ((0.64, 0.33), (0.29, 0.60), (0.15, 0.06)),          # EBU Tech 3213
    "ntsc-1953": ((0.67, 0.33), (0.21, 0.71), (0.14, 0.08)),    # ITU-R BT.470, System M
}

#: ITU-R BT.2020-2, table 3.
BT2020_XY = ((0.708, 0.292), (0.170, 0.797), (0.131, 0.046))

#: CIE 1931 xy of D65 and of illuminant C (CIE 15:2004, table T.3).
_D65_XY = (0.3127, 0.3290)
_C_XY = (0.31006, 0.31616)

#: The cone response matrix of the Bradford chromatic adaptation transform.
_BRADFORD = np.array([[0.8951, 0.2664, -0.1614],
                      [-0.7502, 1.7135, 0.0367],
                      [0.0389, -0.0685, 1.0296]])


def daylight_xy(cct: float) -> np.ndarray:
    """CIE 1931 xy of the CIE daylight locus at a correlated colour temperature.

    References
    ----------
    CIE 15:2004, equations 3.3 and 3.4 (4000 K to 25000 K).
    """
    t = float(cct)
    if not (4000.0 <= t <= 25000.0):
        raise SettingsError(f"daylight colour temperature must be between 4000 and 25000 K (got {cct})")
    if t <= 7000.0:
        x = -4.6070e9 / t**3 + 2.9678e6 / t**2 + 0.09911e3 / t + 0.244063
    else:
        x = -2.0064e9 / t**3 + 1.9018e6 / t**2 + 0.24748e3 / t + 0.237040
    return np.array([x, -3.0 * x * x + 2.870 * x - 0.275])


def white_xy(name: str) -> np.ndarray:
    """CIE 1931 xy chromaticity of a source white.

    ``"d65"`` and ``"C"`` are CIE illuminants; ``"9300k"`` is the CIE daylight
    locus at 9300 K (:func:`daylight_xy`), a common choice for the bluish white
    of many consumer sets (no standard fixes it).
    """
    check_choice("white", name, WHITES)
    if name == "9300k":
        return daylight_xy(9300.0)
    return np.array(_D65_XY if name == "d65" else _C_XY, dtype=np.float64)


def _xyz(xy) -> np.ndarray:
    x, y = xy
    return np.array([x / y, 1.0, (1.0 - x - y) / y])


def rgb_to_xyz_matrix(primaries, white) -> np.ndarray:
    """The normalised primary matrix: linear RGB to CIE XYZ with white at Y = 1.

    References
    ----------
    SMPTE RP 177-1993, section 3.3.
    """
    p = np.stack([_xyz(xy) for xy in primaries], axis=1)
    return p * np.linalg.solve(p, _xyz(white))[None, :]


def bradford(white_from, white_to) -> np.ndarray:
    """The Bradford transform adapting XYZ seen under one white to another (3x3)."""
    src, dst = _BRADFORD @ _xyz(white_from), _BRADFORD @ _xyz(white_to)
    return np.linalg.inv(_BRADFORD) @ np.diag(dst / src) @ _BRADFORD


@lru_cache(maxsize=32)
def _source_matrix(primaries: str, white: str, target: str, adaptation: str = "bradford") -> np.ndarray:
    # Written out rather than taken from colour-science (whose import costs more
    # than a second); the tests hold it to colour-science's matrix_RGB_to_RGB.
    src = rgb_to_xyz_matrix(PRIMARY_XY[primaries], white_xy(white))
    out = rgb_to_xyz_matrix(PRIMARY_XY["srgb"] if target == "sdr" else BT2020_XY, _D65_XY)
    if adaptation == "bradford":
        matrix = np.linalg.inv(out) @ bradford(white_xy(white), _D65_XY) @ src
    else:
        matrix = np.linalg.inv(out) @ src
        matrix = matrix / float((matrix @ np.ones(3)).max())
    matrix.flags.writeable = False
    return matrix


def source_matrix(primaries: str = "srgb", white: str = "d65", target: str = "sdr", *,
                  adaptation: str = "bradford") -> np.ndarray | None:
    """The 3x3 matrix from a source display's linear RGB to the output's, or None for identity.

    Built with colour-science: the source colourspace's primaries with the
    chosen white, to BT.709 (``"sdr"``) or BT.2020 (``"hdr"``) primaries with
    D65 white, adapting the white with the Bradford transform.

    With ``adaptation="none"`` the source white keeps its colour: the
    source's XYZ go to the output unadapted, scaled so that its white's
    brightest channel is 1 (the picture fits without clipping its white).

    Returns
    -------
    numpy.ndarray or None
        float64 (3, 3), applied as ``rgb_out = M @ rgb_in``; None when the
        source is sRGB/D65 and the output standard range (nothing to do).
    """
    check_choice("primaries", primaries, PRIMARIES)
    check_choice("white", white, WHITES)
    check_choice("output range", target, TARGETS)
    check_choice("white adaptation", adaptation, ("bradford", "none"))
    if primaries == "srgb" and white == "d65" and target == "sdr":
        return None
    return _source_matrix(primaries, white, target, adaptation)


def convert_gamut(linear: np.ndarray, matrix: np.ndarray | None) -> tuple[np.ndarray, float]:
    """Apply a colour matrix in linear light and clip what falls outside [0, 1].

    Returns
    -------
    converted : numpy.ndarray
        float32, same shape, range [0, 1].
    clipped : float
        Share of pixels with at least one channel clipped.
    """
    if matrix is None:
        return linear, 0.0
    out = np.einsum("...c,dc->...d", linear, matrix.astype(np.float32), optimize=True).astype(np.float32)
    outside = ((out < -1e-6) | (out > 1 + 1e-6)).any(axis=-1)
    np.clip(out, 0.0, 1.0, out=out)
    return out, float(outside.mean()) if outside.size else 0.0


# --------------------------------------------------------------------------
# SMPTE ST 2084 (PQ)

_PQ_M1 = 2610 / 16384
_PQ_M2 = 2523 / 4096 * 128
_PQ_C1 = 3424 / 4096
_PQ_C2 = 2413 / 4096 * 32
_PQ_C3 = 2392 / 4096 * 32
PQ_PEAK = 10000.0

#: The allowed range of the reference white of HDR output, cd/m²; the peak goes from it to PQ_PEAK.
REFERENCE_WHITE_LIMITS = (48.0, 1000.0)

#: Relative level below which HDR output is written as black (2e-5 cd/m² at a
#: 203 cd/m² reference white: far below anything visible).
PQ_BLACK = 1e-7


def encode_pq(nits: np.ndarray, depth: int = 16) -> np.ndarray:
    """Encode absolute luminance (cd/m²) with the PQ inverse EOTF and round to codes.

    Returns
    -------
    numpy.ndarray
        uint16 (depth 16) or uint8, full range, same shape.

    References
    ----------
    SMPTE ST 2084:2014; ITU-R BT.2100-2, table 4.
    """
    if depth not in (8, 16):
        raise SettingsError(f"depth must be 8 or 16 (got {depth})")
    y = np.nan_to_num(np.clip(np.asarray(nits, dtype=np.float64) / PQ_PEAK, 0.0, 1.0), nan=0.0)
    p = np.power(y, _PQ_M1)
    n = np.power((_PQ_C1 + _PQ_C2 * p) / (1 + _PQ_C3 * p), _PQ_M2)
    top = 2**depth - 1
    return (n * top + 0.5).astype(np.uint16 if depth == 16 else np.uint8)


@lru_cache(maxsize=2)
def pq_decode_table(bits: int = 16) -> np.ndarray:
    """Absolute luminance (cd/m²) of every full-range PQ code, by the ST 2084 EOTF.

    Returns
    -------
    numpy.ndarray
        float64, shape (2**bits,); read-only.

    References
    ----------
    SMPTE ST 2084:2014, equation 4.1; ITU-R BT.2100-2, table 4.
    """
    n = np.arange(2**bits, dtype=np.float64) / (2**bits - 1)
    p = np.power(n, 1.0 / _PQ_M2)
    table = PQ_PEAK * np.power(np.maximum(p - _PQ_C1, 0.0) / (_PQ_C2 - _PQ_C3 * p), 1.0 / _PQ_M1)
    table.flags.writeable = False
    return table


# --------------------------------------------------------------------------
# Output encodings

OUTPUT_RANGES = ("sdr", "hdr")


@dataclass(frozen=True)
class Encoding:
    """How output linear light becomes code values, and back.

    ``"sdr"``: BT.709 primaries, sRGB transfer, white at 1. ``"hdr"``: BT.2020
    primaries, PQ transfer (SMPTE ST 2084), input white shown at
    ``reference_white`` cd/m² and room above it up to ``peak``.
    """

    range: str = "sdr"
    peak: float = 1000.0
    reference_white: float = 203.0
    #: Standard range only: the share of the input's light the output holds. Below 1 it
    #: leaves headroom 1 / share above the scaled white, as HDR does (see :attr:`gain`).
    share: float = 1.0

    def __post_init__(self):
        check_choice("output range", self.range, OUTPUT_RANGES)
        if not (0.5 <= self.share <= 1.0):
            raise SettingsError(f"light_share must be between 0.5 and 1 (got {self.share!r})")
        if self.hdr and self.share != 1.0:
            raise SettingsError("light_share is for standard-range output: HDR output has its own "
                                "headroom above white (peak / reference white)")
        lo, hi = REFERENCE_WHITE_LIMITS
        if not (lo <= self.reference_white <= hi):
            raise SettingsError(f"reference_white must be between {lo:g} and {hi:g} cd/m² "
                                f"(got {self.reference_white})")
        if not (self.reference_white <= self.peak <= PQ_PEAK):
            raise SettingsError(f"peak must be between reference_white ({self.reference_white:g}) and "
                                f"10000 cd/m² (got {self.peak})")

    @property
    def hdr(self) -> bool:
        return self.range == "hdr"

    @property
    def headroom(self) -> float:
        """Room above input white, in input white: peak over reference white for HDR,
        1 / share on standard range (1 when the output holds all the light)."""
        return self.peak / self.reference_white if self.hdr else 1.0 / self.share

    @property
    def gain(self) -> float:
        """What the render's linear values (in [0, headroom]) are multiplied by before
        they are encoded: the share on standard range, so that the headroom fits under
        display white; 1 for HDR. Also the light kept that a render aims for."""
        return 1.0 if self.hdr else self.share

    @property
    def luma(self) -> np.ndarray:
        """Luminance coefficients of the output primaries."""
        return LUMA_BT2020 if self.hdr else LUMA_BT709

    def encode(self, linear: np.ndarray, depth: int = 8, *, dither: np.ndarray | None = None) -> np.ndarray:
        """Linear light (white = 1) to code values; HDR is always 16-bit PQ.

        PQ is so steep at black that float32 round-off in a value that should
        be 0 (1e-8 of white) would become a dozen codes; levels below
        :data:`PQ_BLACK` of white are taken as black.
        """
        if self.hdr:
            lin = np.asarray(linear, dtype=np.float64)
            return encode_pq(np.where(lin < PQ_BLACK, 0.0, lin) * self.reference_white, 16)
        return encode_srgb(linear, depth, dither=dither)

    def table(self, bits: int) -> np.ndarray:
        """Linear light (white = 1) of every code value, float64, shape (2**bits,)."""
        if self.hdr:
            return pq_decode_table(bits) / self.reference_white
        return decode_table("srgb", bits).astype(np.float64)

    def decode(self, codes: np.ndarray) -> np.ndarray:
        """Code values back to linear light (white = 1), float32."""
        if self.hdr:
            bits = 16 if codes.dtype == np.uint16 else 8
            return (pq_decode_table(bits)[codes] / self.reference_white).astype(np.float32)
        return decode(codes)
