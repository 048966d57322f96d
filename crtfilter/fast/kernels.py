"""The compiled loops of the fast path (numba), one module-level function each.

Every function here takes all it needs as arguments - arrays and scalars - and
is compiled for the signatures listed beside it when this module is first
imported, or loaded from numba's disk cache, which keys them by this file and
the machine. Nothing here is a closure: closures get a new cache key in every
process and would compile on every run.

Import this module only through :func:`crtfilter.fast.kernels_module`, which
chooses numba's cache folder first and reports a first compile.
"""

from __future__ import annotations

import numpy as np
from numba import njit

# --------------------------------------------------------------------------
# Scalar helpers, inlined into the loops that call them.


@njit(cache=True)
def _lift(x, kind, coeffs, ncoef, slope, mu, h):
    """L(x) of one channel's lift curve, as :meth:`crtfilter.tone.TonePair.lift`."""
    if kind == 2:  # piecewise
        v = x / mu
        return v if v < h else h
    if kind == 3:  # straight, within the headroom
        return slope * x
    u = 1.0 - x / h
    if kind == 1:  # real exponent
        return h * (1.0 - u ** slope)
    acc = coeffs[0]
    for i in range(1, ncoef):
        acc = acc * u + coeffs[i]
    return acc * h


@njit(cache=True)
def _encode(v, ekind, top, thr, start, lut, off, ref_white):
    """One linear value (clipped to the output's range) to its code.

    ``ekind`` 0: 8-bit sRGB, exact, by the thresholds between codes; 1: sRGB
    by a table of the encoded value at evenly spaced square roots of linear
    light, interpolated (16-bit, or 8-bit with a dither offset ``off``);
    2: PQ (SMPTE ST 2084), input white at ``ref_white`` cd/m².
    """
    if ekind == 0:
        if v <= 0.0:
            return 0
        b = int(v * 4096.0)
        if b > 4095:
            b = 4095
        code = start[b]
        while code < 255 and v >= thr[code]:
            code += 1
        return code
    if ekind == 2:
        yv = v * ref_white / 10000.0 if v >= 1e-7 else 0.0
        if yv > 1.0:
            yv = 1.0
        p = yv ** (2610.0 / 16384.0)
        n = ((0.8359375 + 18.8515625 * p) / (1.0 + 18.6875 * p)) ** 78.84375
        return int(n * top + 0.5)
    segments = lut.shape[0] - 1
    pos = np.sqrt(v) * segments
    i = int(pos)
    if i >= segments:
        i = segments - 1
    e = lut[i] + (pos - i) * (lut[i + 1] - lut[i])
    q = e * top + 0.5 + off
    if q < 0.0:
        q = 0.0
    if q > top:
        q = top
    return int(q)


@njit(cache=True)
def _mix64(z):
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


@njit(cache=True)
def _noise(y, x, c, key):
    """The triangular noise of :func:`crtfilter.color.noise_offsets` at one position."""
    base = ((np.uint64(y) * np.uint64(1 << 20) + np.uint64(x)) * np.uint64(4) + np.uint64(c)) * np.uint64(2)
    first = _mix64(base + key) >> np.uint64(40)
    second = _mix64(base + np.uint64(1) + key) >> np.uint64(40)
    return (np.float32(first) - np.float32(second)) * np.float32(2.0**-24)


# --------------------------------------------------------------------------
# Resampling


_WIDE_SIG = "void(float32[:, :, ::1], int32[:, ::1], float32[:, ::1], float32[:, :, ::1], int64, int64)"


@njit([_WIDE_SIG], cache=True, nogil=True)
def resample_columns(src, idx, w, wide, first, stop):
    """wide[c, y, x] = sum_t w[x, t] src[y, idx[x, t], c] for source rows first..stop: the
    horizontal pass, at source rows.

    ``src`` is (H, W, C) linear light; ``wide`` (C, H, out_w), planar so the
    vertical pass reads contiguous rows.
    """
    n_ch = src.shape[2]
    out_w = idx.shape[0]
    taps = idx.shape[1]
    for y in range(first, stop):
        row = src[y]
        for c in range(n_ch):
            o = wide[c, y]
            for x in range(out_w):
                acc = np.float32(0.0)
                for t in range(taps):
                    acc += w[x, t] * row[idx[x, t], c]
                o[x] = acc


