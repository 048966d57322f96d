"""The fast path: the same render as :mod:`crtfilter.pipeline`, computed with numba.

Two routes, chosen per render:

- **Table route** (nearest or sharp kernel at whole-number scales, each source
  pixel covering whole mask cells, no colour conversion, alpha or dither):
  every output value is a function of one source code and one mask phase, so
  a table ``T[row phase, column phase, channel, code]`` is built once per
  settings and size, and the render is a gather from it.
- **Fused route** (everything else): the picture is upscaled as in the
  reference path, then one numba pass per band computes the mask value, the
  curve and the deviation and the per-cell sums, and a second balances the
  cells and encodes, without full-size temporaries.

What depends only on the settings and the source size (geometry, mask, tone
pairs, taps, tables) is cached per (settings, size). The reference path in
:mod:`crtfilter.pipeline` is the specification; tests hold the two within one
code value of each other.

numba compiles on first use and caches the machine code on disk. Where the
package folder is read-only, :func:`prepare_numba_cache` points numba at a
user cache folder (or a temporary one) before numba is imported: numba's own
import fails when no cache location is writable.
"""

from __future__ import annotations

import os
import sys
import tempfile
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

from . import color
from .masks import Mask, build_mask
from .scale import Geometry, plan_geometry
from .tone import TonePair, solve_channels

_NUMBA = None


def _writable(folder: Path) -> bool:
    try:
        folder.mkdir(parents=True, exist_ok=True)
        probe = folder / f".crtfilter-probe-{os.getpid()}"
        probe.write_bytes(b"")
        probe.unlink()
        return True
    except OSError:
        return False


def prepare_numba_cache() -> str | None:
    """Choose where numba caches compiled code, before numba is imported.

    Honours a ``NUMBA_CACHE_DIR`` already set. Otherwise, when the package
    folder (numba's default) cannot be written, uses ``$XDG_CACHE_HOME``
    or ``~/.cache`` + ``crtfilter/numba``, and failing that a folder in the
    system's temporary directory. ``CRTFILTER_READONLY_PACKAGE=1`` in the
    environment treats the package folder as read-only.

    Returns
    -------
    str or None
        The folder set, or None when numba's default is kept.
    """
    if os.environ.get("NUMBA_CACHE_DIR"):
        return os.environ["NUMBA_CACHE_DIR"]
    package = Path(__file__).resolve().parent
    # CRTFILTER_READONLY_PACKAGE=1 makes the package folder count as read-only
    # (root can write anywhere, so tests need another way to get there)
    if not os.environ.get("CRTFILTER_READONLY_PACKAGE") and _writable(package / "__pycache__"):
        return None
    base = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache")
    for folder in (base / "crtfilter" / "numba",
                   Path(tempfile.gettempdir()) / f"crtfilter-numba-{os.getuid()}"):
        if _writable(folder):
            os.environ["NUMBA_CACHE_DIR"] = str(folder)
            return str(folder)
    return None


def numba_module():
    """Import numba (after :func:`prepare_numba_cache`), or return None if it cannot be had."""
    global _NUMBA
    if _NUMBA is None:
        prepare_numba_cache()
        # colour-science stands a placeholder in for a missing SciPy, which numba's
        # import then takes for SciPy and fails on: hide it while numba loads.
        hidden = {k: v for k, v in sys.modules.items()
                  if (k == "scipy" or k.startswith("scipy.")) and not hasattr(v, "__file__")}
        for name in hidden:
            del sys.modules[name]
        try:
            import numba
        except Exception:  # missing, or broken by its environment: the reference path still works
            _NUMBA = False
        else:
            _NUMBA = numba
        finally:
            sys.modules.update(hidden)
    return _NUMBA or None


# --------------------------------------------------------------------------
# Plans: everything that depends on the settings and the source size only.


