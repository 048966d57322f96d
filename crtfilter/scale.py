"""Output geometry, resampling kernels and separable upscaling in linear light."""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from .errors import SettingsError, check_choice


# --------------------------------------------------------------------------
# Kernels: weight as a function of distance in source pixels.


def kernel_keys(x: np.ndarray, a: float = -0.5) -> np.ndarray:
    """Return the cubic convolution kernel of Keys with parameter ``a``.

    Returns
    -------
    numpy.ndarray
        float64, same shape as ``x``.

    References
    ----------
    R. G. Keys, "Cubic convolution interpolation for digital image processing",
    IEEE Trans. ASSP 29(6), 1981; a = -0.5 is the choice that makes the
    interpolant third-order accurate.
    """
    x = np.abs(np.asarray(x, dtype=np.float64))
    near = ((a + 2) * x - (a + 3)) * x * x + 1
    far = ((a * x - 5 * a) * x + 8 * a) * x - 4 * a
    return np.where(x < 1, near, np.where(x < 2, far, 0.0))


def kernel_lanczos3(x: np.ndarray) -> np.ndarray:
    """Return the Lanczos kernel with three lobes, sinc(x) sinc(x / 3) for |x| < 3.

    Returns
    -------
    numpy.ndarray
        float64, same shape as ``x``.
    """
    x = np.asarray(x, dtype=np.float64)
    return np.where(np.abs(x) < 3, np.sinc(x) * np.sinc(x / 3), 0.0)


def kernel_triangle(x: np.ndarray) -> np.ndarray:
    """Return the linear interpolation (tent) kernel.

    Returns
    -------
    numpy.ndarray
        float64, same shape as ``x``.
    """
    return np.maximum(0.0, 1.0 - np.abs(np.asarray(x, dtype=np.float64)))


@dataclass(frozen=True)
class Kernel:
    """A resampling kernel: its function, its support radius and a description."""

    name: str
    support: float
    description: str
    function: object = None  # callable(distance) -> weight, or None for box methods


#: Resampling kernels, keyed by the names used in presets and the CLI.
KERNELS = {
    "nearest": Kernel("nearest", 0.5, "nearest source pixel; exact at whole-number scales"),
    "sharp": Kernel(
        "sharp", 0.5,
        "each output pixel takes the source pixels it covers, by area: crisp pixels, "
        "anti-aliased edges at fractional scales, mean kept exactly",
    ),
    "bilinear": Kernel("bilinear", 1.0, "linear interpolation", kernel_triangle),
    "cubic": Kernel("cubic", 2.0, "Keys cubic convolution, a = -0.5", kernel_keys),
    "lanczos3": Kernel("lanczos3", 3.0, "Lanczos, three lobes", kernel_lanczos3),
}


def check_kernel(name: str) -> Kernel:
    """Return the kernel registered under ``name``, or raise SettingsError."""
    check_choice("kernel", name, KERNELS)
    return KERNELS[name]


def resample_taps(n_in: int, n_out: int, kernel: str) -> tuple[np.ndarray, np.ndarray]:
    """Return the source indices and weights of each output sample along one axis.

    Source pixel ``j`` covers [j, j + 1) and output pixel ``i`` covers
    [i r, (i + 1) r) in source units, r = n_in / n_out; a filtered output sample
    sits at the centre (i + 0.5) r. Taps falling outside the source are dropped
    and the remaining weights renormalised, and the kernel is widened by r when
    shrinking, as Pillow's resampler does.

    Returns
    -------
    indices : numpy.ndarray
        intp, shape (n_out, taps), in [0, n_in).
    weights : numpy.ndarray
        float32, shape (n_out, taps), each row summing to 1.
    """
    spec = check_kernel(kernel)
    if n_in < 1 or n_out < 1:
        raise SettingsError(f"sizes must be >= 1 (got {n_in} -> {n_out})")
    r = n_in / n_out
    i = np.arange(n_out, dtype=np.float64)
    if kernel == "nearest":
        idx = np.minimum(np.floor((i + 0.5) * r).astype(np.intp), n_in - 1)
        return idx[:, None], np.ones((n_out, 1), np.float32)
    if kernel == "sharp":
        lo = i * r
        hi = (i + 1) * r
        first = np.floor(lo).astype(np.intp)
        taps = int(math.ceil(r)) + 1
        idx = first[:, None] + np.arange(taps)[None, :]
        w = np.clip(np.minimum(hi[:, None], idx + 1) - np.maximum(lo[:, None], idx), 0, None)
    else:
        widen = max(r, 1.0)
        support = spec.support * widen
        centre = (i + 0.5) * r
        first = np.floor(centre - support + 0.5).astype(np.intp)
        taps = int(math.ceil(2 * support)) + 1
        idx = first[:, None] + np.arange(taps)[None, :]
        w = spec.function((idx + 0.5 - centre[:, None]) / widen)
    w = np.where((idx >= 0) & (idx < n_in), w, 0.0)
    total = w.sum(axis=1, keepdims=True)
    w = w / np.where(total == 0, 1.0, total)
    return np.clip(idx, 0, n_in - 1), w.astype(np.float32)


