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


def upscale(linear: np.ndarray, width: int, height: int, kernel: str = "sharp", *,
            keep_tile_means: bool = True) -> np.ndarray:
    """Resample a linear-light image to ``width`` x ``height`` with a separable kernel.

    The smaller pass runs first (rows, on the narrow source), then columns.
    Kernels with negative lobes are clipped to [0, 1] at the end.

    Parameters
    ----------
    linear : numpy.ndarray
        float32, shape (H, W, C), linear light in [0, 1].
    width, height : int
        Output size in pixels.
    kernel : str
        A key of :data:`KERNELS`.
    keep_tile_means : bool
        Clip with :func:`clip_keeping_tile_means` (the default) rather than a
        plain clip, so that clipping the kernel's lobes moves no light.

    Returns
    -------
    numpy.ndarray
        float32, shape (height, width, C), range [0, 1].
    """
    img = np.ascontiguousarray(linear, dtype=np.float32)
    tall = _resample_axis(img, 0, height, kernel)
    wide = _resample_axis(tall, 1, width, kernel)
    if kernel in ("nearest", "sharp"):
        return wide  # convex weights: already in [0, 1]
    if not keep_tile_means:
        return np.clip(wide, 0.0, 1.0, out=wide)
    return clip_keeping_tile_means(wide, img.shape[0], img.shape[1])


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


def _tile_starts(n_in: int, n_out: int, block: int = 1) -> np.ndarray:
    """First output index of each tile: the footprint of ``block`` source pixels (nearest mapping)."""
    owner = np.minimum(np.floor((np.arange(n_out) + 0.5) * n_in / n_out).astype(np.intp), n_in - 1)
    return np.flatnonzero(np.diff(owner // block, prepend=-1))


def clip_keeping_tile_means(values: np.ndarray, src_h: int, src_w: int,
                            blocks: tuple[int, ...] = (1, 4, 16, 64)) -> np.ndarray:
    """Clip to [0, 1] without moving light between regions of the picture.

    Clipping a filtered upscale adds light where a lobe undershoots black and
    removes it where one overshoots white; on fine bright detail (small text)
    the two do not cancel. Over each tile (the output pixels nearest to a
    block of source pixels) the clipped values are pulled back to the
    unclipped sum: scaled towards 0 where the tile gained light, towards 1
    where it lost some. Both moves keep [0, 1]. A tile whose unclipped sum is
    itself below 0 (a thin dark gap between bright strokes) cannot be matched
    alone, so the pass repeats over ever larger blocks of source pixels.

    Parameters
    ----------
    values : numpy.ndarray
        float32, shape (H, W, C), unclipped.
    src_h, src_w : int
        Source size, which sets the tiles.
    blocks : tuple of int
        Tile sides in source pixels, one pass each, finest first.

    Returns
    -------
    numpy.ndarray
        float32, same shape, range [0, 1].
    """
    h, w = values.shape[:2]
    out = np.clip(values, 0.0, 1.0)
    for block in blocks:
        tiles = Tiles(_tile_starts(src_h, h, block), _tile_starts(src_w, w, block), (h, w))
        row_n, col_n = tiles.counts
        area = (row_n[:, None] * col_n[None, :])[..., None].astype(np.float64)
        want = np.clip(tiles.sums(values), 0.0, area)
        have = tiles.sums(out)
        down = np.divide(want, have, out=np.ones_like(have), where=have > want)
        up = np.divide(area - want, area - have, out=np.ones_like(have), where=have < want)
        # in place, so a 4K frame needs no more full-size copies than this one
        if (down < 1).any():
            out *= tiles.spread(down)  # a factor of exactly 1 leaves a value as it was
        if (up < 1).any():
            lift = tiles.spread(up)
            pick = lift < 1
            out[pick] = 1 - (1 - out[pick]) * lift[pick]
            del lift, pick
        np.clip(out, 0.0, 1.0, out=out)
        if len(tiles.rows) == 1 and len(tiles.cols) == 1:
            break
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
        if self.scale is not None and not (0 < self.scale <= 64):
            raise SettingsError(f"scale must be in (0, 64] (got {self.scale})")
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
                f"size {settings.size}"
            )
        pic_x, pic_y = (out_w - pic_w) // 2, (out_h - pic_h) // 2
    else:
        out_w, out_h, pic_x, pic_y = pic_w, pic_h, 0, 0
    if out_w * out_h > 16384 * 16384:
        raise SettingsError(f"output {out_w}x{out_h} is too large (at most 16384x16384 pixels)")
    return Geometry(src_w, src_h, out_w, out_h, pic_x, pic_y, pic_w, pic_h)