@dataclass(frozen=True)
class Plan:
    """What a render of one source size with one set of settings needs, precomputed."""

    geometry: Geometry
    mask: Mask
    pairs: tuple[TonePair, ...]
    encoding: color.Encoding
    table: np.ndarray | None  # table route: (ch, cw, 3, 256) codes
    row_src: np.ndarray       # (pic_h,) source row of each output row (table route)
    col_src: np.ndarray       # (pic_w,) source column of each output column
    row_phase: np.ndarray     # (pic_h,) row within the mask cell
    col_phase: np.ndarray     # (pic_w,) column within the mask cell


def table_route_reason(settings, geometry: Geometry, mask: Mask, bits: int, has_alpha: bool) -> str | None:
    """Why the table route cannot serve this render, or None when it can."""
    if settings.kernel not in ("nearest", "sharp"):
        return "filtered kernel"
    if geometry.pic_w % geometry.src_w or geometry.pic_h % geometry.src_h:
        return "fractional scale"
    if bits != 8 or has_alpha:
        return "16-bit or transparent source"
    if settings.dither != "none":
        return "dither"
    d = settings.decode
    if color.source_matrix(d.primaries, d.white, settings.output_range, adaptation=d.white_adaptation) is not None:
        return "colour conversion"
    ch, cw = mask.cell
    sy, sx = geometry.pic_h // geometry.src_h, geometry.pic_w // geometry.src_w
    if geometry.pic_h % ch or geometry.pic_w % cw:
        return "the picture is not a whole number of mask cells"
    if settings.tone.balance_tiles and (sy % ch or sx % cw):
        return "mask cells straddle source pixels"
    return None