def _resample_axis(img: np.ndarray, axis: int, n_out: int, kernel: str) -> np.ndarray:
    idx, w = resample_taps(img.shape[axis], n_out, kernel)
    shape = [1] * img.ndim
    shape[axis] = n_out
    out = None
    for k in range(idx.shape[1]):
        wk = w[:, k]
        if not wk.any():
            continue
        term = np.take(img, idx[:, k], axis=axis)
        term *= wk.reshape(shape)
        if out is None:
            out = term
        else:
            out += term
    return out


def resample(linear: np.ndarray, width: int, height: int, kernel: str = "sharp") -> np.ndarray:
    """Resample a linear-light image to ``width`` x ``height`` with a separable kernel, unclipped.

    The rows pass runs first (on the narrow source), then the columns.

    Returns
    -------
    numpy.ndarray
        float32, shape (height, width, C). Kernels with negative lobes ring
        past [0, 1] near edges; nearest, sharp and bilinear stay inside.
    """
    img = np.ascontiguousarray(linear, dtype=np.float32)
    return _resample_axis(_resample_axis(img, 0, height, kernel), 1, width, kernel)


#: Kernels whose weights are all >= 0: their upscale needs no clipping.
CONVEX_KERNELS = ("nearest", "sharp", "bilinear")


def upscale(linear: np.ndarray, width: int, height: int, kernel: str = "sharp", *,
            cell: tuple[int, int] | None = None) -> np.ndarray:
    """Resample a linear-light image to ``width`` x ``height``, within [0, 1].

    Parameters
    ----------
    linear : numpy.ndarray
        float32, shape (H, W, C), linear light in [0, 1].
    width, height : int
        Output size in pixels.
    kernel : str
        A key of :data:`KERNELS`.
    cell : (rows, columns), optional
        Clip with :func:`clip_keeping_cell_sums` over cells of this size, so
        that clipping the kernel's lobes moves no light between cells; without
        it, a plain clip (right for coverage, such as alpha).

    Returns
    -------
    numpy.ndarray
        float32, shape (height, width, C), range [0, 1].
    """
    check_kernel(kernel)
    wide = resample(linear, width, height, kernel)
    if kernel in CONVEX_KERNELS:
        return np.clip(wide, 0.0, 1.0, out=wide)  # only round-off can leave [0, 1]
    if cell is None:
        return np.clip(wide, 0.0, 1.0, out=wide)
    return clip_keeping_cell_sums(wide, cell)


@dataclass(frozen=True)
class Tiles:
    """A partition of an (H, W, ...) array into rectangles, by their first rows and columns."""

    rows: np.ndarray
    cols: np.ndarray
    shape: tuple[int, int]

    @classmethod
    def regular(cls, shape: tuple[int, int], tile: tuple[int, int]) -> Tiles:
        """Tiles of ``tile`` = (rows, columns) from the top-left corner; the last ones may be cut."""
        return cls(np.arange(0, shape[0], tile[0]), np.arange(0, shape[1], tile[1]), shape)

    @property
    def counts(self) -> tuple[np.ndarray, np.ndarray]:
        """Rows and columns of each tile."""
        h, w = self.shape
        return np.diff(np.append(self.rows, h)), np.diff(np.append(self.cols, w))

    def sums(self, a: np.ndarray) -> np.ndarray:
        """Per-tile sums of ``a``, float64, shape (tiles down, tiles across, ...)."""
        return np.add.reduceat(np.add.reduceat(a, self.rows, axis=0, dtype=np.float64), self.cols, axis=1)

    def spread(self, t: np.ndarray) -> np.ndarray:
        """Repeat one float32 value per tile over its pixels: the inverse shape of :meth:`sums`."""
        row_n, col_n = self.counts
        return np.repeat(np.repeat(t.astype(np.float32), row_n, axis=0), col_n, axis=1)