@njit(cache=True)
def _vertical(wide, c, y, idx, w, row):
    """row[:] = sum_t w[y, t] wide[c, idx[y, t], :]: one output row of one channel."""
    n = row.shape[0]
    s = wide[c, idx[y, 0]]
    w0 = w[y, 0]
    for x in range(n):
        row[x] = w0 * s[x]
    for t in range(1, idx.shape[1]):
        wt = w[y, t]
        if wt != 0.0:
            s = wide[c, idx[y, t]]
            for x in range(n):
                row[x] += wt * s[x]


_ALPHA_SIGS = [f"void(float32[:, :, ::1], int32[:, ::1], float32[:, ::1], {t}[:, :, ::1], int64, int64, float64)"
               for t in ("uint8", "uint16")]


@njit(_ALPHA_SIGS, cache=True, nogil=True)
def alpha_plane(wide, idx, w, out, top, left, code_top):
    """The kept alpha plane: the vertical pass, plainly clipped, into channel 3 of ``out``."""
    h = idx.shape[0]
    n = wide.shape[2]
    for y in range(h):
        row = np.empty(n, np.float32)
        _vertical(wide, 0, y, idx, w, row)
        o = out[top + y]
        for x in range(n):
            v = row[x]
            if v < 0.0:
                v = 0.0
            if v > 1.0:
                v = 1.0
            o[left + x, 3] = int(v * code_top + 0.5)


# --------------------------------------------------------------------------
# The fused route: one band of cell rows at a time, every band independent.
# Each stage is its own function, compiled once for every output type.


