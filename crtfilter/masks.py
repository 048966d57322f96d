"""Scanline and phosphor mask patterns, area-sampled in output pixels.

A mask is a per-channel pattern m(x, y) in [0, 1] defined in continuous output
coordinates (origin at the picture's top-left corner) and periodic. Every kind
here is a sum of separable terms, each the product of a horizontal and a
vertical profile, times a vertical scanline profile:

    m(x, y, c) = S(y) * (1 - s + s * sum_q X_q(x, c) Y_q(y))

where s is the phosphor strength and S already carries the scanline strength.
Each 1-D profile is integrated exactly over each output pixel (boxes by their
piecewise-linear antiderivative, the Gaussian beam by erf), so the mean over a
period cell equals the pattern's analytic mean even when the periods are not
whole numbers of pixels.

The pattern is kept in that factored form (:class:`Mask`): a row term ``a``
(H,), row factors ``b`` (Q, H) and column factors ``cols`` (Q, W, 3), with

    m[y, x, c] = a[y] + sum_q b[q, y] * cols[q, x, c]

which is small to store and cheap to expand.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from .errors import SettingsError, check_choice
from .scale import Geometry

#: Phosphor layouts, keyed by the names used in presets and the CLI.
PHOSPHORS = {
    "none": "no phosphor structure (scanlines only, if any)",
    "aperture": "aperture grille: continuous vertical RGB stripes",
    "slot": "slot mask: RGB stripes cut into slots, alternate triads staggered by half a slot",
    "dots": "dot triads in a delta layout: rows of RGB dots, alternate rows shifted by half a triad",
}

ORDERS = {"rgb": (0, 1, 2), "bgr": (2, 1, 0)}
ORIENTATIONS = ("horizontal", "vertical")

#: Beam profile: a Gaussian's full width at half maximum is this many sigmas.
_FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))


#: The allowed range of each number setting of the mask (what the preset loader and the
#: tuning page allow).
LIMITS = {
    "triad_pitch": (1.5, 64.0),
    "phosphor_fill": (0.2, 1.0),
    "slot_height": (2.0, 256.0),
    "slot_gap": (0.0, 0.9),
    "dot_row_height": (1.0, 128.0),
    "phosphor_strength": (0.0, 1.0),
    "beam_width": (0.2, 2.0),
    "scanline_strength": (0.0, 1.0),
}


def _check_range(name: str, value: float, lo: float, hi: float) -> None:
    if not (lo <= value <= hi) or isinstance(value, bool):
        raise SettingsError(f"{name} must be between {lo} and {hi} (got {value!r})")


@dataclass(frozen=True)
class MaskSettings:
    """What the mask looks like.

    Parameters
    ----------
    phosphor : str
        A key of :data:`PHOSPHORS`.
    triad_pitch : float
        Width of one red-green-blue triad in output pixels (fractions allowed).
    order : str
        ``"rgb"`` or ``"bgr"``, left to right.
    phosphor_fill : float
        Fraction of each phosphor's third of the triad that glows (0.2 to 1).
    slot_height : float
        Slot mask: vertical period of the slots in output pixels.
    slot_gap : float
        Slot mask: fraction of each slot period that is dark (0 to 0.9).
    dot_row_height : float
        Dot triads: vertical distance between rows of dots in output pixels.
    phosphor_strength : float
        0 (no phosphor structure) to 1 (full): m' = 1 - s (1 - m).
    scanlines : bool
        Whether the beam leaves dark gaps between source lines.
    beam_width : float
        The beam's height at half its peak, in source lines (0.2 to 2).
    scanline_strength : float
        0 to 1, as ``phosphor_strength``.
    orientation : str
        ``"horizontal"`` (scanlines run across) or ``"vertical"`` (for pictures
        meant for a screen turned on its side: scanlines run down).
    """

    phosphor: str = "aperture"
    triad_pitch: float = 3.0
    order: str = "rgb"
    phosphor_fill: float = 1.0
    slot_height: float = 6.0
    slot_gap: float = 0.25
    dot_row_height: float = 3.0
    phosphor_strength: float = 1.0
    scanlines: bool = True
    beam_width: float = 0.75
    scanline_strength: float = 0.8
    orientation: str = "horizontal"

    def __post_init__(self):
        check_choice("phosphor layout", self.phosphor, PHOSPHORS)
        if self.order not in ORDERS:
            raise SettingsError(f"order must be one of rgb, bgr (got {self.order!r})")
        if self.orientation not in ORIENTATIONS:
            raise SettingsError(
                f"orientation must be one of {', '.join(ORIENTATIONS)} (got {self.orientation!r})"
            )
        for name, (lo, hi) in LIMITS.items():
            _check_range(name, getattr(self, name), lo, hi)
        if not isinstance(self.scanlines, bool):
            raise SettingsError(f"scanlines must be true or false (got {self.scanlines!r})")


@dataclass(frozen=True)
class Mask:
    """An area-sampled mask over the picture, in factored form.

    Attributes
    ----------
    a : numpy.ndarray
        float64, shape (H,): the part of each row that does not depend on x.
    b : numpy.ndarray
        float64, shape (Q, H): row factors of the separable terms.
    cols : numpy.ndarray
        float64, shape (Q, W, 3): column factors, per channel.
    mean : numpy.ndarray
        float64, shape (3,): the mean over one period cell, per channel.
    cell : tuple of int
        (rows, columns) of the period cell in output pixels, cut to the
        picture where the picture is smaller (the mean is always taken over a
        whole cell).
    transposed : bool
        True for a vertical orientation: ``a`` and ``b`` then run along columns
        and ``cols`` along rows.
    """

    a: np.ndarray
    b: np.ndarray
    cols: np.ndarray
    mean: np.ndarray
    cell: tuple[int, int]
    transposed: bool = False

    @property
    def shape(self) -> tuple[int, int]:
        """(rows, columns) of the picture the mask covers."""
        h, w = self.a.shape[0], self.cols.shape[1]
        return (w, h) if self.transposed else (h, w)

    def pixels(self, rows: slice = slice(None), columns: slice = slice(None)) -> np.ndarray:
        """Expand the mask, or a window of it, into an array.

        Returns
        -------
        numpy.ndarray
            float32, shape (h, w, 3), range [0, 1].
        """
        if self.transposed:
            rows, columns = columns, rows
        a = self.a[rows].astype(np.float32)
        cols = self.cols[:, columns].astype(np.float32)
        out = np.empty((a.shape[0], cols.shape[1], 3), np.float32)
        out[...] = a[:, None, None]
        for bq, xq in zip(self.b[:, rows].astype(np.float32), cols, strict=True):
            out += bq[:, None, None] * xq[None, :, :]
        return out.transpose(1, 0, 2) if self.transposed else out


# --------------------------------------------------------------------------
# Exact pixel integrals of 1-D periodic profiles.


def _edges(n: int) -> np.ndarray:
    return np.arange(n + 1, dtype=np.float64)


def _box_antiderivative(u: np.ndarray, period: float, start: float, width: float) -> np.ndarray:
    """Integral from ``start`` to ``u`` of the indicator of [start + k P, start + k P + width)."""
    v = u - start
    whole = np.floor(v / period)
    return whole * width + np.minimum(v - whole * period, width)


def box_profile(n: int, *, period: float, start: float, width: float) -> np.ndarray:
    """Return the area-sampled periodic box [start, start + width) mod period.

    Returns
    -------
    numpy.ndarray
        float64, shape (n,): the fraction of each pixel [i, i + 1) the box covers.
    """
    f = _box_antiderivative(_edges(n), period, start, width)
    # The running antiderivative grows with x; its round-off must not leave
    # a covered fraction a hair outside [0, 1].
    return np.clip(np.diff(f), 0.0, 1.0)


_erf_scalar = np.frompyfunc(math.erf, 1, 1)


def _erf(x: np.ndarray) -> np.ndarray:
    return _erf_scalar(x).astype(np.float64)


def beam_profile(n: int, *, period: float, fwhm: float) -> np.ndarray:
    """Return the area-sampled scanline beam profile, peak 1 at each line centre.

    Lines are centred at (j + 0.5) * period; each is a Gaussian whose full width
    at half maximum is ``fwhm`` (in output pixels); overlapping neighbours add,
    and the sum is scaled so that its value at a line centre is 1.

    Returns
    -------
    numpy.ndarray
        float64, shape (n,), range [0, 1]: the mean of the profile over each
        pixel [i, i + 1), from the Gaussian's antiderivative (erf).
    """
    sigma = fwhm / _FWHM_PER_SIGMA
    reach = int(math.ceil(6 * sigma / period)) + 1
    k = np.arange(-reach, reach + 1)
    peak = float(np.exp(-((k * period) ** 2) / (2 * sigma**2)).sum())
    lo = _edges(n)[:-1, None]
    hi = lo + 1.0
    offsets = np.arange(-reach, reach + int(math.ceil(1 / period)) + 2)[None, :]
    centre = (np.floor(lo / period) + offsets + 0.5) * period
    scale = sigma * math.sqrt(2.0)
    area = (_erf((hi - centre) / scale) - _erf((lo - centre) / scale)).sum(axis=1)
    return area * (sigma * math.sqrt(math.pi / 2)) / peak


def beam_mean(*, period: float, fwhm: float) -> float:
    """Return the analytic mean of :func:`beam_profile` over one line period."""
    sigma = fwhm / _FWHM_PER_SIGMA
    reach = int(math.ceil(6 * sigma / period)) + 1
    k = np.arange(-reach, reach + 1)
    peak = float(np.exp(-((k * period) ** 2) / (2 * sigma**2)).sum())
    return sigma * math.sqrt(2 * math.pi) / (period * peak)


# --------------------------------------------------------------------------
# Phosphor layouts as sums of separable terms.


def _phosphor_terms(w: int, h: int, st: MaskSettings):
    """Return (rows (Q, h), cols (Q, w, 3), x periods, y periods) of the layout."""
    p = st.triad_pitch
    third = p / 3.0
    width = third * st.phosphor_fill
    order = ORDERS[st.order]
    if st.phosphor == "none":
        return np.ones((1, h)), np.ones((1, w, 3)), [], []

    def stripes(period: float, shift: float) -> np.ndarray:
        cols = np.empty((w, 3))
        for slot, channel in enumerate(order):
            start = shift + slot * third + (third - width) / 2
            cols[:, channel] = box_profile(w, period=period, start=start, width=width)
        return cols

    if st.phosphor == "aperture":
        return np.ones((1, h)), stripes(p, 0.0)[None], [p], []
    if st.phosphor == "slot":
        sh = st.slot_height
        open_ = sh * (1.0 - st.slot_gap)
        rows = np.stack([
            box_profile(h, period=sh, start=q * sh / 2 + st.slot_gap * sh / 2, width=open_)
            for q in (0, 1)
        ])
        cols = np.stack([stripes(2 * p, q * p) for q in (0, 1)])
        return rows, cols, [2 * p], [sh]
    # dots: rows of RGB dots, every other row shifted by half a triad
    v = st.dot_row_height
    dot_h = v * st.phosphor_fill
    rows = np.stack([
        box_profile(h, period=2 * v, start=q * v + (v - dot_h) / 2, width=dot_h) for q in (0, 1)
    ])
    cols = np.stack([stripes(p, q * p / 2) for q in (0, 1)])
    return rows, cols, [p], [2 * v]


def _cell_length(periods: list[float], limit: int) -> int:
    """Smallest whole number of pixels that holds a whole number of every period."""
    n = 1
    for period in periods:
        num = Fraction(period).limit_denominator(1000).numerator
        n = n * num // math.gcd(n, num)
        if n > limit:
            return limit
    return min(n, limit)


def build_mask(geometry: Geometry, settings: MaskSettings = MaskSettings()) -> Mask:
    """Build the area-sampled mask over the picture area of ``geometry``.

    Scanlines follow the source lines: their period is ``pic_h / src_h`` output
    rows, whole or not, and line j is centred at (j + 0.5) of that period. With
    ``orientation="vertical"`` the whole pattern is built for the transposed
    picture and turned, so scanlines follow source columns.

    Returns
    -------
    Mask
        Factored mask of the picture's size and its per-channel mean over one
        period cell (float64).
    """
    vertical = settings.orientation == "vertical"
    g = geometry.transposed() if vertical else geometry
    w, h = g.pic_w, g.pic_h
    line = g.line_period
    a, b, cols, x_periods, y_periods = _factors(w, h, settings, line)
    cell_h = _cell_length(y_periods, _MEAN_LIMIT)
    cell_w = _cell_length(x_periods, _MEAN_LIMIT)
    if cell_h > h or cell_w > w:
        # The picture is smaller than one cell: take the mean over a whole
        # cell all the same, from longer profiles, so it is the pattern's.
        ma, mb, mcols, _, _ = _factors(max(w, cell_w), max(h, cell_h), settings, line)
    else:
        ma, mb, mcols = a, b, cols
    # The mean of a sum of separable terms over a product cell is the sum of
    # the products of the 1-D means: no 2-D array is needed.
    mean = ma[:cell_h].mean() + np.einsum("q,qc->c", mb[:, :cell_h].mean(axis=1), mcols[:, :cell_w].mean(axis=1))
    cell = (min(cell_h, h), min(cell_w, w))
    return Mask(a=a, b=b, cols=cols, mean=np.asarray(mean, dtype=np.float64),
                cell=cell[::-1] if vertical else cell, transposed=vertical)


#: Longest period cell (pixels a side) over which a mask's mean is taken; periods
#: with no common multiple below it are averaged over this many pixels.
_MEAN_LIMIT = 8192


def _factors(w: int, h: int, settings: MaskSettings, line: Fraction):
    """(a, b, cols, x periods, y periods) of the factored mask over w x h pixels."""
    rows, cols, x_periods, y_periods = _phosphor_terms(w, h, settings)
    s = settings.phosphor_strength if settings.phosphor != "none" else 0.0
    if settings.scanlines and settings.scanline_strength > 0:
        beam = beam_profile(h, period=float(line), fwhm=settings.beam_width * float(line))
        scan = 1.0 - settings.scanline_strength * (1.0 - beam)
        y_periods = y_periods + [line]
    else:
        scan = np.ones(h)
    return scan * (1.0 - s), s * scan[None, :] * rows, cols, x_periods, y_periods