def whole_cell_sums(y: np.ndarray, window: tuple[int, int]) -> np.ndarray:
    """Sums of a (H, W) map over the windows that tile it from the top-left corner.

    Only whole windows count: a cut one at an edge holds part of a mask period.

    Returns
    -------
    numpy.ndarray
        float64, shape (H // rows, W // columns).
    """
    h, w = y.shape
    rows, cols = min(window[0], h), min(window[1], w)
    h, w = h - h % rows, w - w % cols
    return Tiles.regular((h, w), (rows, cols)).sums(y[:h, :w])


#: Cell rows per band of :func:`clip_keeping_cell_sums` (its wider level; the fast
#: path works in the same bands).
BAND_CELLS = 8


def clip_keeping_cell_sums(values: np.ndarray, cell: tuple[int, int]) -> np.ndarray:
    """Clip a filtered upscale to [0, 1] without moving light between mask cells.

    Clipping adds light where a kernel's lobe undershoots black and removes it
    where one overshoots white; on fine bright detail the two do not cancel.
    Per channel, in two levels over tiles of the picture from its top-left corner:

    1. **Cells** (the mask's period cell, the window the light is audited
       over): the clipped values are pulled back to the unclipped sum U
       (itself limited to what the cell can hold, [0, area]): scaled towards 0
       where the cell gained light, their distance to 1 scaled down where it
       lost some. Exact, and inside [0, 1].
    2. **Bands** of :data:`BAND_CELLS` cell rows across the picture: what the
       cells could not hold (a dark gap whose U is below 0, a saturated patch
       whose U is above its area) is made up by scaling the band's values in
       proportion (capped at 1: light above white stays lost), so that every cell of the band changes by the same small share of its
       own light rather than dark cells taking it all.

    Parameters
    ----------
    values : numpy.ndarray
        float32, shape (H, W, C), unclipped.
    cell : (rows, columns)

    Returns
    -------
    numpy.ndarray
        float32, same shape, range [0, 1].
    """
    h, w = values.shape[:2]
    ch, cw = min(cell[0], h), min(cell[1], w)
    cells = Tiles.regular((h, w), (ch, cw))
    out = np.clip(values, 0.0, 1.0)
    row_n, col_n = cells.counts
    area = (row_n[:, None] * col_n[None, :])[..., None].astype(np.float64)
    target = np.clip(cells.sums(values), 0.0, area)
    have = cells.sums(out)
    down = np.divide(target, have, out=np.ones_like(have), where=have > target)
    up = np.divide(area - target, area - have, out=np.ones_like(have), where=have < target)
    if (down < 1).any():
        out *= cells.spread(down)  # a factor of exactly 1 leaves a value as it was
    if (up < 1).any():
        lift = cells.spread(up)
        pick = lift < 1
        out[pick] = 1 - (1 - out[pick]) * lift[pick]
        del lift, pick
    np.clip(out, 0.0, 1.0, out=out)
    bands = Tiles.regular((h, w), (BAND_CELLS * ch, w))
    row_n, col_n = bands.counts
    want = np.clip(bands.sums(values), 0.0, (row_n[:, None] * col_n[None, :])[..., None].astype(np.float64))
    have = bands.sums(out)
    factor = np.divide(want, have, out=np.ones_like(have), where=have > 0).astype(np.float32)
    if (factor != 1).any():
        out *= bands.spread(factor)
        np.minimum(out, 1.0, out=out)
    return out


# --------------------------------------------------------------------------
# Geometry


def parse_size(text: str, what: str = "size") -> tuple[int, int]:
    """Parse ``"WxH"`` into (width, height), both >= 1; ``what`` names the setting in errors."""
    try:
        w, h = (int(p) for p in str(text).lower().split("x"))
    except ValueError:
        raise SettingsError(f"{what} must look like 3840x2160 (got {text!r})") from None
    if w < 1 or h < 1 or w > 32768 or h > 32768:
        raise SettingsError(f"{what} must be between 1x1 and 32768x32768 (got {text!r})")
    return w, h