@njit(cache=True, nogil=True)
def _band_clip(xs, th, tw, rounds):
    """Clip a band of the upscale to [0, 1], keeping each cell's light, in place.

    The two levels of :func:`crtfilter.scale.clip_keeping_cell_sums`: cells
    exactly, then the whole band in proportion (``rounds`` times at most).
    """
    n_ch, bh, w = xs.shape
    n_cr = (bh + th - 1) // th
    n_cc = (w + tw - 1) // tw
    # cell sums of the unclipped values (u) and of their plain clip (hs)
    u = np.zeros((n_ch, n_cr, n_cc))
    hs = np.zeros((n_ch, n_cr, n_cc))
    clipped = False
    for c in range(n_ch):
        for r in range(bh):
            row = xs[c, r]
            uc = u[c, r // th]
            hc = hs[c, r // th]
            for j in range(n_cc):
                su = 0.0
                sh = 0.0
                for x in range(j * tw, min(w, (j + 1) * tw)):
                    v = row[x]
                    su += v
                    if v < 0.0:
                        clipped = True
                    elif v > 1.0:
                        sh += 1.0
                        clipped = True
                    else:
                        sh += v
                uc[j] += su
                hc[j] += sh
    if not clipped:
        return
    one = np.float32(1.0)
    zero = np.float32(0.0)
    for c in range(n_ch):
        # level 1, cells: v = alpha + beta clip(u), exact per cell
        alpha = np.zeros((n_cr, n_cc), np.float32)
        beta = np.ones((n_cr, n_cc), np.float32)
        want = 0.0
        for i in range(n_cr):
            rows_i = min(bh, (i + 1) * th) - i * th
            for j in range(n_cc):
                area = rows_i * (min(w, (j + 1) * tw) - j * tw)
                want += u[c, i, j]
                t = min(max(u[c, i, j], 0.0), area)
                have = hs[c, i, j]
                if have > t:
                    beta[i, j] = np.float32(t / have)
                elif have < t:
                    lift = np.float32((area - t) / (area - have))
                    beta[i, j] = lift
                    alpha[i, j] = one - lift
        band_sum = 0.0
        for r in range(bh):
            row = xs[c, r]
            i = r // th
            acc = 0.0
            for x in range(w):
                j = x // tw
                v = min(max(row[x], zero), one)
                if beta[i, j] != one:
                    v = alpha[i, j] + beta[i, j] * v
                v = min(max(v, zero), one)
                row[x] = v
                acc += v
            band_sum += acc
        # level 2, the band, in proportion
        want = min(max(want, 0.0), float(bh * w))
        for _ in range(rounds):
            if band_sum <= 0.0:
                break
            f = np.float32(want / band_sum)
            if f == one:
                break
            band_sum = 0.0
            for r in range(bh):
                row = xs[c, r]
                acc = 0.0
                for x in range(w):
                    v = min(row[x] * f, one)
                    row[x] = v
                    acc += v
                band_sum += acc


@njit(cache=True, nogil=True)
def _band_deviate(xs, ds, y0, ay, ax, sy, vx, mu, inv, kind, coeffs, ncoef, slope, head, th, tw, luma):
    """The mask, the weights k = (m - mu) inv and the deviations d = k (L(x) - x) of a band.

    Writes ``ds``; returns the per-cell sums of the positive and (negated)
    negative deviations, the per-cell input luminance, and the band's plain
    multiply luminance and total |d|.
    """
    n_ch, bh, w = xs.shape
    n_cr = (bh + th - 1) // th
    n_cc = (w + tw - 1) // tw
    pos = np.zeros((n_ch, n_cr, n_cc))
    neg = np.zeros((n_ch, n_cr, n_cc))
    lum_in = np.zeros((n_cr, n_cc))
    m = np.empty(w, np.float32)
    multiply = 0.0
    total = 0.0
    for c in range(n_ch):
        muc = mu[c]
        invc = inv[c]
        kc = kind[c]
        cf = coeffs[c]
        nc = ncoef[c]
        sc = slope[c]
        closed = np.float32(1.0) - muc
        lc = luma[c]
        for r in range(bh):
            y = y0 + r
            i = r // th
            base = ay[y]
            for x in range(w):
                m[x] = base + ax[x]
            for q in range(sy.shape[0]):
                s = sy[q, y, c]
                vq = vx[q, c]
                for x in range(w):
                    m[x] += s * vq[x]
            row = xs[c, r]
            drow = ds[c, r]
            for j in range(n_cc):
                sp = 0.0
                sn = 0.0
                sl = 0.0
                smul = 0.0
                for x in range(j * tw, min(w, (j + 1) * tw)):
                    xv = row[x]
                    k = (m[x] - muc) * invc
                    if kc == 4:
                        dv = closed * (k - np.float32(1.0)) * xv
                    else:
                        dv = k * (_lift(xv, kc, cf, nc, sc, muc, head) - xv)
                    drow[x] = dv
                    if dv > 0.0:
                        sp += dv
                    else:
                        sn -= dv
                    sl += xv
                    smul += xv * m[x]
                pos[c, i, j] += sp
                neg[c, i, j] += sn
                lum_in[i, j] += lc * sl
                multiply += lc * smul
                total += sp + sn
    return pos, neg, lum_in, multiply, total


@njit(cache=True, nogil=True)
def _balance_factors(pos, neg, balance):
    """Per cell, the factor for each side of the deviations that makes the two cancel."""
    fpos = np.ones(pos.shape, np.float32)
    fneg = np.ones(pos.shape, np.float32)
    removed = 0.0
    if balance:
        n_ch, n_cr, n_cc = pos.shape
        for c in range(n_ch):
            for i in range(n_cr):
                for j in range(n_cc):
                    p = pos[c, i, j]
                    n = neg[c, i, j]
                    if p > n:
                        f = n / p
                        fpos[c, i, j] = np.float32(f)
                        removed += (1.0 - f) * p
                    elif n > p:
                        f = p / n
                        fneg[c, i, j] = np.float32(f)
                        removed += (1.0 - f) * n
    return fpos, fneg, removed


@njit(cache=True, nogil=True)
def _band_settle(xs, ds, fpos, fneg, y0, th, tw, head, ekind, top, thr, start, lut, dither, bayer, noise_key,
                 ref_white, out, top_off, left_off, ltab, dtab, count_codes, counts, channel_sums):
    """y = x + d (each side scaled by its cell's factor), clipped, encoded into ``out`` and measured.

    Adds to ``counts`` (per channel and code) or ``channel_sums`` (decoded);
    returns the per-cell luminance of the codes.
    """
    n_ch, bh, w = xs.shape
    n_cr = (bh + th - 1) // th
    n_cc = (w + tw - 1) // tw
    lum_out = np.zeros((n_cr, n_cc))
    for c in range(n_ch):
        cnt = counts[c]
        lt = ltab[c]
        csum = 0.0
        for r in range(bh):
            y = y0 + r
            i = r // th
            row = xs[c, r]
            drow = ds[c, r]
            o = out[top_off + y]
            fp = fpos[c, i]
            fn = fneg[c, i]
            for j in range(n_cc):
                acc = 0.0
                for x in range(j * tw, min(w, (j + 1) * tw)):
                    dv = drow[x]
                    dv = dv * (fp[j] if dv > 0.0 else fn[j])
                    v = min(max(row[x] + dv, np.float32(0.0)), head)
                    off = 0.0
                    if dither == 1:
                        off = bayer[y % 8, x % 8]
                    elif dither == 2:
                        off = _noise(y, x, c, noise_key)
                    code = _encode(v, ekind, top, thr, start, lut, off, ref_white)
                    o[left_off + x, c] = code
                    acc += lt[code]
                    if count_codes:
                        cnt[code] += 1
                    else:
                        csum += dtab[code]
                lum_out[i, j] += acc
        channel_sums[c] += csum
    return lum_out


_FUSED_SIG = ("void(float32[:, :, ::1], int32[:, ::1], float32[:, ::1], boolean, "          # wide, taps, clip
              "float32[::1], float32[::1], float32[:, :, ::1], float32[:, :, ::1], "        # mask factors
              "float32[::1], float32[::1], int64[::1], float32[:, ::1], int64[::1], float32[::1], float32, "
              "boolean, int64, int64, int64, float64[::1], "                                # balance, cell, band
              "int64, float64, float64[::1], int64[::1], float64[::1], int64, float32[:, ::1], uint64, float64, "
              "{out}[:, :, ::1], int64, int64, float64[:, ::1], float64[::1], boolean, "
              "int64[:, :, ::1], float64[:, ::1], float64[:, ::1], float64[:, ::1], float64[:, ::1], "
              "int64, int64, int64)")
_FUSED_SIGS = [_FUSED_SIG.format(out=t) for t in ("uint8", "uint16")]


@njit(_FUSED_SIGS, cache=True, nogil=True)
def fused(wide, ry_idx, ry_w, clip,
          ay, ax, sy, vx,
          mu, inv, kind, coeffs, ncoef, slope, head,
          balance, th, tw, band_rows, luma,
          ekind, top, thr, start, lut, dither, bayer, noise_key, ref_white,
          out, top_off, left_off, ltab, dtab, count_codes,
          counts, channel_sums, in_cells, out_cells, stats, clip_rounds, first_band, stop_band):
    """Upscale, clip, mask, tone pair, balance, encode and measure bands first..stop.

    Per band of ``band_rows`` picture rows (whole cell rows, the bands of
    :func:`crtfilter.scale.clip_keeping_cell_sums`):

    1. the vertical pass from ``wide`` (see :func:`resample_columns`);
    2. with ``clip`` (kernels with negative lobes), :func:`_band_clip`;
    3. the mask m = ay[y] + ax[x] + sum_q sy[q, y, c] vx[q, c, x] and the tone
       pair's deviations, :func:`_band_deviate`;
    4. with ``balance``, each cell's larger side shrunk until the two cancel,
       as :func:`crtfilter.pipeline.balance_tiles`; then y = x + d, clipped to
       [0, head], encoded (see :func:`_encode`; ``dither`` 1 ordered, 2 noise)
       into ``out`` at (top_off, left_off), and measured on the way.

    Measured: ``counts[band, c, code]`` (when ``count_codes``) or the decoded
    ``channel_sums[band, c]``; per cell the luminance of the input
    (``in_cells``) and of the codes (``out_cells``, by ``ltab``); per band
    ``stats``: plain-multiply luminance, total |d|, |d| removed by balancing.
    """
    pic_h = ry_idx.shape[0]
    w = wide.shape[2]
    for bi in range(first_band, stop_band):
        y0 = bi * band_rows
        bh = min(pic_h, y0 + band_rows) - y0
        cr0 = y0 // th
        xs = np.empty((3, bh, w), np.float32)
        ds = np.empty((3, bh, w), np.float32)
        for c in range(3):
            for r in range(bh):
                _vertical(wide, c, y0 + r, ry_idx, ry_w, xs[c, r])
        if clip:
            _band_clip(xs, th, tw, clip_rounds)
        pos, neg, lum_in, multiply, total = _band_deviate(xs, ds, y0, ay, ax, sy, vx, mu, inv, kind, coeffs,
                                                          ncoef, slope, head, th, tw, luma)
        fpos, fneg, removed = _balance_factors(pos, neg, balance)
        lum_out = _band_settle(xs, ds, fpos, fneg, y0, th, tw, head, ekind, top, thr, start, lut, dither,
                               bayer, noise_key, ref_white, out, top_off, left_off, ltab, dtab, count_codes,
                               counts[bi], channel_sums[bi])
        n_cr, n_cc = lum_in.shape
        in_cells[cr0:cr0 + n_cr, :n_cc] = lum_in
        out_cells[cr0:cr0 + n_cr, :n_cc] = lum_out
        stats[bi, 0] = multiply
        stats[bi, 1] = total
        stats[bi, 2] = removed


# --------------------------------------------------------------------------
# The table route: a gather from precomputed codes.


_GATHER_SIGS = [f"void(uint8[:, :, ::1], {t}[:, :, :, ::1], int32[::1], int32[::1], int32[::1], int32[::1], "
                f"{t}[:, :, ::1], int64, int64, int64, int64)" for t in ("uint8", "uint16")]


@njit(_GATHER_SIGS, cache=True, nogil=True)
def gather(src, table, row_src, row_phase, col_src, col_phase, out, top, left, first, stop):
    """out[top + y, left + x, c] = table[row_phase[y], col_phase[x], c, src[row_src[y], col_src[x], c]]
    for picture rows first..stop."""
    w = col_src.shape[0]
    for y in range(first, stop):
        t = table[row_phase[y]]
        o = out[top + y]
        s = src[row_src[y]]
        for x in range(w):
            tc = t[col_phase[x]]
            sc = s[col_src[x]]
            o[left + x, 0] = tc[0, sc[0]]
            o[left + x, 1] = tc[1, sc[1]]
            o[left + x, 2] = tc[2, sc[2]]


# --------------------------------------------------------------------------
# Measuring codes


_TILE_SIGS = [f"float64[:, ::1]({t}[:, :, :], float64[:, ::1], int64, int64, int64, int64)"
              for t in ("uint8", "uint16")]


@njit(_TILE_SIGS, cache=True, nogil=True)
def tile_sums(codes, ltab, th, tw, n_rows, n_cols):
    """Luminance of codes (by the luma-weighted table ``ltab``) summed over whole windows."""
    out = np.zeros((n_rows, n_cols))
    for tr in range(n_rows):
        for y in range(tr * th, (tr + 1) * th):
            row = codes[y]
            for tc in range(n_cols):
                acc = 0.0
                for x in range(tc * tw, (tc + 1) * tw):
                    acc += ltab[0, row[x, 0]] + ltab[1, row[x, 1]] + ltab[2, row[x, 2]]
                out[tr, tc] += acc
    return out


_HIST_SIGS = [f"int64[:, ::1]({t}[:, :, :], int64)" for t in ("uint8", "uint16")]


@njit(_HIST_SIGS, cache=True, nogil=True)
def histograms(codes, n_codes):
    """How often each code occurs in each of the first three channels: (3, n_codes)."""
    counts = np.zeros((3, n_codes), np.int64)
    for y in range(codes.shape[0]):
        row = codes[y]
        for x in range(row.shape[0]):
            counts[0, row[x, 0]] += 1
            counts[1, row[x, 1]] += 1
            counts[2, row[x, 2]] += 1
    return counts


#: Every compiled function, for reporting what was compiled or loaded.
COMPILED = (resample_columns, alpha_plane, fused, gather, tile_sums, histograms)
