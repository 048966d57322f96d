"""The reference render: decode, upscale, mask, tone pair, blend, encode, in NumPy.

This is the readable specification. Each stage is a function of arrays and a
small frozen settings object; :func:`render_reference` only composes them.
The fast path (:mod:`crtfilter.fast`) computes the same render and is held to
this one in the tests; this module imports nothing of it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import color
from .capture import cut
from .errors import check_choice
from .plan import (Render, RenderPlan, Settings, check_pixels, mask_weights, output_canvas, plan_render,
                   source_linear)
from .glow import apply_glow
from .rounding import carry_run, hold_cell_light
from .scale import Geometry, Tiles, upscale, whole_cell_sums
from .tone import TonePair

#: Rows of the picture processed at a time, to bound the memory of temporaries.
_CHUNK_ROWS = 256

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


@dataclass
class _Prepared:
    plan: RenderPlan
    up: np.ndarray
    source_channels: np.ndarray
    alpha_up: np.ndarray | None = None
    gamut_clipped: float = 0.0


def _prepare(codes: np.ndarray, settings: Settings, alpha: np.ndarray | None) -> _Prepared:
    check_pixels(codes)
    src, clipped = source_linear(codes, settings, alpha)
    plan = plan_render(settings, src.shape[1], src.shape[0])
    g = plan.geometry
    alpha_up = None
    if alpha is not None and settings.decode.keep_alpha:
        # coverage, not light: a plain clip of the kernel's lobes is right here
        alpha_up = upscale(alpha[..., None], g.pic_w, g.pic_h, settings.kernel)[..., 0]
    return _Prepared(plan, upscale(src, g.pic_w, g.pic_h, settings.kernel, cell=plan.cell),
                     color.channel_means(src), alpha_up, clipped)


def _blocks(prep: _Prepared, balance: bool):
    """Yield (rows, x, m, y, |d| total, |d| removed) over the picture, a band of rows at a time."""
    plan = prep.plan
    h = plan.geometry.pic_h
    tile = plan.cell
    band = tile[0] * max(1, _CHUNK_ROWS // tile[0])
    for top in range(0, h, band):
        rows = slice(top, min(top + band, h))
        x = prep.up[rows]
        m = plan.mask.pixels(rows=rows)
        d = deviations(x, mask_weights(m, plan.mask.mean), plan.pairs)
        total = float(np.abs(d).sum(dtype=np.float64))
        removed = 0.0
        if balance and all(p.balanced for p in plan.pairs):
            d, removed = balance_tiles(d, tile)
        d += x
        np.clip(d, 0.0, plan.encoding.headroom, out=d)
        yield rows, x, m, d, total, removed


def render_linear(codes: np.ndarray, settings: Settings = Settings(), *,
                  alpha: np.ndarray | None = None) -> tuple[np.ndarray, Render]:
    """Render to linear light, before encoding: for analysis and tests.

    Returns
    -------
    picture : numpy.ndarray
        float32, shape (pic_h, pic_w, 3), linear light in [0, headroom] (after
        any glow, before a light share's gain): the picture area only, no borders.
    render : Render
        As :func:`render_reference`, with ``codes`` empty.
    """
    prep = _prepare(codes, settings, alpha)
    g = prep.plan.geometry
    picture = np.empty((g.pic_h, g.pic_w, 3), np.float32)
    tally = _Tally(np.empty((g.pic_h, g.pic_w), np.float32), prep.plan.encoding.luma)
    for rows, x, m, y, total, removed in _blocks(prep, settings.tone.balance_tiles):
        tally.add(rows, x, m, total, removed)
        picture[rows] = y
    apply_glow(picture, settings.glow)
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
    plan = prep.plan
    g = plan.geometry
    return Render(
        codes=codes,
        geometry=g,
        mask=plan.mask,
        pairs=plan.pairs,
        source_luminance=float(prep.source_channels @ plan.encoding.luma),
        plain_multiply_luminance=tally.multiply / (g.pic_w * g.pic_h),
        source_channels=prep.source_channels,
        balance_removed=tally.removed / tally.total if tally.total > 0 else 0.0,
        input_luminance=tally.input_luminance,
        encoding=plan.encoding,
        gamut_clipped=prep.gamut_clipped,
        input_tile_sums=whole_cell_sums(tally.input_luminance, plan.cell),
        tile=plan.tile,
    )


def render_reference(codes: np.ndarray, settings: Settings = Settings(), *,
                     alpha: np.ndarray | None = None) -> Render:
    """Render source code values into the output picture, by the reference path.

    Parameters
    ----------
    codes : numpy.ndarray
        uint8 or uint16, shape (H, W, 3): source code values.
    settings : Settings
    alpha : numpy.ndarray, optional
        float32 (H, W) coverage. Composited over the backdrop colour of
        ``settings.decode.alpha``, or with ``"keep"`` upscaled and written as
        a fourth channel (transparent outside the picture).

    Returns
    -------
    Render
        ``codes`` has 4 channels when alpha is kept.
    """
    prep = _prepare(codes, settings, alpha)
    plan = prep.plan
    g = plan.geometry
    out = output_canvas(g, settings.output_depth, prep.alpha_up)
    tally = _Tally(np.empty((g.pic_h, g.pic_w), np.float32), plan.encoding.luma)
    whole = settings.holds_cell_light or settings.glow.on  # stages that see the whole picture
    wanted = np.empty((g.pic_h, g.pic_w, 3), np.float32) if whole else None
    picture = out[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w, :3]
    gain = np.float32(plan.encoding.gain)  # the headroom a light share leaves, under display white
    for rows, x, m, y, total, removed in _blocks(prep, settings.tone.balance_tiles):
        tally.add(rows, x, m, total, removed)
        if wanted is not None:
            wanted[rows] = y
            continue
        offsets = None if plan.encoding.hdr else color.dither_offsets(settings.dither, y.shape, top=rows.start)
        picture[rows] = plan.encoding.encode(y * gain if gain != 1 else y, settings.output_depth, dither=offsets)
    if wanted is not None:
        apply_glow(wanted, settings.glow)
        if gain != 1:
            wanted *= gain
        offsets = None if plan.encoding.hdr else color.dither_offsets(settings.dither, wanted.shape)
        picture[...] = plan.encoding.encode(wanted, settings.output_depth, dither=offsets)
        if settings.holds_cell_light:  # each cell's light held, over the whole picture at once
            picture[...] = hold_cell_light(wanted, picture, plan.encoding.table(settings.output_depth),
                                           plan.cell, carry_run(g, plan.cell))
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
    codes, alpha = cut(codes, alpha, settings.capture)  # the picture of the frame, as render_codes cuts it
    prep = _prepare(codes, settings, alpha)
    plan = prep.plan
    g = plan.geometry
    out = np.zeros((g.out_h, g.out_w, 3), np.uint8 if settings.output_depth == 8 else np.uint16)
    if kind == "nearest":
        src, _ = source_linear(codes, settings, alpha)
        picture = upscale(src, g.pic_w, g.pic_h, "nearest")
    else:
        picture = np.empty((g.pic_h, g.pic_w, 3), np.float32)
        for top in range(0, g.pic_h, _CHUNK_ROWS):
            rows = slice(top, min(top + _CHUNK_ROWS, g.pic_h))
            picture[rows] = prep.up[rows] * plan.mask.pixels(rows=rows)
    out[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w] = plan.encoding.encode(picture, settings.output_depth)
    return out, g