def parse_ratio(text: str, what: str) -> Fraction:
    """Parse ``"8:7"``, ``"4/3"`` or ``"1.25"`` into a positive fraction."""
    s = str(text).strip().replace("/", ":")
    try:
        if ":" in s:
            a, b = s.split(":")
            value = Fraction(int(a), int(b))
        else:
            value = Fraction(s).limit_denominator(10000)
    except (ValueError, ZeroDivisionError):
        raise SettingsError(f"{what} must look like 8:7 or 1.25 (got {text!r})") from None
    if not (Fraction(1, 8) <= value <= 8):
        raise SettingsError(f"{what} must be between 1:8 and 8:1 (got {text!r})")
    return value


#: The largest scale a preset may ask for (output pixels per source pixel, above 0).
MAX_SCALE = 64.0


@dataclass(frozen=True)
class GeometrySettings:
    """How big the output is and where the picture sits in it.

    Parameters
    ----------
    fit : str
        ``"WxH"`` box the picture is fitted into when neither ``scale`` nor
        ``size`` is given; the output is then exactly the picture, no borders.
    size : str or None
        ``"WxH"``: the output is exactly this size, the picture fitted inside
        and centred on black.
    scale : float or None
        Vertical scale factor (source lines to output pixels); horizontal
        follows from the pixel aspect. Overrides ``fit``.
    whole_scale : bool
        Round a fitted scale down to a whole number when it is >= 1, so every
        source line gets the same number of output rows.
    pixel_aspect : str
        Width:height of one source pixel on the original display, e.g. ``"8:7"``.
    display_aspect : str or None
        Width:height of the whole picture, e.g. ``"4:3"``; overrides ``pixel_aspect``.
    """

    fit: str = "3840x2160"
    size: str | None = None
    scale: float | None = None
    whole_scale: bool = True
    pixel_aspect: str = "1:1"
    display_aspect: str | None = None

    def __post_init__(self):
        parse_size(self.fit, "fit")
        if self.size is not None:
            parse_size(self.size)
        if self.scale is not None and not (0 < self.scale <= MAX_SCALE):
            raise SettingsError(f"scale must be in (0, {MAX_SCALE:g}] (got {self.scale})")
        parse_ratio(self.pixel_aspect, "pixel aspect")
        if self.display_aspect is not None:
            parse_ratio(self.display_aspect, "display aspect")


@dataclass(frozen=True)
class Geometry:
    """Where the picture lands in the output, in whole output pixels."""

    src_w: int
    src_h: int
    out_w: int
    out_h: int
    pic_x: int
    pic_y: int
    pic_w: int
    pic_h: int

    @property
    def line_period(self) -> Fraction:
        """Output rows per source line, exactly."""
        return Fraction(self.pic_h, self.src_h)

    @property
    def column_period(self) -> Fraction:
        """Output columns per source column, exactly."""
        return Fraction(self.pic_w, self.src_w)

    def transposed(self) -> Geometry:
        return Geometry(self.src_h, self.src_w, self.out_h, self.out_w,
                        self.pic_y, self.pic_x, self.pic_h, self.pic_w)


def plan_geometry(src_w: int, src_h: int, settings: GeometrySettings = GeometrySettings()) -> Geometry:
    """Work out the output size and the picture's place in it.

    Returns
    -------
    Geometry
    """
    if settings.display_aspect is not None:
        par = parse_ratio(settings.display_aspect, "display aspect") * Fraction(src_h, src_w)
    else:
        par = parse_ratio(settings.pixel_aspect, "pixel aspect")
    box = parse_size(settings.size or settings.fit)
    if settings.scale is not None:
        sy = float(settings.scale)
    else:
        sy = min(box[0] / (src_w * float(par)), box[1] / src_h)
        if settings.whole_scale and sy >= 1:
            sy = math.floor(sy + 1e-9)
    pic_h = max(1, round(src_h * sy))
    pic_w = max(1, round(src_w * sy * float(par)))
    if settings.size is not None:
        out_w, out_h = box
        if settings.scale is not None and (pic_w > out_w or pic_h > out_h):
            raise SettingsError(
                f"scale {settings.scale} makes a {pic_w}x{pic_h} picture, larger than "
                f"size {settings.size}: give a smaller scale or a larger size"
            )
        pic_x, pic_y = (out_w - pic_w) // 2, (out_h - pic_h) // 2
    else:
        out_w, out_h, pic_x, pic_y = pic_w, pic_h, 0, 0
    if out_w * out_h > 16384 * 16384:
        raise SettingsError(f"output {out_w}x{out_h} is too large (at most 16384x16384 pixels)")
    return Geometry(src_w, src_h, out_w, out_h, pic_x, pic_y, pic_w, pic_h)
