"""Transfer functions and relative luminance.

Everything inside the pipeline is linear light, float32, shape (H, W, 3), in
[0, 1]. This module converts at the edges: code values to linear light on the
way in (by table for integer input) and linear light to code values on the way
out. colour-science supplies the reference curves; the tables are built from it
once per bit depth and cached.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from .errors import SettingsError, check_choice

#: ITU-R BT.709-6 luminance coefficients (the second row of the RGB-to-XYZ
#: matrix for BT.709 primaries and D65, as rounded in IEC 61966-2-1).
LUMA_BT709 = np.array([0.2126, 0.7152, 0.0722], dtype=np.float64)


def colour_science():
    """Import colour-science quietly and return the module.

    colour-science warns at import about each optional package (SciPy,
    Matplotlib, ...) that is missing; nothing crtfilter uses needs them.
    """
    import warnings

    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*related API features are not available")
        import colour
    return colour


def _srgb_decode(v: np.ndarray) -> np.ndarray:
    return colour_science().models.eotf_sRGB(v)


def _gamma22_decode(v: np.ndarray) -> np.ndarray:
    return np.power(v, 2.2)


def _bt1886_decode(v: np.ndarray) -> np.ndarray:
    colour = colour_science()
    # Black level 0 and white 1: the curve reduces to a pure 2.4 power, which
    # is what BT.1886 prescribes for an ideal display.
    return colour.models.eotf_BT1886(v, L_B=0.0, L_W=1.0)


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
    """

    transfer: str = "srgb"
    alpha: str = "over:black"

    def __post_init__(self):
        check_choice("transfer", self.transfer, TRANSFERS)
        backdrop_code(self.alpha)

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
    rng = np.random.default_rng([seed, top])
    noise = rng.random((h, w, c), dtype=np.float32)
    noise -= rng.random((h, w, c), dtype=np.float32)
    return noise


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


def luminance(linear: np.ndarray) -> np.ndarray:
    """Return the relative luminance Y per pixel.

    Returns
    -------
    numpy.ndarray
        float32, shape (H, W), linear.
    """
    w = LUMA_BT709.astype(np.float32)
    return linear[..., 0] * w[0] + linear[..., 1] * w[1] + linear[..., 2] * w[2]
