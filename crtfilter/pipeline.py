"""One render: decode, upscale, mask, tone pair, blend, encode, as data in and out.

This is the readable reference path. Each stage is a function of arrays and a
small frozen settings object; :func:`render_codes` only composes them.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import color
from .color import DecodeSettings
from .errors import SettingsError, check_choice
from .masks import Mask, MaskSettings, build_mask
from .scale import Geometry, GeometrySettings, Tiles, check_kernel, plan_geometry, upscale, whole_cell_sums
from .tone import OPEN_MASK, TonePair, ToneSettings, solve_channels

#: Rows of the picture processed at a time, to bound the memory of temporaries.
_CHUNK_ROWS = 256


@dataclass(frozen=True)
class Settings:
    """Every setting of one render, resolved.

    Parameters
    ----------
    decode, geometry, mask, tone
        The stages' own settings.
    kernel : str
        A key of :data:`crtfilter.scale.KERNELS`.
    depth : int
        Output bits per sample for standard range, 8 or 16 (HDR output is
        always 16; see :attr:`output_depth`).
    dither : str
        A key of :data:`crtfilter.color.DITHERS`, applied when rounding to codes.
    output_range : str
        ``"sdr"`` (sRGB, BT.709) or ``"hdr"`` (PQ, BT.2020).
    peak, reference_white : float
        HDR only: the brightest output and where input white lands, in cd/m².
    """

    decode: DecodeSettings = field(default_factory=DecodeSettings)
    geometry: GeometrySettings = field(default_factory=GeometrySettings)
    kernel: str = "sharp"
    mask: MaskSettings = field(default_factory=MaskSettings)
    tone: ToneSettings = field(default_factory=ToneSettings)
    depth: int = 8
    dither: str = "none"
    output_range: str = "sdr"
    peak: float = 1000.0
    reference_white: float = 203.0

    def __post_init__(self):
        check_kernel(self.kernel)
        check_choice("dither", self.dither, color.DITHERS)
        if self.depth not in (8, 16):
            raise SettingsError(f"depth must be 8 or 16 (got {self.depth!r})")
        color.Encoding(self.output_range, float(self.peak), float(self.reference_white))  # validates

    @property
    def output_depth(self) -> int:
        """Bits per sample actually written: PQ in 8 bits would band, so HDR is always 16."""
        return 16 if self.output_range == "hdr" else self.depth

    @property
    def encoding(self) -> color.Encoding:
        """How the output is encoded."""
        return color.Encoding(self.output_range, float(self.peak), float(self.reference_white))


@dataclass
class Render:
    """The result of one render.

    Attributes
    ----------
    codes : numpy.ndarray
        uint8 or uint16, shape (out_h, out_w, 3): sRGB-encoded output.
    geometry : Geometry
    mask : Mask
    pairs : tuple of TonePair
        One per channel.
    source_luminance : float
        Mean relative luminance of the source at its own resolution (linear).
    plain_multiply_luminance : float
        Mean relative luminance of the upscaled picture multiplied by the mask,
        without the tone pair, over the picture area.
    source_channels : numpy.ndarray
        float64 (3,): mean linear R, G, B of the source, in the output's
        primaries (after any source-display colour conversion).
    balance_removed : float
        Share of the tone pair's total deviation that tile balancing took
        away (0 when the picture is constant over every tile).
    input_tile_sums : numpy.ndarray or None
        float64 grid: relative luminance of the upscaled picture before the
        mask, summed over each whole mask cell (window ``tile``) - the input
        side of the local energy audit.
    tile : (rows, columns)
        The cell those sums are taken over (cut to the picture if larger).
    input_luminance : numpy.ndarray or None
        float32 (pic_h, pic_w): the same per pixel, from the reference path.
    route : str
        Which path computed it: ``"reference"``, ``"table"`` or ``"fused"``.
    code_counts, output_tile_sums : numpy.ndarray or None
        When the route measured its output on the way (a picture with no
        borders): how often each code occurs per channel, int64 (3, 2**bits),
        and the output's luminance summed per cell - the same numbers as
        measuring ``codes`` afterwards.
    """

    codes: np.ndarray
    geometry: Geometry
    mask: Mask
    pairs: tuple[TonePair, ...]
    source_luminance: float
    plain_multiply_luminance: float
    source_channels: np.ndarray
    balance_removed: float = 0.0
    input_luminance: np.ndarray | None = None
    encoding: color.Encoding = field(default_factory=color.Encoding)
    gamut_clipped: float = 0.0
    input_tile_sums: np.ndarray | None = None
    tile: tuple[int, int] = (1, 1)
    route: str = "reference"
    code_counts: np.ndarray | None = None
    output_tile_sums: np.ndarray | None = None


def mask_weights(mask_values: np.ndarray, mean: np.ndarray) -> np.ndarray:
    """Return k = (m - mu) / (1 - mu) per channel; 0 where the mask is fully open (mu = 1).

    Returns
    -------
    numpy.ndarray
        float32, same shape as ``mask_values``, range [-mu / (1 - mu), 1].
    """
    mu = np.asarray(mean, dtype=np.float64)
    closed = 1.0 - mu
    # A mask open to within OPEN_MASK gets the identity pair; its weights are 0.
    inv = np.divide(1.0, closed, out=np.zeros_like(closed), where=mu < OPEN_MASK)
    return ((mask_values - mu.astype(np.float32)) * inv.astype(np.float32)).astype(np.float32)


def deviations(linear: np.ndarray, k: np.ndarray, pairs: tuple[TonePair, ...]) -> np.ndarray:
    """Return how far the tone pair moves each value: d = k (L(x) - x), per channel.

    Parameters
    ----------
    linear : numpy.ndarray
        float32, shape (h, w, 3), range [0, 1].
    k : numpy.ndarray
        float32, shape (h, w, 3), from :func:`mask_weights`.
    pairs : tuple of TonePair

    Returns
    -------
    numpy.ndarray
        float32, shape (h, w, 3); x + d is in [0, 1].
    """
    out = np.empty_like(linear)
    for c, pair in enumerate(pairs):
        out[..., c] = pair.deviation(linear[..., c], k[..., c])
    return out


def balance_tiles(d: np.ndarray, tile: tuple[int, int]) -> tuple[np.ndarray, float]:
    """Make the deviations of every tile cancel, by shrinking the larger side.

    Over a tile of whole mask cells and constant x the deviations already sum
    to zero; where the picture changes inside a tile they need not. Per tile
    and channel, whichever of the positive or the negative deviations sums to
    more is scaled down until the two cancel. Deviations only shrink towards
    0, so x + d stays in [0, 1]; the price is a weaker mask in those tiles.

    Parameters
    ----------
    d : numpy.ndarray
        float32, shape (h, w, 3), from :func:`deviations`; row 0 starts a tile.
    tile : (rows, columns)

    Returns
    -------
    balanced : numpy.ndarray
        float32, shape (h, w, 3).
    removed : float
        Sum of |d| taken away (float64), to report how much the mask gave up.
    """
    tiles = Tiles.regular(d.shape[:2], tile)
    pos = np.maximum(d, 0)
    neg = np.minimum(d, 0)
    p, n = tiles.sums(pos), -tiles.sums(neg)
    shrink_pos = np.divide(n, p, out=np.ones_like(p), where=p > n)
    shrink_neg = np.divide(p, n, out=np.ones_like(n), where=n > p)
    removed = float(((1 - shrink_pos) * p + (1 - shrink_neg) * n).sum())
    return pos * tiles.spread(shrink_pos) + neg * tiles.spread(shrink_neg), removed


def linearise(codes: np.ndarray, settings: DecodeSettings, alpha: np.ndarray | None = None) -> np.ndarray:
    """Decode code values to linear light, compositing over the backdrop where there is alpha.

    With ``settings.alpha == "keep"`` the colour is returned as it is.

    Returns
    -------
    numpy.ndarray
        float32, shape (H, W, 3), range [0, 1].
    """
    lin = color.decode(codes, settings)
    backdrop = color.backdrop_code(settings.alpha)
    if alpha is not None and backdrop is not None:
        under = color.decode(np.array(backdrop, np.uint8), DecodeSettings("srgb"))
        a = alpha[..., None]
        lin = lin * a + under * (1 - a)
    return lin


def source_linear(codes: np.ndarray, settings: Settings, alpha: np.ndarray | None = None) -> tuple[np.ndarray, float]:
    """The source in linear light in the output's primaries, at its own resolution.

    Decodes, composites any alpha, and converts from the source display's
    primaries and white to BT.709 (standard range) or BT.2020 (HDR), clipping
    what falls outside.

    Returns
    -------
    linear : numpy.ndarray
        float32, shape (H, W, 3), range [0, 1].
    clipped : float
        Share of pixels the colour conversion had to clip.
    """
    d = settings.decode
    matrix = color.source_matrix(d.primaries, d.white, settings.output_range, adaptation=d.white_adaptation)
    return color.convert_gamut(linearise(codes, d, alpha), matrix)


@dataclass
class _Prepared:
    geometry: Geometry
    mask: Mask
    pairs: tuple[TonePair, ...]
    up: np.ndarray
    source_channels: np.ndarray
    encoding: color.Encoding
    alpha_up: np.ndarray | None = None
    gamut_clipped: float = 0.0


def _prepare(codes: np.ndarray, settings: Settings, alpha: np.ndarray | None) -> _Prepared:
    if codes.ndim != 3 or codes.shape[2] != 3:
        raise SettingsError(f"pixels must have shape (H, W, 3) (got {codes.shape})")
    src, clipped = source_linear(codes, settings, alpha)
    src_h, src_w = src.shape[:2]
    geometry = plan_geometry(src_w, src_h, settings.geometry)
    mask = build_mask(geometry, settings.mask)
    encoding = settings.encoding
    pairs = solve_channels(mask.mean, settings.tone, headroom=encoding.headroom)
    alpha_up = None
    if alpha is not None and settings.decode.keep_alpha:
        # coverage, not light: a plain clip of the kernel's lobes is right here
        alpha_up = upscale(alpha[..., None], geometry.pic_w, geometry.pic_h, settings.kernel,
                           keep_tile_means=False)[..., 0]
    return _Prepared(geometry, mask, pairs,
                     upscale(src, geometry.pic_w, geometry.pic_h, settings.kernel),
                     color.channel_means(src), encoding, alpha_up, clipped)


def output_canvas(prep: _Prepared, depth: int) -> np.ndarray:
    """The zeroed output (black borders), with the kept alpha plane filled in if any.

    Returns
    -------
    numpy.ndarray
        uint8 or uint16 by ``depth``, shape (out_h, out_w, 3 or 4).
    """
    g = prep.geometry
    channels = 3 if prep.alpha_up is None else 4
    out = np.zeros((g.out_h, g.out_w, channels), np.uint8 if depth == 8 else np.uint16)
    if prep.alpha_up is not None:
        out[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w, 3] = \
            (prep.alpha_up * np.float32(2**depth - 1) + np.float32(0.5)).astype(out.dtype)
    return out


def balance_tile(mask: Mask) -> tuple[int, int]:
    """(rows, columns) of the tiles :func:`balance_tiles` works on: one mask period cell.

    The cell is the smallest area over which the mask is neutral, and the one
    the local energy audit measures.
    """
    return mask.cell


def _blocks(prep: _Prepared, balance: bool):
    """Yield (rows, x, m, y, |d| total, |d| removed) over the picture, a band of rows at a time."""
    h = prep.geometry.pic_h
    tile = balance_tile(prep.mask)
    band = tile[0] * max(1, _CHUNK_ROWS // tile[0])
    for top in range(0, h, band):
        rows = slice(top, min(top + band, h))
        x = prep.up[rows]
        m = prep.mask.pixels(rows=rows)
        d = deviations(x, mask_weights(m, prep.mask.mean), prep.pairs)
        total = float(np.abs(d).sum(dtype=np.float64))
        removed = 0.0
        if balance and all(p.balanced for p in prep.pairs):
            d, removed = balance_tiles(d, tile)
        d += x
        np.clip(d, 0.0, prep.encoding.headroom, out=d)
        yield rows, x, m, d, total, removed


def render_linear(codes: np.ndarray, settings: Settings = Settings(), *,
                  alpha: np.ndarray | None = None) -> tuple[np.ndarray, Render]:
    """Render to linear light, before encoding: for analysis and tests.

    Returns
    -------
    picture : numpy.ndarray
        float32, shape (pic_h, pic_w, 3), linear light in [0, 1]: the picture
        area only, no borders.
    render : Render
        As :func:`render_codes`, with ``codes`` empty.
    """
    prep = _prepare(codes, settings, alpha)
    g = prep.geometry
    picture = np.empty((g.pic_h, g.pic_w, 3), np.float32)
    tally = _Tally(np.empty((g.pic_h, g.pic_w), np.float32), prep.encoding.luma)
    for rows, x, m, y, total, removed in _blocks(prep, settings.tone.balance_tiles):
        tally.add(rows, x, m, total, removed)
        picture[rows] = y
    return picture, _result(prep, np.zeros((0, 0, 3), np.uint8), tally)


@dataclass
class _Tally:
    input_luminance: np.ndarray
    luma: np.ndarray
    multiply: float = 0.0
    total: float = 0.0
    removed: float = 0.0

    def add(self, rows: slice, x: np.ndarray, m: np.ndarray, total: float, removed: float) -> None:
        self.input_luminance[rows] = color.luminance(x, self.luma)
        self.multiply += float(color.luminance(x * m, self.luma).sum(dtype=np.float64))
        self.total += total
        self.removed += removed


def _result(prep: _Prepared, codes: np.ndarray, tally: _Tally) -> Render:
    g = prep.geometry
    return Render(
        codes=codes,
        geometry=g,
        mask=prep.mask,
        pairs=prep.pairs,
        source_luminance=float(prep.source_channels @ prep.encoding.luma),
        plain_multiply_luminance=tally.multiply / (g.pic_w * g.pic_h),
        source_channels=prep.source_channels,
        balance_removed=tally.removed / tally.total if tally.total > 0 else 0.0,
        input_luminance=tally.input_luminance,
        encoding=prep.encoding,
        gamut_clipped=prep.gamut_clipped,
        input_tile_sums=whole_cell_sums(tally.input_luminance, balance_tile(prep.mask)),
        tile=_cut_tile(prep),
    )


def _cut_tile(prep: _Prepared) -> tuple[int, int]:
    g, (rows, cols) = prep.geometry, balance_tile(prep.mask)
    return (min(rows, g.pic_h), min(cols, g.pic_w))


#: How a render may be computed: ``auto`` takes a fast route where one applies.
ENGINES = ("auto", "fast", "reference")


def render_codes(codes: np.ndarray, settings: Settings = Settings(), *,
                 alpha: np.ndarray | None = None, engine: str = "auto", figures: bool = True) -> Render:
    """Render source code values into the output picture.

    Parameters
    ----------
    codes : numpy.ndarray
        uint8 or uint16, shape (H, W, 3): source code values.
    settings : Settings
    alpha : numpy.ndarray, optional
        float32 (H, W) coverage. Composited over the backdrop colour of
        ``settings.decode.alpha``, or with ``"keep"`` upscaled and written as
        a fourth channel (transparent outside the picture).
    engine : str
        ``"reference"``: this module's NumPy path, the specification.
        ``"auto"``: the fast path of :mod:`crtfilter.fast` where it applies,
        else the reference. ``"fast"``: as auto (kept for symmetry in tests).
    figures : bool
        Compute the light figures (source, plain multiply, per-cell input);
        the pixels are the same either way.

    Returns
    -------
    Render
        ``codes`` has 4 channels when alpha is kept.
    """
    check_choice("engine", engine, ENGINES)
    if codes.ndim != 3 or codes.shape[2] != 3:
        raise SettingsError(f"pixels must have shape (H, W, 3) (got {codes.shape})")
    if engine != "reference":
        from .fast import render_fast

        fast = render_fast(codes, settings, alpha=alpha, figures=figures)
        if fast is not None:
            return fast
    prep = _prepare(codes, settings, alpha)
    g = prep.geometry
    out = output_canvas(prep, settings.output_depth)
    tally = _Tally(np.empty((g.pic_h, g.pic_w), np.float32), prep.encoding.luma)
    for rows, x, m, y, total, removed in _blocks(prep, settings.tone.balance_tiles):
        tally.add(rows, x, m, total, removed)
        offsets = None if prep.encoding.hdr else color.dither_offsets(settings.dither, y.shape, top=rows.start)
        out[g.pic_y + rows.start:g.pic_y + rows.stop, g.pic_x:g.pic_x + g.pic_w, :3] = \
            prep.encoding.encode(y, settings.output_depth, dither=offsets)
    return _result(prep, out, tally)


def reference_codes(codes: np.ndarray, settings: Settings = Settings(), *, kind: str = "multiply",
                    alpha: np.ndarray | None = None) -> tuple[np.ndarray, Geometry]:
    """The pictures crtfilter is compared with, at the same geometry as a render.

    ``kind="multiply"``: the upscaled picture times the settings' mask, with no
    tone pair - the darkening a plain overlay causes. ``kind="nearest"``: a
    plain nearest-neighbour upscale, no mask.

    Returns
    -------
    codes : numpy.ndarray
        uint8 or uint16, shape (out_h, out_w, 3), encoded as the settings say.
    geometry : Geometry
    """
    check_choice("reference", kind, ("multiply", "nearest"))
    prep = _prepare(codes, settings, alpha)
    g = prep.geometry
    out = np.zeros((g.out_h, g.out_w, 3), np.uint8 if settings.output_depth == 8 else np.uint16)
    if kind == "nearest":
        src, _ = source_linear(codes, settings, alpha)
        picture = upscale(src, g.pic_w, g.pic_h, "nearest")
    else:
        picture = np.empty((g.pic_h, g.pic_w, 3), np.float32)
        for top in range(0, g.pic_h, _CHUNK_ROWS):
            rows = slice(top, min(top + _CHUNK_ROWS, g.pic_h))
            picture[rows] = prep.up[rows] * prep.mask.pixels(rows=rows)
    out[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w] = prep.encoding.encode(picture, settings.output_depth)
    return out, g