@lru_cache(maxsize=16)
def plan_for(settings, src_w: int, src_h: int, bits: int = 8, has_alpha: bool = False) -> Plan:
    """The cached :class:`Plan` for these settings and this source size."""
    geometry = plan_geometry(src_w, src_h, settings.geometry)
    mask = build_mask(geometry, settings.mask)
    encoding = settings.encoding
    pairs = solve_channels(mask.mean, settings.tone, headroom=encoding.headroom)
    g = geometry
    row_src = np.minimum(np.arange(g.pic_h) * g.src_h // g.pic_h, g.src_h - 1).astype(np.int32)
    col_src = np.minimum(np.arange(g.pic_w) * g.src_w // g.pic_w, g.src_w - 1).astype(np.int32)
    ch, cw = mask.cell
    row_phase = (np.arange(g.pic_h) % ch).astype(np.int32)
    col_phase = (np.arange(g.pic_w) % cw).astype(np.int32)
    table = None
    if table_route_reason(settings, geometry, mask, bits, has_alpha) is None:
        table = _build_table(settings, mask, pairs, encoding)
    return Plan(geometry, mask, pairs, encoding, table, row_src, col_src, row_phase, col_phase)


def _build_table(settings, mask: Mask, pairs, encoding) -> np.ndarray:
    """Output code of every (mask phase, channel, source code), by the reference formulas."""
    from .pipeline import mask_weights

    ch, cw = mask.cell
    m = mask.pixels(rows=slice(0, ch), columns=slice(0, cw))             # (ch, cw, 3)
    k = mask_weights(m, mask.mean)
    x = color.decode_table(settings.decode.transfer, 8)                   # (256,)
    y = np.empty((ch, cw, 3, 256), np.float32)
    for c, pair in enumerate(pairs):
        xs = np.broadcast_to(x, (ch, cw, 256)).astype(np.float32)
        y[:, :, c, :] = xs + pair.deviation(xs, k[:, :, c, None])
    np.clip(y, 0.0, encoding.headroom, out=y)
    return np.ascontiguousarray(encoding.encode(y, settings.output_depth))


# --------------------------------------------------------------------------
# Kernels


@lru_cache(maxsize=1)
def _kernels():
    nb = numba_module()
    if nb is None:
        return None
    njit, prange = nb.njit, nb.prange

    @njit(parallel=True, cache=True, nogil=True)
    def gather(src, table, row_src, row_phase, col_src, col_phase, out, top, left):
        h = row_src.shape[0]
        w = col_src.shape[0]
        for y in prange(h):
            sr = row_src[y]
            t = table[row_phase[y]]
            o = out[top + y]
            s = src[sr]
            for x in range(w):
                tc = t[col_phase[x]]
                sc = s[col_src[x]]
                o[left + x, 0] = tc[0, sc[0]]
                o[left + x, 1] = tc[1, sc[1]]
                o[left + x, 2] = tc[2, sc[2]]

    @njit(cache=True, inline="always")
    def lift(x, kind, coeffs, ncoef, slope, mu, h):
        if kind == 2:  # piecewise
            v = x / mu
            return v if v < h else h
        if kind == 3:  # linear within the headroom
            return slope * x
        u = 1.0 - x / h
        if kind == 1:  # exponent
            return h * (1.0 - u ** slope)
        acc = coeffs[0]
        for i in range(1, ncoef):
            acc = acc * u + coeffs[i]
        return acc * h

    @njit(cache=True, inline="always")
    def encode(v, kind, top, thr, start, off, ref_white):
        if kind == 0:  # 8-bit sRGB by table: the first code whose upper threshold is above v
            if v <= 0.0:
                return 0
            b = int(v * 4096.0)
            if b > 4095:
                b = 4095
            code = start[b]
            while code < 255 and v >= thr[code]:
                code += 1
            return code
        if kind == 2:  # PQ, SMPTE ST 2084; below PQ_BLACK of white is black
            yv = v * ref_white / 10000.0 if v >= 1e-7 else 0.0
            if yv < 0.0:
                yv = 0.0
            if yv > 1.0:
                yv = 1.0
            p = yv ** (2610.0 / 16384.0)
            n = ((0.8359375 + 18.8515625 * p) / (1.0 + 18.6875 * p)) ** 78.84375
            return int(n * top + 0.5)
        # sRGB by formula (16-bit, or dithered)
        if v <= 0.0031308:
            e = v * 12.92
        else:
            e = 1.055 * v ** (1.0 / 2.4) - 0.055
        q = e * top + 0.5 + off
        if q < 0.0:
            q = 0.0
        if q > top:
            q = top
        return int(q)

    @njit(parallel=True, cache=True, nogil=True)
    def deviate(x, a, b, cols, transposed, row0, mu, inv, kind, coeffs, ncoef, slope, head,
                luma, th, tw, d, pos, neg, sums):
        # pass 1: d = deviation per value; per tile and channel the sums of its
        # positive and negative parts; per tile the input luminance and the
        # plain multiply's luminance (sums[..., 0] and [..., 1]) and |d| ([..., 2])
        bh, w = x.shape[0], x.shape[1]
        n_rows = (bh + th - 1) // th
        q = b.shape[0]
        for tr in prange(n_rows):
            for yy in range(tr * th, min(bh, (tr + 1) * th)):
                y = row0 + yy
                for xx in range(w):
                    tc = xx // tw
                    lum_in = 0.0
                    lum_mul = 0.0
                    for c in range(3):
                        if transposed:
                            m = a[xx]
                            for j in range(q):
                                m += b[j, xx] * cols[j, y, c]
                        else:
                            m = a[y]
                            for j in range(q):
                                m += b[j, y] * cols[j, xx, c]
                        xv = x[yy, xx, c]
                        k = (m - mu[c]) * inv[c]
                        if kind[c] == 4:
                            dv = (1.0 - mu[c]) * (k - 1.0) * xv
                        else:
                            dv = k * (lift(xv, kind[c], coeffs[c], ncoef[c], slope[c], mu[c], head) - xv)
                        d[yy, xx, c] = dv
                        if dv > 0:
                            pos[tr, tc, c] += dv
                        else:
                            neg[tr, tc, c] -= dv
                        lum_in += luma[c] * xv
                        lum_mul += luma[c] * xv * m
                        sums[tr, tc, 2] += abs(dv)
                    sums[tr, tc, 0] += lum_in
                    sums[tr, tc, 1] += lum_mul

    @njit(parallel=True, cache=True, nogil=True)
    def settle(x, d, fpos, fneg, th, tw, head, ekind, top, thr, start, dither, ref_white, out, left):
        # pass 2: shrink each tile's larger side, add, clip, encode
        bh, w = x.shape[0], x.shape[1]
        n_rows = (bh + th - 1) // th
        dithered = dither.shape[0] > 0
        for tr in prange(n_rows):
            for yy in range(tr * th, min(bh, (tr + 1) * th)):
                for xx in range(w):
                    tc = xx // tw
                    for c in range(3):
                        dv = d[yy, xx, c]
                        dv = dv * (fpos[tr, tc, c] if dv > 0 else fneg[tr, tc, c])
                        v = x[yy, xx, c] + dv
                        if v < 0.0:
                            v = 0.0
                        if v > head:
                            v = head
                        off = dither[yy, xx, c % dither.shape[2]] if dithered else 0.0
                        out[yy, left + xx, c] = encode(v, ekind, top, thr, start, off, ref_white)

    @njit(parallel=True, cache=True, nogil=True)
    def tile_sums(codes, ltab, th, tw, n_rows, n_cols):
        out = np.zeros((n_rows, n_cols))
        for tr in prange(n_rows):
            for y in range(tr * th, (tr + 1) * th):
                row = codes[y]
                for tc in range(n_cols):
                    acc = 0.0
                    for x in range(tc * tw, (tc + 1) * tw):
                        acc += ltab[0, row[x, 0]] + ltab[1, row[x, 1]] + ltab[2, row[x, 2]]
                    out[tr, tc] += acc
        return out

    @njit(cache=True, nogil=True)
    def histograms(codes, n_codes):
        counts = np.zeros((3, n_codes), np.int64)
        for y in range(codes.shape[0]):
            row = codes[y]
            for x in range(row.shape[0]):
                counts[0, row[x, 0]] += 1
                counts[1, row[x, 1]] += 1
                counts[2, row[x, 2]] += 1
        return counts

    @njit(parallel=True, cache=True, nogil=True)
    def gather_measured(src, table, row_src, row_phase, col_src, col_phase, out, top, left, ltab, n_codes):
        # the gather, and on the way what measuring the output needs: how often
        # each code occurs (per band of rows, summed after) and the luminance
        # of every mask cell (table rows are cell rows, so each band is whole cells)
        h = row_src.shape[0]
        w = col_src.shape[0]
        ch = table.shape[0]
        cw = table.shape[1]
        n_rows = h // ch
        n_cols = w // cw
        counts = np.zeros((n_rows, 3, n_codes), np.int64)
        cells = np.zeros((n_rows, n_cols))
        for tr in prange(n_rows):
            for y in range(tr * ch, (tr + 1) * ch):
                sr = row_src[y]
                t = table[row_phase[y]]
                o = out[top + y]
                s = src[sr]
                cnt = counts[tr]
                for xc in range(n_cols):
                    acc = 0.0
                    for x in range(xc * cw, (xc + 1) * cw):
                        tc = t[col_phase[x]]
                        sc = s[col_src[x]]
                        r = tc[0, sc[0]]
                        g = tc[1, sc[1]]
                        b = tc[2, sc[2]]
                        o[left + x, 0] = r
                        o[left + x, 1] = g
                        o[left + x, 2] = b
                        cnt[0, r] += 1
                        cnt[1, g] += 1
                        cnt[2, b] += 1
                        acc += ltab[0, r] + ltab[1, g] + ltab[2, b]
                    cells[tr, xc] += acc
        return counts.sum(axis=0), cells

    return {"gather": gather, "deviate": deviate, "settle": settle, "tile_sums": tile_sums,
            "histograms": histograms, "gather_measured": gather_measured}


def render_table(codes: np.ndarray, plan: Plan, out: np.ndarray) -> None:
    """Fill ``out`` by the table route (the plan must have a table)."""
    g = plan.geometry
    kernels = _kernels()
    if kernels is None:  # no numba: the same gather in NumPy, a band at a time
        for top in range(0, g.pic_h, 64):
            rows = slice(top, min(top + 64, g.pic_h))
            src = codes[plan.row_src[rows]][:, plan.col_src]              # (h, w, 3)
            t = plan.table[plan.row_phase[rows]][:, plan.col_phase]        # (h, w, 3, 256)
            picked = np.take_along_axis(t, src[..., None].astype(np.intp), axis=3)[..., 0]
            out[g.pic_y + top:g.pic_y + rows.stop, g.pic_x:g.pic_x + g.pic_w, :3] = picked
        return
    kernels["gather"](np.ascontiguousarray(codes), plan.table, plan.row_src, plan.row_phase,
                      plan.col_src, plan.col_phase, out, g.pic_y, g.pic_x)


def _counts(index: np.ndarray, groups: np.ndarray, n_index: int, n_groups: int) -> np.ndarray:
    """counts[g, i]: how many positions of group g fall on index i."""
    flat = np.bincount(groups.astype(np.int64) * n_index + index, minlength=n_groups * n_index)
    return flat.reshape(n_groups, n_index).astype(np.float64)


def render_fast(codes: np.ndarray, settings, *, alpha: np.ndarray | None = None, figures: bool = True):
    """Render by a fast route, or return None when none applies (see the module notes).

    Returns
    -------
    crtfilter.pipeline.Render or None
    """
    from .pipeline import Render

    bits = 16 if codes.dtype == np.uint16 else 8
    plan = plan_for(settings, codes.shape[1], codes.shape[0], bits, alpha is not None)
    if plan.table is None:
        return _render_fused(codes, settings, alpha, figures)
    g = plan.geometry
    out = np.zeros((g.out_h, g.out_w, 3), np.uint8 if settings.output_depth == 8 else np.uint16)
    render = Render(codes=out, geometry=g, mask=plan.mask, pairs=plan.pairs, source_luminance=0.0,
                    plain_multiply_luminance=0.0, source_channels=np.zeros(3), encoding=plan.encoding,
                    tile=plan.mask.cell, route="table")
    kernels = _kernels()
    if figures and kernels is not None and out.dtype == np.uint8 and g.out_w == g.pic_w and g.out_h == g.pic_h:
        n_codes = 256
        ltab = np.ascontiguousarray(plan.encoding.luma[:, None] * plan.encoding.table(8)[None, :])
        counts, cells = kernels["gather_measured"](np.ascontiguousarray(codes), plan.table, plan.row_src,
                                                   plan.row_phase, plan.col_src, plan.col_phase, out,
                                                   g.pic_y, g.pic_x, ltab, n_codes)
        render.code_counts, render.output_tile_sums = counts, cells
    else:
        render_table(codes, plan, out)
    if figures:
        _table_figures(codes, settings, plan, render)
    return render


def _table_figures(codes: np.ndarray, settings, plan: Plan, render) -> None:
    """The figures of a table-route render, from the source and the mask cell (no full-size arrays).

    Sums run through einsum without BLAS (``optimize=False``): BLAS threads
    would spin on the cores the other workers of a batch are using.
    """
    g, mask, enc = plan.geometry, plan.mask, plan.encoding
    lin = color.decode_table(settings.decode.transfer, 8)[codes].astype(np.float64)   # (H, W, 3)
    n = g.pic_w * g.pic_h
    ch, cw = mask.cell
    # how many output rows (columns) of each source row (column) sit at each cell phase
    rows_at = _counts(plan.row_phase, plan.row_src, ch, g.src_h)                       # (H, ch)
    cols_at = _counts(plan.col_phase, plan.col_src, cw, g.src_w)                       # (W, cw)
    cell = mask.pixels(rows=slice(0, ch), columns=slice(0, cw)).astype(np.float64)     # (ch, cw, 3)
    src_channels = lin.reshape(-1, 3).mean(axis=0)
    render.source_channels = src_channels
    render.source_luminance = float(src_channels @ enc.luma)
    # sum over the picture of x m = sum over phases of m times the source light at that phase
    by_row_phase = np.einsum("rp,ric->pic", rows_at, lin, optimize=False)              # (ch, W, 3)
    at_phase = np.einsum("pic,iq->pqc", by_row_phase, cols_at, optimize=False)         # (ch, cw, 3)
    multiply = (at_phase * cell).sum(axis=(0, 1)) / n
    render.plain_multiply_luminance = float(multiply @ enc.luma)
    # input luminance summed over each cell: the nearest upscale's rows summed per
    # cell row, then its columns per cell column
    y_src = (lin * enc.luma).sum(axis=-1)
    sy, sx = g.pic_h // g.src_h, g.pic_w // g.src_w
    if sy % ch == 0 and sx % cw == 0:  # every cell inside one source pixel
        wide = np.repeat(np.repeat(y_src, sy // ch, axis=0), sx // cw, axis=1) * (ch * cw)
    else:
        tall = np.add.reduceat(y_src[plan.row_src], np.arange(0, g.pic_h, ch), axis=0)  # (tiles_h, W)
        wide = np.add.reduceat(tall[:, plan.col_src], np.arange(0, g.pic_w, cw), axis=1)
    render.input_tile_sums = wide[:g.pic_h // ch, :g.pic_w // cw]


_CURVE_KIND = {"blend": 0, "integer": 0, "exponent": 1, "piecewise": 2, "multiply": 4}


def _pair_arrays(pairs):
    kind = np.array([3 if p.linear else _CURVE_KIND[p.curve] for p in pairs], np.int64)
    length = max(len(p.horner) for p in pairs) or 1
    coeffs = np.zeros((len(pairs), length))
    ncoef = np.zeros(len(pairs), np.int64)
    for c, p in enumerate(pairs):
        coeffs[c, :len(p.horner)] = p.horner
        ncoef[c] = len(p.horner)
    slope = np.array([p.slope for p in pairs], np.float64)
    return kind, coeffs, ncoef, slope


@lru_cache(maxsize=1)
def _srgb_thresholds() -> tuple[np.ndarray, np.ndarray]:
    """Linear level at which each 8-bit sRGB code gives way to the next, and a 4096-bin index into them."""
    thr = color.TRANSFERS["srgb"]((np.arange(255) + 0.5) / 255.0)
    start = np.searchsorted(thr, np.arange(4096) / 4096.0, side="right").astype(np.int64)
    return thr, start


def _render_fused(codes: np.ndarray, settings, alpha, figures: bool):
    """The fused route (see the module notes), or None without numba."""
    kernels = _kernels()
    if kernels is None:
        return None
    from .pipeline import Render, _cut_tile, _prepare, balance_tile, output_canvas

    prep = _prepare(codes, settings, alpha)
    g, mask, enc = prep.geometry, prep.mask, prep.encoding
    depth = settings.output_depth
    out = output_canvas(prep, depth)
    kind, coeffs, ncoef, slope = _pair_arrays(prep.pairs)
    mu = np.array([p.mu for p in prep.pairs], np.float64)
    inv = np.where(mu < 1 - 1e-6, 1.0 / np.maximum(1e-12, 1.0 - mu), 0.0)
    a = mask.a.astype(np.float64)
    b = mask.b.astype(np.float64)
    cols = mask.cols.astype(np.float64)
    th, tw = balance_tile(mask)
    balance = settings.tone.balance_tiles and all(p.balanced for p in prep.pairs)
    if enc.hdr:
        ekind, top = 2, 65535.0
    elif depth == 8 and settings.dither == "none":
        ekind, top = 0, 255.0
    else:
        ekind, top = 1, float(2**depth - 1)
    thr, start = _srgb_thresholds()
    band = th * max(1, 256 // th)
    n_cols = -(-g.pic_w // tw)
    grid = np.zeros((-(-g.pic_h // th), n_cols, 3))
    removed = 0.0
    no_dither = np.zeros((0, 1, 1), np.float32)
    for top_row in range(0, g.pic_h, band):
        rows = slice(top_row, min(top_row + band, g.pic_h))
        x = np.ascontiguousarray(prep.up[rows])
        bh = x.shape[0]
        n_rows = -(-bh // th)
        d = np.empty_like(x)
        pos = np.zeros((n_rows, n_cols, 3))
        neg = np.zeros((n_rows, n_cols, 3))
        sums = np.zeros((n_rows, n_cols, 3))
        kernels["deviate"](x, a, b, cols, mask.transposed, rows.start, mu, inv, kind, coeffs, ncoef, slope,
                           float(enc.headroom), enc.luma.astype(np.float64), th, tw, d, pos, neg, sums)
        if balance:
            fpos = np.divide(neg, pos, out=np.ones_like(pos), where=pos > neg)
            fneg = np.divide(pos, neg, out=np.ones_like(neg), where=neg > pos)
            removed += float(((1 - fpos) * pos + (1 - fneg) * neg).sum())
        else:
            fpos = fneg = np.ones_like(pos)
        offsets = None if ekind != 1 else color.dither_offsets(settings.dither, x.shape, top=rows.start)
        dither = no_dither if offsets is None else np.ascontiguousarray(offsets, np.float32)
        kernels["settle"](x, d, fpos, fneg, th, tw, float(enc.headroom), ekind, top, thr, start, dither,
                          float(enc.reference_white), out[g.pic_y + rows.start:g.pic_y + rows.stop], g.pic_x)
        grid[rows.start // th:rows.start // th + n_rows] += sums
    total = float(grid[..., 2].sum())
    n = g.pic_w * g.pic_h
    return Render(
        codes=out, geometry=g, mask=mask, pairs=prep.pairs,
        source_luminance=float(prep.source_channels @ enc.luma),
        plain_multiply_luminance=float(grid[..., 1].sum()) / n,
        source_channels=prep.source_channels,
        balance_removed=removed / total if total > 0 else 0.0,
        encoding=enc, gamut_clipped=prep.gamut_clipped,
        input_tile_sums=grid[:g.pic_h // th, :g.pic_w // tw, 0] if figures else None,
        tile=_cut_tile(prep), route="fused",
    )


def tile_luminance_sums(picture: np.ndarray, encoding: color.Encoding, window: tuple[int, int]) -> np.ndarray:
    """Relative luminance of encoded codes summed over whole windows from the top-left corner.

    The same numbers as :func:`crtfilter.scale.whole_cell_sums` of the decoded
    luminance, from three tables of luma-weighted light per code.

    Returns
    -------
    numpy.ndarray
        float64, shape (H // rows, W // columns).
    """
    from .scale import whole_cell_sums

    bits = 16 if picture.dtype == np.uint16 else 8
    ltab = np.ascontiguousarray(encoding.luma[:, None] * encoding.table(bits)[None, :])
    h, w = picture.shape[:2]
    rows, cols = min(window[0], h), min(window[1], w)
    kernels = _kernels()
    if kernels is None:
        y = ltab[0][picture[..., 0]] + ltab[1][picture[..., 1]] + ltab[2][picture[..., 2]]
        return whole_cell_sums(y, (rows, cols))
    return kernels["tile_sums"](np.ascontiguousarray(picture[..., :3]), ltab, rows, cols, h // rows, w // cols)


def code_histograms(picture: np.ndarray) -> np.ndarray:
    """How often each code value occurs, per channel: int64, shape (3, 2**bits)."""
    n_codes = 65536 if picture.dtype == np.uint16 else 256
    kernels = _kernels()
    if kernels is None:
        return np.stack([np.bincount(picture[..., c].ravel(), minlength=n_codes) for c in range(3)])
    return kernels["histograms"](picture[..., :3], n_codes)
