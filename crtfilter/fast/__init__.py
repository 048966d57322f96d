"""The fast path: the same render as :mod:`crtfilter.pipeline`, computed with numba.

Two routes, chosen per render (:func:`route_reason`):

- **Table route** (nearest or sharp kernel at whole-number scales, each source
  pixel covering whole mask cells, 8-bit source, no colour conversion, alpha
  or dither): every output value is a function of one source code and one
  mask phase, so a table ``T[row phase, column phase, channel, code]`` is
  built once per settings and size and the render is a gather from it. Its
  figures come from the source and the table, not from the output.
- **Fused route** (everything else): the source is decoded and converted at
  its own size, resampled along rows once (:func:`kernels.resample_columns`),
  and then every band of mask cells is upscaled along columns, clipped
  keeping each cell's light, masked, toned, balanced, encoded and measured in
  one compiled pass (:func:`kernels.fused`), with no full-size float arrays.

What depends only on the settings and the source size is cached per
(settings, size): :func:`fast_plan`. The reference path is the
specification; tests hold the two within one code value of each other.
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from .. import color
from ..plan import Render, RenderPlan, mask_weights, output_canvas, plan_render, source_linear
from ..rounding import carry_run, hold_cell_light
from ..scale import BAND_CELLS, CONVEX_KERNELS, resample_taps
from ._numba import kernels_module, numba_module, prepare_numba_cache, ready, warm

__all__ = ["render_fast", "route_reason", "needed_kernels", "fast_plan", "code_histograms", "tile_luminance_sums", "brightest_code_counts",
           "kernels_module", "numba_module", "prepare_numba_cache", "ready", "warm", "set_threads", "threads"]

_THREADS: int | None = None


def threads() -> int:
    """How many threads a render splits its bands over: ``CRTFILTER_THREADS``, or one per core."""
    if _THREADS is not None:
        return _THREADS
    env = os.environ.get("CRTFILTER_THREADS")
    if env and env.isdigit() and int(env) > 0:
        return int(env)
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)


def set_threads(n: int | None) -> None:
    """Render on ``n`` threads from now on (None: back to :func:`threads`' default)."""
    global _THREADS
    _THREADS = None if n is None else max(1, int(n))


def _ours(a: np.ndarray, dtype=None) -> np.ndarray:
    """``a`` as a C-ordered, writeable array, the kind the kernels are compiled for (a copy if need be)."""
    a = np.ascontiguousarray(a, dtype=dtype)
    return a if a.flags.writeable else a.copy()


def _split(kernel, n_items: int, *args) -> None:
    """Call ``kernel(*args, first, stop)`` over 0..n_items in as many contiguous runs as threads.

    The kernels release the GIL, so the runs go on side by side; every item is
    computed the same way whatever the split, so the output does not depend on
    the number of threads. The threads end before this returns (a batch may
    fork its workers afterwards).
    """
    _split_range(kernel, 0, n_items, *args)


def _split_range(kernel, first: int, stop: int, *args) -> None:
    """:func:`_split` over the items first..stop only."""
    n = max(1, min(threads(), stop - first))
    if n == 1:
        kernel(*args, first, stop)
        return
    edges = [first + (stop - first) * i // n for i in range(n + 1)]
    with ThreadPoolExecutor(max_workers=n) as pool:
        for job in [pool.submit(kernel, *args, a, b) for a, b in zip(edges, edges[1:])]:
            job.result()


def route_reason(settings, plan: RenderPlan, bits: int, has_alpha: bool) -> str | None:
    """Why the table route cannot serve this render (so the fused route does), or None when it can."""
    g, mask = plan.geometry, plan.mask
    if settings.glow.on:
        return "glow"
    if settings.kernel not in ("nearest", "sharp"):
        return "filtered kernel"
    if g.pic_w % g.src_w or g.pic_h % g.src_h:
        return "fractional scale"
    if bits != 8 or has_alpha:
        return "16-bit or transparent source"
    if settings.dither != "none":
        return "dither"
    if settings.colour_matrix is not None:
        return "colour conversion"
    ch, cw = mask.cell
    sy, sx = g.pic_h // g.src_h, g.pic_w // g.src_w
    if g.pic_h % ch or g.pic_w % cw:
        return "the picture is not a whole number of mask cells"
    if settings.tone.balance_tiles and (sy % ch or sx % cw):
        return "mask cells straddle source pixels"
    if settings.holds_cell_light and (sy % ch or sx % cw):
        return "cells straddle source pixels, and their light is held to the last code"
    return None


@dataclass(frozen=True)
class TablePlan:
    """The table route's precomputed parts."""

    table: np.ndarray      # (ch, cw, 3, 256) output codes
    row_src: np.ndarray    # (pic_h,) int32 source row of each output row
    col_src: np.ndarray    # (pic_w,) int32
    row_phase: np.ndarray  # (pic_h,) int32 row within the mask cell
    col_phase: np.ndarray  # (pic_w,) int32
    per_pixel: bool        # every source pixel covers whole cells: figures from the source alone
    spans: np.ndarray      # per_pixel: (ch, 3, 256, sx) the codes one source pixel's columns get
    rows_at: np.ndarray    # (H, ch) how many output rows of each source row sit at each cell row
    cols_at: np.ndarray    # (W, cw)
    cell_mask: np.ndarray  # (ch, cw, 3) float64: one period cell of the mask


@dataclass(frozen=True)
class FusedPlan:
    """The fused route's precomputed parts: taps, mask factors, curves, encoding."""

    col_idx: np.ndarray
    col_w: np.ndarray
    row_idx: np.ndarray
    row_w: np.ndarray
    clip: bool
    ay: np.ndarray
    ax: np.ndarray
    sy: np.ndarray
    vx: np.ndarray
    mu: np.ndarray
    inv: np.ndarray
    kind: np.ndarray
    coeffs: np.ndarray
    ncoef: np.ndarray
    slope: np.ndarray
    band_rows: int
    ekind: int
    top: float
    dtab: np.ndarray


@dataclass(frozen=True)
class FastPlan:
    render: RenderPlan
    table: TablePlan | None
    fused: FusedPlan | None
    reason: str | None


@lru_cache(maxsize=16)
def fast_plan(settings, src_w: int, src_h: int, bits: int = 8, has_alpha: bool = False) -> FastPlan:
    """The cached plan of a fast render of this size with these settings."""
    plan = plan_render(settings, src_w, src_h)
    reason = route_reason(settings, plan, bits, has_alpha)
    if reason is None:
        return FastPlan(plan, _table_plan(settings, plan), None, None)
    return FastPlan(plan, None, _fused_plan(settings, plan), reason)


def _table_plan(settings, plan: RenderPlan) -> TablePlan:
    g, mask = plan.geometry, plan.mask
    ch, cw = mask.cell
    row_src = np.minimum(np.arange(g.pic_h) * g.src_h // g.pic_h, g.src_h - 1).astype(np.int32)
    col_src = np.minimum(np.arange(g.pic_w) * g.src_w // g.pic_w, g.src_w - 1).astype(np.int32)
    # the output code of every (mask phase, channel, source code), by the reference formulas
    m = mask.pixels(rows=slice(0, ch), columns=slice(0, cw))             # (ch, cw, 3)
    k = mask_weights(m, mask.mean)
    x = color.decode_table(settings.decode.transfer, 8)
    y = np.empty((ch, cw, 3, 256), np.float32)
    for c, pair in enumerate(plan.pairs):
        xs = np.broadcast_to(x, (ch, cw, 256)).astype(np.float32)
        y[:, :, c, :] = xs + pair.deviation(xs, k[:, :, c, None])
    np.clip(y, 0.0, plan.encoding.headroom, out=y)
    y *= np.float32(plan.encoding.gain)  # a light share's headroom, under display white
    table = np.ascontiguousarray(plan.encoding.encode(y, settings.output_depth))
    sy, sx = g.pic_h // g.src_h, g.pic_w // g.src_w
    row_phase = (np.arange(g.pic_h) % ch).astype(np.int32)
    col_phase = (np.arange(g.pic_w) % cw).astype(np.int32)
    per_pixel = sy % ch == 0 and sx % cw == 0
    # with whole cells in every source pixel, each source pixel's columns follow one pattern
    spans = (np.ascontiguousarray(table[:, np.arange(sx) % cw].transpose(0, 2, 3, 1)) if per_pixel
             else np.zeros((1, 3, 256, 1), table.dtype))
    if per_pixel and settings.holds_cell_light:
        # one source pixel's cell row is a run of whole cells (rounding.carry_run): settle each
        # code's run once, as a picture of the 256 runs side by side, one channel per plane
        wanted = np.ascontiguousarray(y[:, np.arange(sx) % cw].transpose(0, 3, 1, 2)).reshape(ch, 256 * sx, 3)
        nearest = spans.transpose(0, 2, 3, 1).reshape(ch, 256 * sx, 3)
        held = hold_cell_light(wanted, nearest, plan.encoding.table(settings.output_depth), (ch, cw), sx // cw)
        spans = np.ascontiguousarray(held.reshape(ch, 256, sx, 3).transpose(0, 3, 1, 2))
    return TablePlan(table, row_src, col_src, row_phase, col_phase, per_pixel, spans,
                     _counts(row_phase, row_src, ch, g.src_h), _counts(col_phase, col_src, cw, g.src_w),
                     mask.pixels(rows=slice(0, ch), columns=slice(0, cw)).astype(np.float64))


_CURVE_KIND = {"blend": 0, "integer": 0, "exponent": 1, "piecewise": 2, "multiply": 4}

#: Segments of the table of encoded sRGB against the square root of linear light.
_SRGB_SEGMENTS = 4096


#: Evenly spaced linear levels of the 8-bit sRGB code table, less one.
_SRGB_BINS = 65535


@lru_cache(maxsize=1)
def _srgb_tables() -> tuple[np.ndarray, np.ndarray]:
    """The 8-bit sRGB code of each of 65536 evenly spaced linear levels (by the reference
    encoder, so a value gets its code unless it lies within half a level of where one
    code gives way to the next), and the encoded value at (i / 4096)^2 of linear light."""
    codes = color.encode_srgb(np.arange(_SRGB_BINS + 1, dtype=np.float64) / _SRGB_BINS, 8)
    lin = (np.arange(_SRGB_SEGMENTS + 1, dtype=np.float64) / _SRGB_SEGMENTS) ** 2
    lut = np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * np.power(lin, 1 / 2.4) - 0.055)
    return np.ascontiguousarray(codes, np.uint8), lut


#: Segments of the table of the PQ signal against the eighth root of linear light.
_PQ_SEGMENTS = 16384


@lru_cache(maxsize=4)
def _pq_table(headroom: float, reference_white: float) -> np.ndarray:
    """The PQ signal (SMPTE ST 2084, in [0, 1]) at linear levels headroom * (i / segments)^8,
    white at ``reference_white`` cd/m²: interpolated, it is within one 16-bit code of the formula."""
    q = np.linspace(0.0, 1.0, _PQ_SEGMENTS + 1)
    y = np.clip(headroom * q**8 * reference_white / color.PQ_PEAK, 0.0, 1.0)
    p = np.power(y, 2610 / 16384)
    return ((0.8359375 + 18.8515625 * p) / (1.0 + 18.6875 * p)) ** 78.84375


def _pair_arrays(pairs):
    kind = np.array([3 if p.linear else _CURVE_KIND[p.curve] for p in pairs], np.int64)
    length = max(len(p.horner) for p in pairs) or 1
    coeffs = np.zeros((len(pairs), length), np.float32)
    ncoef = np.zeros(len(pairs), np.int64)
    for c, p in enumerate(pairs):
        coeffs[c, :len(p.horner)] = p.horner
        ncoef[c] = len(p.horner)
    slope = np.array([p.slope for p in pairs], np.float32)
    return kind, coeffs, ncoef, slope


def _mask_arrays(mask):
    """The mask as m = ay[y] + ax[x] + sum_q sy[q, y, c] vx[q, c, x] over the picture (float32)."""
    a, b, cols = mask.a.astype(np.float32), mask.b.astype(np.float32), mask.cols.astype(np.float32)
    q = b.shape[0]
    if not mask.transposed:
        h, w = a.shape[0], cols.shape[1]
        ay, ax = a, np.zeros(w, np.float32)
        sy = np.ascontiguousarray(np.broadcast_to(b[:, :, None], (q, h, 3)))
        vx = np.ascontiguousarray(cols.transpose(0, 2, 1))
    else:  # a and b run along columns, cols along rows
        w, h = a.shape[0], cols.shape[1]
        ay, ax = np.zeros(h, np.float32), a
        sy = np.ascontiguousarray(cols)
        vx = np.ascontiguousarray(np.broadcast_to(b[:, None, :], (q, 3, w)))
    return np.ascontiguousarray(ay), np.ascontiguousarray(ax), sy, vx


def _fused_plan(settings, plan: RenderPlan) -> FusedPlan:
    g, mask, enc = plan.geometry, plan.mask, plan.encoding
    col_idx, col_w = resample_taps(g.src_w, g.pic_w, settings.kernel)
    row_idx, row_w = resample_taps(g.src_h, g.pic_h, settings.kernel)
    kind, coeffs, ncoef, slope = _pair_arrays(plan.pairs)
    mu = np.array([p.mu for p in plan.pairs], np.float64)
    closed = 1.0 - mu
    inv = np.divide(1.0, closed, out=np.zeros_like(closed), where=mu < 1.0 - 1e-6)
    depth = settings.output_depth
    if enc.hdr:
        ekind, top = 2, 65535.0
    elif depth == 8 and settings.dither == "none":
        ekind, top = 0, 255.0
    else:
        ekind, top = 1, float(2**depth - 1)
    bits = 16 if depth == 16 else 8
    dtab = np.ascontiguousarray(enc.table(bits))
    ay, ax, sy, vx = _mask_arrays(mask)
    return FusedPlan(
        col_idx=np.ascontiguousarray(col_idx, np.int32), col_w=np.ascontiguousarray(col_w, np.float32),
        row_idx=np.ascontiguousarray(row_idx, np.int32), row_w=np.ascontiguousarray(row_w, np.float32),
        clip=settings.kernel not in CONVEX_KERNELS, ay=ay, ax=ax, sy=sy, vx=vx,
        mu=mu.astype(np.float32), inv=inv.astype(np.float32), kind=kind, coeffs=coeffs, ncoef=ncoef,
        slope=slope, band_rows=BAND_CELLS * plan.cell[0], ekind=ekind, top=top,
        dtab=dtab)


def render_fast(codes: np.ndarray, settings, *, alpha: np.ndarray | None = None, figures: bool = True):
    """Render by the fast path, or return None when numba cannot be had.

    Returns
    -------
    crtfilter.plan.Render or None
    """
    ready_plan = _ready_plan(codes, settings, alpha is not None)
    if ready_plan is None:
        return None
    fp, kernels = ready_plan
    if fp.table is not None:
        return _render_table(kernels, codes, settings, fp, figures)
    return _render_fused(kernels, codes, settings, fp, alpha)


def _ready_plan(codes: np.ndarray, settings, has_alpha: bool):
    """The fast plan of this render and the kernels module with what it needs ready
    (None where no kernel is needed), or None when numba cannot be had."""
    bits = 16 if codes.dtype == np.uint16 else 8
    fp = fast_plan(settings, codes.shape[1], codes.shape[0], bits, has_alpha)
    wanted = needed_kernels(settings, codes.shape[1], codes.shape[0], bits, has_alpha)
    kernels = kernels_module() if wanted else None
    if wanted and (kernels is None or not ready(*wanted)):
        return None
    return fp, kernels


def render_rows(codes: np.ndarray, settings, first: int, stop: int) -> tuple[np.ndarray, object] | None:
    """Output rows ``first..stop`` of a fast render, computing only the bands that hold them.

    Every band of a render is computed alone (that is how the threads split a
    frame), so these rows are byte for byte the rows of the whole render; the
    rest of the returned canvas is black. Returns ``(canvas, geometry)``, or None
    where a part needs the whole frame (glow spreads light across bands) or numba
    cannot be had: then render the whole frame.
    """
    if settings.glow.on:
        return None
    ready_plan = _ready_plan(codes, settings, False)
    if ready_plan is None:
        return None
    fp, kernels = ready_plan
    g = fp.render.geometry
    a, b = max(0, first - g.pic_y), min(g.pic_h, stop - g.pic_y)  # picture rows
    if fp.table is not None:
        return _render_table(kernels, codes, settings, fp, False, rows=(a, max(a, b))).codes, g
    band = fp.fused.band_rows
    bands = (a // band, -(-b // band)) if b > a else (0, 0)
    return _render_fused(kernels, codes, settings, fp, None, bands=bands).codes, g


def needed_kernels(settings, src_w: int, src_h: int, bits: int = 8, has_alpha: bool = False) -> tuple:
    """The kernels (keys for :func:`ready`) a fast render of this source with these settings runs."""
    fp = fast_plan(settings, src_w, src_h, bits, has_alpha)
    variant = 0 if settings.output_depth == 8 else 1
    wanted = [("brightest_codes", 0)] if settings.output_range == "hdr" else []
    if fp.table is not None:
        # whole cells in every source pixel: a NumPy gather, no compiled code at all
        return tuple(wanted) if fp.table.per_pixel else (("gather", variant), *wanted)
    wanted += [("resample_columns", 0), ("fused", variant)]
    if settings.glow.on:
        wanted += [("settle_picture", variant), ("glow_rows", 0), ("glow_columns", 0)]
    if has_alpha and settings.decode.keep_alpha:
        wanted.append(("alpha_plane", variant))
    return tuple(wanted)


# --------------------------------------------------------------------------
# The table route


def _render_table(kernels, codes: np.ndarray, settings, fp: FastPlan, figures: bool,
                  rows: tuple[int, int] | None = None) -> Render:
    """The table route; ``rows`` (first, stop) gathers those picture rows alone where the
    gather is compiled (a source pixel of whole cells is a NumPy gather of the whole
    picture: a few milliseconds)."""
    plan, tp = fp.render, fp.table
    g = plan.geometry
    out = output_canvas(g, settings.output_depth)
    render = Render(codes=out, geometry=g, mask=plan.mask, pairs=plan.pairs, source_luminance=0.0,
                    plain_multiply_luminance=0.0, source_channels=np.zeros(3), encoding=plan.encoding,
                    tile=plan.tile, route="table")
    if tp.per_pixel:
        colours, which = source_colours(codes)
        _gather_blocks(colours, which, tp.spans, out[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w])
        if figures:
            _colour_figures(colours, which, settings, fp, render)
        return render
    _split_range(kernels.gather, *(rows or (0, g.pic_h)), _ours(codes), tp.table, tp.row_src, tp.row_phase,
                 tp.col_src, tp.col_phase, out, g.pic_y, g.pic_x)
    if figures:
        _table_figures(codes, settings, fp, render)
    return render


#: Up to this many distinct colours, a source's colours are found by a sort and a binary
#: search (fast for pixel art); beyond it, by numpy.unique's indirect sort.
_FEW_COLOURS = 4096


def source_colours(codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distinct colours of an 8-bit RGB source, and which one each pixel has.

    Returns
    -------
    colours : numpy.ndarray
        uint32 (n,), sorted, each 0xRRGGBB.
    which : numpy.ndarray
        intp (H, W): the index in ``colours`` of each pixel's colour.

    Examples
    --------
    >>> colours, which = source_colours(np.array([[[255, 0, 0], [0, 0, 9], [255, 0, 0]]], np.uint8))
    >>> [hex(c) for c in colours], which.tolist()
    (['0x9', '0xff0000'], [[1, 0, 1]])
    """
    packed = ((codes[..., 0].astype(np.uint32) << 16) | (codes[..., 1].astype(np.uint32) << 8)
              | codes[..., 2]).ravel()
    ordered = np.sort(packed)
    first = np.empty(ordered.size, bool)
    first[:1] = True
    np.not_equal(ordered[1:], ordered[:-1], out=first[1:])
    colours = ordered[first]
    if colours.size <= _FEW_COLOURS:
        which = np.searchsorted(colours, packed)
    else:
        which = np.argsort(packed, kind="stable")
        rank = np.cumsum(first) - 1
        inverse = np.empty(packed.size, np.intp)
        inverse[which] = rank
        which = inverse
    return colours, which.reshape(codes.shape[:2])


def _take_rows(blocks: np.ndarray, index: np.ndarray, out: np.ndarray, first: int, stop: int) -> None:
    # mode="clip": the indices are in range, and "raise" would copy through a buffer
    np.take(blocks, index[first:stop], axis=0, out=out[first:stop], mode="clip")


def _gather_blocks(colours: np.ndarray, which: np.ndarray, spans: np.ndarray, picture: np.ndarray) -> None:
    """Write the table route's picture where every source pixel covers whole mask cells.

    Then the columns of one source pixel in one output row depend only on its
    colour and the row's place in the cell: each distinct source colour gets
    its run of ``sx`` output pixels for each cell row once (``blocks``), and
    the picture is one gather of those runs, by rows (``numpy.take``, which
    releases the GIL, split over the threads). No compiled code is needed.
    """
    src_h, src_w = which.shape
    ch, sx = spans.shape[0], spans.shape[3]
    sy = picture.shape[0] // src_h
    n = colours.size
    blocks = np.empty((ch, n, sx, 3), spans.dtype)
    for c, shift in enumerate((16, 8, 0)):
        blocks[..., c] = spans[:, c, (colours >> shift) & 255, :]
    blocks = blocks.reshape(ch * n, sx * 3)
    index = np.empty((src_h, sy, src_w), np.intp)
    np.add((np.arange(sy, dtype=np.intp) % ch)[None, :, None] * n, which[:, None, :], out=index)
    index = index.reshape(-1)
    if picture.flags.c_contiguous:
        _split(_take_rows, index.size, blocks, index, picture.reshape(-1, sx * 3))
    else:  # letterboxed left and right: gather, then place
        runs = np.empty((index.size, sx * 3), spans.dtype)
        _split(_take_rows, index.size, blocks, index, runs)
        picture[...] = runs.reshape(picture.shape)


def _colour_figures(colours: np.ndarray, which: np.ndarray, settings, fp: FastPlan, render: Render) -> None:
    """The figures of a table-route render where every source pixel covers whole cells,
    from the source's distinct colours and the table (no full-size arrays).

    Each source pixel's footprint holds every mask phase equally often, so
    every sum over the output is a sum over colours of how often each occurs
    times what one pixel of that colour contributes.
    """
    plan, tp = fp.render, fp.table
    g, enc = plan.geometry, plan.encoding
    ch, cw = plan.mask.cell
    sy, sx = g.pic_h // g.src_h, g.pic_w // g.src_w
    n_src = g.src_w * g.src_h
    often = np.bincount(which.ravel(), minlength=colours.size).astype(np.float64)  # (n,)
    channel_codes = np.stack([(colours >> shift) & 255 for shift in (16, 8, 0)])    # (3, n)
    decode = color.decode_table(settings.decode.transfer, 8).astype(np.float64)
    lin = decode[channel_codes]                                                      # (3, n)
    render.source_channels = lin @ often / n_src
    render.source_luminance = float(render.source_channels @ enc.luma)
    # each pixel's light meets whole period cells of the mask
    render.plain_multiply_luminance = float((render.source_channels * tp.cell_mask.mean(axis=(0, 1))) @ enc.luma)
    ltab = enc.luma[:, None] * enc.table(settings.output_depth)[None, :]             # (3, codes)
    counts = np.zeros((3, ltab.shape[1]), np.int64)
    run = sx // cw                                  # cells across one source pixel's columns
    cell_light = np.zeros((colours.size, run))      # each colour's light in each of those cells
    for c in range(3):
        span = tp.spans[:, c]                                                        # (ch, 256, sx)
        per_code = np.bincount(channel_codes[c], weights=often, minlength=256) * (sy // ch)
        np.add.at(counts[c], span.ravel(),
                  np.broadcast_to(per_code.astype(np.int64)[None, :, None], span.shape).ravel())
        per_cell = ltab[c][span].reshape(ch, 256, run, cw).sum(axis=(0, 3))          # (256, run)
        cell_light += per_cell[channel_codes[c]]
    render.code_counts = counts
    cells = np.repeat(np.repeat(which, sy // ch, axis=0), run, axis=1)
    render.output_tile_sums = cell_light[cells, np.arange(cells.shape[1]) % run]
    render.input_tile_sums = (lin.T @ enc.luma * (ch * cw))[cells]


def _counts(index: np.ndarray, groups: np.ndarray, n_index: int, n_groups: int) -> np.ndarray:
    """counts[g, i]: how many positions of group g fall on index i."""
    flat = np.bincount(groups.astype(np.int64) * n_index + index, minlength=n_groups * n_index)
    return flat.reshape(n_groups, n_index).astype(np.float64)


def _table_figures(codes: np.ndarray, settings, fp: FastPlan, render: Render) -> None:
    """The figures of a table-route render, from the source and the table (no full-size arrays).

    Sums run through einsum without BLAS (``optimize=False``): BLAS threads
    would spin on the cores the other workers of a batch are using.
    """
    plan, tp = fp.render, fp.table
    g, mask, enc = plan.geometry, plan.mask, plan.encoding
    decode = color.decode_table(settings.decode.transfer, 8).astype(np.float64)
    n = g.pic_w * g.pic_h
    ch, cw = mask.cell
    src_counts = np.stack([np.bincount(codes[..., c].ravel(), minlength=256) for c in range(3)])  # (3, 256)
    src_channels = src_counts @ decode / (g.src_w * g.src_h)
    render.source_channels = src_channels
    render.source_luminance = float(src_channels @ enc.luma)
    lin = decode[codes]                                                                    # (H, W, 3)
    # sum over the picture of x m = sum over phases of m times the source light at that phase
    by_row_phase = np.einsum("rp,ric->pic", tp.rows_at, lin, optimize=False)              # (ch, W, 3)
    at_phase = np.einsum("pic,iq->pqc", by_row_phase, tp.cols_at, optimize=False)         # (ch, cw, 3)
    render.plain_multiply_luminance = float(((at_phase * tp.cell_mask).sum(axis=(0, 1)) / n) @ enc.luma)
    y_src = lin @ enc.luma
    tall = np.add.reduceat(y_src[tp.row_src], np.arange(0, g.pic_h, ch), axis=0)  # (tiles_h, W)
    wide = np.add.reduceat(tall[:, tp.col_src], np.arange(0, g.pic_w, cw), axis=1)
    render.input_tile_sums = wide[:g.pic_h // ch, :g.pic_w // cw]


# --------------------------------------------------------------------------
# The fused route


_BAYER = np.ascontiguousarray(color.dither_offsets("ordered", (8, 8, 1))[..., 0])
_DITHER_KIND = {"none": 0, "ordered": 1, "noise": 2}


def _render_fused(kernels, codes: np.ndarray, settings, fp: FastPlan, alpha,
                  bands: tuple[int, int] | None = None) -> Render:
    """The fused route; ``bands`` (first, stop) renders those bands alone (no glow, no
    kept alpha: see :func:`render_rows`), the figures then of those bands only."""
    plan, f = fp.render, fp.fused
    g, enc = plan.geometry, plan.encoding
    src, clipped = source_linear(codes, settings, alpha)
    src = _ours(src, np.float32)
    wide = np.empty((3, g.src_h, g.pic_w), np.float32)
    _split(kernels.resample_columns, g.src_h, src, f.col_idx, f.col_w, wide)
    depth = settings.output_depth
    keep_alpha = alpha is not None and settings.decode.keep_alpha
    out = np.zeros((g.out_h, g.out_w, 4 if keep_alpha else 3), np.uint8 if depth == 8 else np.uint16)
    if keep_alpha:
        awide = np.empty((1, g.src_h, g.pic_w), np.float32)
        _split(kernels.resample_columns, g.src_h, _ours(alpha[..., None], np.float32),
               f.col_idx, f.col_w, awide)
        kernels.alpha_plane(awide, f.row_idx, f.row_w, out, g.pic_y, g.pic_x, float(2**depth - 1))
    th, tw = plan.cell
    n_bands = -(-g.pic_h // f.band_rows)
    n_cr, n_cc = -(-g.pic_h // th), -(-g.pic_w // tw)
    channel_sums = np.zeros((n_bands, 3))
    in_cells = np.zeros((n_cr, n_cc))
    out_cells = np.zeros((n_cr, n_cc))
    stats = np.zeros((n_bands, 3))
    code_table, lut = _srgb_tables()
    if f.ekind == 2:
        lut, scale = _pq_table(float(enc.headroom), float(enc.reference_white)), float(enc.headroom)
    else:
        scale = float(enc.reference_white)
    balance = settings.tone.balance_tiles and all(p.balanced for p in plan.pairs)
    key = np.uint64(0)  # the noise seed, as color.dither_offsets
    glow = settings.glow.on
    # with glow the first pass leaves the picture in linear light; it is spread, then settled
    lin = np.empty((3, g.pic_h, g.pic_w) if glow else (3, 1, 1), np.float32)
    hold, run, gain = settings.holds_cell_light, carry_run(g, plan.cell), np.float32(enc.gain)
    dither = _DITHER_KIND[settings.dither]
    _split_range(kernels.fused, *(bands or (0, n_bands)), wide, f.row_idx, f.row_w, f.clip, f.ay, f.ax, f.sy, f.vx,
           f.mu, f.inv, f.kind, f.coeffs, f.ncoef, f.slope, np.float32(enc.headroom),
           balance, th, tw, f.band_rows, enc.luma.astype(np.float64),
           f.ekind, f.top, code_table, lut, dither, _BAYER, key,
           scale, out, g.pic_y, g.pic_x, f.dtab, hold, run, gain, glow, lin,
           channel_sums, in_cells, out_cells, stats)
    if glow:
        g_share, half = np.float32(settings.glow.share), settings.glow.half_width
        mid, spread = np.empty(lin.shape[1:], np.float32), np.empty(lin.shape[1:], np.float32)
        for c in range(3):  # glow.apply_glow, one plane at a time
            _split(kernels.glow_rows, g.pic_h, lin[c], half, mid)
            _split(kernels.glow_columns, -(-g.pic_w // kernels._GLOW_BLOCK), mid, half, spread)
            lin[c] *= np.float32(1.0) - g_share
            lin[c] += g_share * spread
        _split(kernels.settle_picture, n_bands, lin, th, tw, f.band_rows, np.float32(enc.headroom),
               f.ekind, f.top, code_table, lut, dither, _BAYER, key, scale, out, g.pic_y, g.pic_x,
               enc.luma.astype(np.float64), f.dtab, hold, run, gain, channel_sums, out_cells)
    n = g.pic_w * g.pic_h
    total = float(stats[:, 1].sum())
    render = Render(
        codes=out, geometry=g, mask=plan.mask, pairs=plan.pairs,
        source_luminance=0.0, plain_multiply_luminance=float(stats[:, 0].sum()) / n,
        source_channels=color.channel_means(src),
        balance_removed=float(stats[:, 2].sum()) / total if total > 0 else 0.0,
        encoding=enc, gamut_clipped=clipped,
        input_tile_sums=in_cells[:g.pic_h // th, :g.pic_w // tw], tile=plan.tile, route="fused",
        output_tile_sums=out_cells[:g.pic_h // th, :g.pic_w // tw],
    )
    render.source_luminance = float(render.source_channels @ enc.luma)
    render.output_channel_sums = channel_sums.sum(axis=0)
    return render


def _encode_check(linear: np.ndarray, output_range: str, depth: int, *, peak: float = 1000.0) -> np.ndarray:
    """Codes of a 1-D run of linear values by the fused route's encoder (for tests)."""
    from ..plan import Settings

    settings = Settings(output_range=output_range, depth=depth, peak=peak)
    enc = settings.encoding
    ekind = 2 if enc.hdr else (0 if depth == 8 else 1)
    code_table, lut = _srgb_tables()
    span = float(enc.reference_white)
    if ekind == 2:
        lut, span = _pq_table(float(enc.headroom), float(enc.reference_white)), float(enc.headroom)
    kernels = kernels_module()
    ready(("fused", 0))
    v = np.ascontiguousarray(np.clip(linear, 0, enc.headroom), np.float32)
    codes = np.empty(v.shape[0], np.int32)
    kernels._encode_row(v, codes, ekind, float(2**settings.output_depth - 1), code_table, lut,
                        np.zeros_like(v), span)
    return codes


# --------------------------------------------------------------------------
# Measuring codes, for the audit


def tile_luminance_sums(picture: np.ndarray, encoding: color.Encoding, window: tuple[int, int]) -> np.ndarray:
    """Relative luminance of encoded codes summed over whole windows from the top-left corner.

    The same numbers as :func:`crtfilter.scale.whole_cell_sums` of the decoded
    luminance, from three tables of luma-weighted light per code.

    Returns
    -------
    numpy.ndarray
        float64, shape (H // rows, W // columns).
    """
    from ..scale import whole_cell_sums

    bits = 16 if picture.dtype == np.uint16 else 8
    ltab = np.ascontiguousarray(encoding.luma[:, None] * encoding.table(bits)[None, :])
    h, w = picture.shape[:2]
    rows, cols = min(window[0], h), min(window[1], w)
    kernels = kernels_module()
    if kernels is None or not ready(("tile_sums", 0 if bits == 8 else 1)):
        y = ltab[0][picture[..., 0]] + ltab[1][picture[..., 1]] + ltab[2][picture[..., 2]]
        return whole_cell_sums(y, (rows, cols))
    if not picture.flags.writeable:
        picture = picture.copy()
    return kernels.tile_sums(picture[..., :3], ltab, rows, cols, h // rows, w // cols)


def brightest_code_counts(picture: np.ndarray) -> np.ndarray:
    """How often each 16-bit code is the brightest of a pixel's three channels: int64 (65536,)."""
    kernels = kernels_module()
    if not picture.flags.writeable:
        picture = picture.copy()
    if kernels is None or not ready(("brightest_codes", 0)):
        return np.bincount(picture[..., :3].max(axis=-1).ravel(), minlength=65536)
    return kernels.brightest_codes(picture[..., :3])


def code_histograms(picture: np.ndarray) -> np.ndarray:
    """How often each code value occurs, per channel: int64, shape (3, 2**bits)."""
    n_codes = 65536 if picture.dtype == np.uint16 else 256
    kernels = kernels_module()
    if kernels is None or not ready(("histograms", 0 if n_codes == 256 else 1)):
        return np.stack([np.bincount(picture[..., c].ravel(), minlength=n_codes) for c in range(3)])
    if not picture.flags.writeable:
        picture = picture.copy()
    return kernels.histograms(picture[..., :3], n_codes)


def block_light_sums(picture: np.ndarray, table: np.ndarray, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """Linear light per channel of 8-bit codes summed over the blocks that start at ``rows``
    and ``cols`` (:func:`crtfilter.flashes.grid_starts`): float64 (R, C, 3); ``table`` maps
    each of the 256 codes to its light."""
    from ..scale import Tiles

    table = np.ascontiguousarray(table, np.float64)
    kernels = kernels_module()
    if kernels is None or not ready(("block_sums", 0)):
        return Tiles(rows, cols, picture.shape[:2]).sums(table[picture[..., :3]])
    if not picture.flags.writeable:
        picture = picture.copy()
    return kernels.block_sums(picture[..., :3], table, np.ascontiguousarray(rows, np.int64),
                              np.ascontiguousarray(cols, np.int64))
