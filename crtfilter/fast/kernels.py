"""The compiled loops of the fast path (numba), one module-level function each.

Every function here takes all it needs as arguments - arrays and scalars - and
is compiled for the signatures of :data:`SIGNATURES` when a route first needs
it (:func:`crtfilter.fast.ready`), or loaded from numba's disk cache, which
keys them by this file and the machine. Nothing here is a closure: closures
get a new cache key in every process and would compile on every run.

Import this module only through :func:`crtfilter.fast.kernels_module`, which
chooses numba's cache folder first.
"""

from __future__ import annotations

import numpy as np
from numba import njit

# --------------------------------------------------------------------------
# Scalar helpers, inlined into the loops that call them.


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


@njit(cache=True, nogil=True)
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


@njit(cache=True, nogil=True)
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
# The fused route: one band of cell rows at a time, every band independent,
# and within a band one cell row at a time, so that the working set of a stage
# stays in the core's cache. Inner loops run along a row with nothing but
# arithmetic and look-ups, so that they vectorise; per-cell sums are gathered
# per column over a cell row first (``col_*`` arrays) and only then per cell.


@njit(cache=True, nogil=True)
def _to_cells(col, tw, out_row, scale):
    """out_row[j] += scale * sum of col over the columns of cell j."""
    w = col.shape[0]
    for j in range(out_row.shape[0]):
        acc = 0.0
        for x in range(j * tw, min(w, (j + 1) * tw)):
            acc += col[x]
        out_row[j] += scale * acc


@njit(cache=True, nogil=True)
def _spread_cells(cells_row, cell_of, out):
    """out[x] = cells_row[cell_of[x]]: one value per cell, over the columns."""
    for x in range(out.shape[0]):
        out[x] = cells_row[cell_of[x]]


@njit(cache=True, nogil=True)
def _upscale_rows(wide, ry_idx, ry_w, y0, rows, xs):
    """xs[c, r] = the vertical pass of picture row y0 + r, for r < rows."""
    for c in range(3):
        for r in range(rows):
            _vertical(wide, c, y0 + r, ry_idx, ry_w, xs[c, r])


@njit(cache=True, nogil=True)
def _clip_factors(xs, rows, th, tw, cell_of, alpha_x, beta_x, col_u, col_h, col_o):
    """Level 1 of the cell clip for one cell row (``rows`` rows of ``xs``).

    Fills ``alpha_x``, ``beta_x`` (3, w) so that v = alpha + beta clip(u) holds
    each cell's unclipped sum (limited to [0, area]) exactly; returns the
    cell row's unclipped sum per channel and whether anything was outside [0, 1].
    """
    w = xs.shape[2]
    n_cc = (w + tw - 1) // tw
    one = np.float32(1.0)
    zero = np.float32(0.0)
    sums = np.zeros(3)
    outside = 0
    u = np.zeros(n_cc)
    hs = np.zeros(n_cc)
    alpha = np.zeros(n_cc, np.float32)
    beta = np.ones(n_cc, np.float32)
    for c in range(3):
        col_u[:] = 0.0
        col_h[:] = 0.0
        col_o[:] = 0.0
        for r in range(rows):
            row = xs[c, r]
            for x in range(w):
                v = row[x]
                h = min(max(v, zero), one)
                col_u[x] += v
                col_h[x] += h
                col_o[x] += abs(v - h)  # a sum of sizes: zero exactly when nothing was clipped
        for x in range(w):
            outside += col_o[x] > zero
        u[:] = 0.0
        hs[:] = 0.0
        _to_cells(col_u, tw, u, 1.0)
        _to_cells(col_h, tw, hs, 1.0)
        alpha[:] = 0.0
        beta[:] = 1.0
        for j in range(n_cc):
            sums[c] += u[j]
            area = rows * (min(w, (j + 1) * tw) - j * tw)
            t = min(max(u[j], 0.0), area)
            have = hs[j]
            if have > t:
                beta[j] = np.float32(t / have)
            elif have < t:
                lift = np.float32((area - t) / (area - have))
                beta[j] = lift
                alpha[j] = one - lift
        _spread_cells(alpha, cell_of, alpha_x[c])
        _spread_cells(beta, cell_of, beta_x[c])
    return sums, outside > 0


@njit(cache=True, nogil=True)
def _clip_rows(xs, rows, alpha_x, beta_x, band_factor):
    """Apply both levels of the cell clip to ``rows`` rows of ``xs`` in place; returns their sums."""
    w = xs.shape[2]
    one = np.float32(1.0)
    zero = np.float32(0.0)
    sums = np.zeros(3)
    col = np.zeros(w, np.float32)
    for c in range(3):
        a = alpha_x[c]
        b = beta_x[c]
        f = band_factor[c]
        col[:] = 0.0
        for r in range(rows):
            row = xs[c, r]
            for x in range(w):
                v = min(max(row[x], zero), one)
                v = min(max(a[x] + b[x] * v, zero), one)
                v = min(v * f, one)
                row[x] = v
                col[x] += v
        sums[c] = col.astype(np.float64).sum()
    return sums


@njit(cache=True, nogil=True)
def _band_factor_rows(xs, rows, band_factor):
    """Level 2 of the cell clip on rows that have had level 1 (:func:`_clip_rows`): v = min(v f, 1)."""
    w = xs.shape[2]
    one = np.float32(1.0)
    for c in range(3):
        f = band_factor[c]
        for r in range(rows):
            row = xs[c, r]
            for x in range(w):
                row[x] = min(row[x] * f, one)


@njit(cache=True, nogil=True)
def _deviate_rows(xs, ds, rows, y0, ay, ax, sy, vx, mu, inv, kind, coeffs, ncoef, slope, head, tw,
                  luma, pos, neg, lum_in, m, lv, col_p, col_n, col_l, col_m):
    """The mask, the weights k = (m - mu) inv and the deviations d = k (L(x) - x) of one cell row.

    Writes ``ds`` and adds per cell the sums of the positive and (negated)
    negative deviations (``pos``, ``neg``: (3, cells)) and the input luminance
    (``lum_in``); returns the cell row's plain-multiply luminance and total |d|.
    """
    w = xs.shape[2]
    one = np.float32(1.0)
    zero = np.float32(0.0)
    inv_h = one / head
    multiply = 0.0
    total = 0.0
    for c in range(3):
        muc = mu[c]
        invc = inv[c]
        kc = kind[c]
        nc = ncoef[c]
        sc = slope[c]
        closed = one - muc
        col_p[:] = 0.0
        col_n[:] = 0.0
        col_l[:] = 0.0
        col_m[:] = 0.0
        for r in range(rows):
            y = y0 + r
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
            # the lift curve L(x), as crtfilter.tone.TonePair.lift
            if kc == 0:      # polynomial in u = 1 - x / h, by Horner
                c0 = coeffs[c, 0]
                for x in range(w):
                    lv[x] = c0
                for t in range(1, nc):
                    ct = coeffs[c, t]
                    for x in range(w):
                        lv[x] = lv[x] * (one - row[x] * inv_h) + ct
                for x in range(w):
                    lv[x] = lv[x] * head
            elif kc == 1:    # real exponent
                for x in range(w):
                    lv[x] = head * (one - (one - row[x] * inv_h) ** sc)
            elif kc == 2:    # piecewise
                for x in range(w):
                    lv[x] = min(row[x] / muc, head)
            elif kc == 3:    # straight, within the headroom
                for x in range(w):
                    lv[x] = sc * row[x]
            if kc == 4:      # the plain multiply: y = m x
                for x in range(w):
                    drow[x] = closed * ((m[x] - muc) * invc - one) * row[x]
            else:
                for x in range(w):
                    drow[x] = (m[x] - muc) * invc * (lv[x] - row[x])
            for x in range(w):
                dv = drow[x]
                col_p[x] += max(dv, zero)
                col_n[x] -= min(dv, zero)
                col_l[x] += row[x]
                col_m[x] += row[x] * m[x]
        _to_cells(col_p, tw, pos[c], 1.0)
        _to_cells(col_n, tw, neg[c], 1.0)
        _to_cells(col_l, tw, lum_in, luma[c])
        acc_m = 0.0
        acc_t = 0.0
        for x in range(w):
            acc_m += col_m[x]
            acc_t += col_p[x] + col_n[x]
        multiply += luma[c] * acc_m
        total += acc_t
    return multiply, total


@njit(cache=True, nogil=True)
def _balance_factors(pos, neg, balance, cell_of, fp_x, fn_x):
    """Per cell, the factor for each side of the deviations that makes the two cancel,
    spread over the columns (``fp_x``, ``fn_x``: (3, w)); returns |d| removed."""
    n_cc = pos.shape[1]
    removed = 0.0
    fpos = np.ones(n_cc, np.float32)
    fneg = np.ones(n_cc, np.float32)
    for c in range(3):
        fpos[:] = 1.0
        fneg[:] = 1.0
        if balance:
            for j in range(n_cc):
                p = pos[c, j]
                n = neg[c, j]
                if p > n:
                    f = n / p
                    fpos[j] = np.float32(f)
                    removed += (1.0 - f) * p
                elif n > p:
                    f = p / n
                    fneg[j] = np.float32(f)
                    removed += (1.0 - f) * n
        _spread_cells(fpos, cell_of, fp_x[c])
        _spread_cells(fneg, cell_of, fn_x[c])
    return removed


@njit(cache=True, nogil=True)
def _encode_row(v, codes, ekind, top, code_table, lut, off, lut_span):
    """codes[x] = the code of linear value v[x] (already inside the output's range).

    ``ekind`` 0: 8-bit sRGB by ``code_table``, the code of each of 65536 evenly
    spaced linear levels (one code off at most, for a value within 2^-17 of
    the level at which one code gives way to the next); 1: sRGB by a table of the encoded value at
    evenly spaced square roots of linear light, interpolated, plus the dither
    offset ``off`` (16-bit, or dithered 8-bit); 2: PQ (SMPTE ST 2084) by a table
    of the signal at evenly spaced eighth roots of v / ``lut_span`` (the
    headroom), interpolated; levels below 1e-7 of white are black.
    """
    n = v.shape[0]
    if ekind == 0:
        bins = code_table.shape[0] - 1
        for x in range(n):
            codes[x] = code_table[int(v[x] * bins + np.float32(0.5))]
    elif ekind == 1:
        segments = lut.shape[0] - 1
        for x in range(n):
            pos = np.sqrt(v[x]) * segments
            i = min(int(pos), segments - 1)
            e = lut[i] + (pos - i) * (lut[i + 1] - lut[i])
            q = min(max(e * top + 0.5 + off[x], 0.0), top)
            codes[x] = int(q)
    else:
        # lut: the PQ signal at (i / segments)^8 of the headroom; v^(1/8) by three square roots
        segments = lut.shape[0] - 1
        scale = 1.0 / lut_span
        for x in range(n):
            pos = np.sqrt(np.sqrt(np.sqrt(v[x] * scale))) * segments
            i = min(int(pos), segments - 1)
            e = lut[i] + (pos - i) * (lut[i + 1] - lut[i])
            codes[x] = int(e * top + 0.5) if v[x] >= 1e-7 else 0


@njit(cache=True, nogil=True)
def _linear_rows(xs, ds, rows, y0, fp_x, fn_x, head, lin):
    """lin[c, y0 + r] = y = x + d (each side scaled by its cell's factor), clipped to [0, head]."""
    w = xs.shape[2]
    zero = np.float32(0.0)
    for c in range(3):
        fp = fp_x[c]
        fn = fn_x[c]
        for r in range(rows):
            row = xs[c, r]
            drow = ds[c, r]
            o = lin[c, y0 + r]
            for x in range(w):
                dv = drow[x]
                f = fp[x] if dv > zero else fn[x]
                o[x] = min(max(row[x] + dv * f, zero), head)


_SETTLE_SIG = ("void(float32[:, :, ::1], int64, int64, int64, float32, int64, float64, uint8[::1], float64[::1], "
               "int64, float32[:, ::1], uint64, float64, {out}[:, :, ::1], int64, int64, float64[::1], "
               "float64[::1], boolean, int64, float32, float64[:, ::1], float64[:, ::1], int64, int64)")
_SETTLE_SIGS = [_SETTLE_SIG.format(out=t) for t in ("uint8", "uint16")]


@njit(cache=True, nogil=True)
def settle_picture(lin, th, tw, band_rows, head, ekind, top, code_table, lut, dither, bayer, noise_key,
                   lut_span, out, top_off, left_off, luma, dtab, hold, run, gain, channel_sums, out_cells,
                   first_band, stop_band):
    """Encode, hold and measure a picture left in linear light (3, H, W) by :func:`fused`,
    cell row by cell row, as :func:`_settle_rows` does after the tone pair."""
    h = lin.shape[1]
    w = lin.shape[2]
    rows_most = min(h, th)
    zeros = np.zeros((3, rows_most, w), np.float32)
    ones = np.ones((3, w), np.float32)
    vb = np.empty((rows_most, w), np.float32)
    off = np.zeros(w, np.float32)
    cb = np.empty((rows_most, w), np.uint16)
    col = np.empty(w)
    light = np.empty(w)
    keys = np.empty(rows_most * tw)
    steps = np.empty(rows_most * tw)
    where = np.empty(rows_most * tw, np.int64)
    xs = np.empty((3, rows_most, w), np.float32)
    for bi in range(first_band, stop_band):
        y0 = bi * band_rows
        bh = min(h, y0 + band_rows) - y0
        n_cr = (bh + th - 1) // th
        for i in range(n_cr):
            yi = y0 + i * th
            rows = min(bh, (i + 1) * th) - i * th
            for c in range(3):
                for r in range(rows):
                    xs[c, r] = lin[c, yi + r]
            _settle_rows(xs, zeros, rows, yi, ones, ones, head, ekind, top, code_table, lut, dither, bayer,
                         noise_key, lut_span, out, top_off, left_off, luma, dtab, tw, out_cells[yi // th],
                         channel_sums[bi], vb, off, cb, col, light, hold, run, keys, steps, where, gain)


@njit(cache=True)
def _mirror(m, n):
    """The sample a line of n extended by mirroring takes at position m (see crtfilter.glow)."""
    m = m % (2 * n)
    return m if m < n else 2 * n - 1 - m


@njit(cache=True)
def _box3(line, half, c, share):
    """Three boxes of 2 half + 1 samples along ``line`` (float64, in place), the line
    extended by mirroring at its ends: :func:`crtfilter.glow.spread`. ``c`` and ``share``
    are scratch of n + 2 half + 1 and n + 2 half samples."""
    n = line.shape[0]
    width = 2 * half + 1
    for _ in range(3):
        for k in range(n + 2 * half):
            share[k] = line[_mirror(k - half, n)]
        c[0] = 0.0
        for k in range(n + 2 * half):
            c[k + 1] = c[k] + share[k]
        for j in range(n):
            line[j] = (c[j + width] - c[j]) / width


_GLOW_SIG = "void(float32[:, ::1], int64, float32[:, ::1], int64, int64)"


@njit(cache=True, nogil=True)
def glow_rows(plane, half, mid, first, stop):
    """mid[y] = three boxes along row y of plane, for rows first..stop."""
    w = plane.shape[1]
    line = np.empty(w)
    c = np.empty(w + 2 * half + 1)
    share = np.empty(w + 2 * half)
    for y in range(first, stop):
        for x in range(w):
            line[x] = plane[y, x]
        _box3(line, half, c, share)
        for x in range(w):
            mid[y, x] = line[x]


#: Columns a column pass of the glow takes at a time (their rows are read in order).
_GLOW_BLOCK = 32


@njit(cache=True, nogil=True)
def glow_columns(mid, half, out, first, stop):
    """out[:, x] = three boxes down column x of mid, for column blocks first..stop (of
    :data:`_GLOW_BLOCK` columns): the same sums as :func:`_box3`, a block of columns abreast."""
    h, w = mid.shape
    k = _GLOW_BLOCK
    line = np.empty((h, k))
    c = np.empty((h + 2 * half + 1, k))
    share = np.empty((h + 2 * half, k))
    for blk in range(first, stop):
        x0 = blk * k
        x1 = min(w, x0 + k)
        m = x1 - x0
        for y in range(h):
            for j in range(m):
                line[y, j] = mid[y, x0 + j]
        width = 2 * half + 1
        for _ in range(3):
            for q in range(h + 2 * half):
                src = _mirror(q - half, h)
                for j in range(m):
                    share[q, j] = line[src, j]
            for j in range(m):
                c[0, j] = 0.0
            for q in range(h + 2 * half):
                for j in range(m):
                    c[q + 1, j] = c[q, j] + share[q, j]
            for y in range(h):
                for j in range(m):
                    line[y, j] = (c[y + width, j] - c[y, j]) / width
        for y in range(h):
            for j in range(m):
                out[y, x0 + j] = line[y, j]


@njit(cache=True, nogil=True)
def _hold_cells(vb, cb, rows, w, tw, dtab, run, keys, steps, where):
    """:func:`crtfilter.rounding.hold_cell_light` on one cell row of one channel, in place.

    ``vb`` (rows, w) the linear light wanted, ``cb`` (rows, w) the nearest codes;
    cells of ``tw`` columns, left to right, carrying what each leaves over on
    within runs of ``run`` cells (0: the whole row).
    """
    top = dtab.shape[0] - 1
    n_cc = (w + tw - 1) // tw
    if run <= 0 or n_cc % run:
        run = n_cc
    carry = 0.0
    for j in range(n_cc):
        if j % run == 0:
            carry = 0.0
        x0 = j * tw
        x1 = min(w, x0 + tw)
        error = carry
        for r in range(rows):
            for x in range(x0, x1):
                error += np.float64(vb[r, x]) - dtab[cb[r, x]]
        way = 1 if error > 0.0 else -1
        size = abs(error)
        m = 0
        for r in range(rows):
            for x in range(x0, x1):
                code = np.int64(cb[r, x])
                nxt = code + way
                have = dtab[code]
                steps[m] = abs(dtab[nxt] - have) if 0 <= nxt <= top else np.inf
                keys[m] = -way * (np.float64(vb[r, x]) - have)
                where[m] = r * w + x
                m += 1
        while True:  # the best remaining in order of key (the first on ties), while it helps
            best = -1
            for i in range(m):
                if where[i] >= 0 and (best < 0 or keys[i] < keys[best]):
                    best = i
            if best < 0 or not steps[best] < 2.0 * size:
                break
            size -= steps[best]
            at = where[best]
            cb[at // w, at % w] += way
            where[best] = -1
        carry = way * size


@njit(cache=True, nogil=True)
def _settle_rows(xs, ds, rows, y0, fp_x, fn_x, head, ekind, top, code_table, lut, dither, bayer, noise_key,
                 lut_span, out, top_off, left_off, luma, dtab, tw, lum_out, channel_sums, vb, off, cb, col, light,
                 hold, run, keys, steps, where, gain):
    """y = x + d (each side scaled by its cell's factor), clipped, encoded into ``out`` and measured.

    With ``hold``, each cell's codes are settled to hold its light
    (:func:`_hold_cells`) before they are written. Adds the luminance of the
    codes per cell to ``lum_out`` and their decoded light per channel to
    ``channel_sums``.
    """
    w = xs.shape[2]
    zero = np.float32(0.0)
    cap = head * gain  # the top of what is encoded: display white on standard range
    if ekind != 2 and cap > np.float32(1.0):
        cap = np.float32(1.0)
    col[:] = 0.0
    for c in range(3):
        fp = fp_x[c]
        fn = fn_x[c]
        weight = luma[c]  # luma[c] dtab[code]: the code's luminance, as ltab (one look-up, not two)
        light[:] = 0.0
        for r in range(rows):
            y = y0 + r
            row = xs[c, r]
            drow = ds[c, r]
            v = vb[r]
            for x in range(w):
                dv = drow[x]
                f = fp[x] if dv > zero else fn[x]
                v[x] = min(max(row[x] + dv * f, zero) * gain, cap)
            if dither == 1:
                brow = bayer[y % 8]
                for x in range(w):
                    off[x] = brow[x % 8]
            elif dither == 2:
                for x in range(w):
                    off[x] = _noise(y, x, c, noise_key)
            _encode_row(v, cb[r], ekind, top, code_table, lut, off, lut_span)
        if hold:
            _hold_cells(vb, cb, rows, w, tw, dtab, run, keys, steps, where)
        for r in range(rows):
            o = out[top_off + y0 + r]
            codes = cb[r]
            for x in range(w):
                code = codes[x]
                o[left_off + x, c] = code
                d = dtab[code]
                light[x] += d  # a sum per column: no chain of dependent adds
                col[x] += weight * d
        channel_sums[c] += light.sum()
    _to_cells(col, tw, lum_out, 1.0)


_FUSED_SIG = ("void(float32[:, :, ::1], int32[:, ::1], float32[:, ::1], boolean, "          # wide, taps, clip
              "float32[::1], float32[::1], float32[:, :, ::1], float32[:, :, ::1], "        # mask factors
              "float32[::1], float32[::1], int64[::1], float32[:, ::1], int64[::1], float32[::1], float32, "
              "boolean, int64, int64, int64, float64[::1], "                                # balance, cell, band
              "int64, float64, uint8[::1], float64[::1], int64, float32[:, ::1], uint64, float64, "
              "{out}[:, :, ::1], int64, int64, float64[::1], boolean, int64, float32, "     # out, hold, run, gain
              "boolean, float32[:, :, ::1], "                                               # linear, lin
              "float64[:, ::1], float64[:, ::1], float64[:, ::1], float64[:, ::1], int64, int64)")
_FUSED_SIGS = [_FUSED_SIG.format(out=t) for t in ("uint8", "uint16")]


@njit(cache=True, nogil=True)
def fused(wide, ry_idx, ry_w, clip,
          ay, ax, sy, vx,
          mu, inv, kind, coeffs, ncoef, slope, head,
          balance, th, tw, band_rows, luma,
          ekind, top, code_table, lut, dither, bayer, noise_key, lut_span,
          out, top_off, left_off, dtab, hold, run, gain, linear, lin,
          channel_sums, in_cells, out_cells, stats, first_band, stop_band):
    """Upscale, clip, mask, tone pair, balance, encode and measure bands first..stop.

    Per band of ``band_rows`` picture rows (whole cell rows; the bands of
    :func:`crtfilter.scale.clip_keeping_cell_sums`), cell row by cell row:

    1. the vertical pass from ``wide`` (see :func:`resample_columns`);
    2. with ``clip`` (kernels with negative lobes), the cell clip: a first run
       over the band finds each cell's factors and the band's, a second
       upscales again and applies them (:func:`_clip_factors`, :func:`_clip_rows`);
    3. the mask m = ay[y] + ax[x] + sum_q sy[q, y, c] vx[q, c, x] and the tone
       pair's deviations (:func:`_deviate_rows`);
    4. with ``balance``, each cell's larger side shrunk until the two cancel,
       as :func:`crtfilter.pipeline.balance_tiles`; then y = x + d, clipped to
       [0, head], encoded (:func:`_encode_row`; ``dither`` 1 ordered, 2 noise)
       into ``out`` at (top_off, left_off), and measured (:func:`_settle_rows`).

    Measured: the decoded ``channel_sums[band, c]``; per cell the luminance of
    the input (``in_cells``) and of the codes (``out_cells``, luma times ``dtab``); per
    band ``stats``: plain-multiply luminance, total |d|, |d| removed by balancing.
    """
    pic_h = ry_idx.shape[0]
    w = wide.shape[2]
    n_cc = (w + tw - 1) // tw
    rows_most = min(pic_h, th)
    # scratch for one cell row, reused by every cell row of this run
    xs = np.empty((3, rows_most, w), np.float32)
    ds = np.empty((3, rows_most, w), np.float32)
    n_bcr = (band_rows + th - 1) // th
    # with the cell clip, the band's upscaled rows, kept from the first run for the second
    band_xs = np.empty((n_bcr if clip else 1, 3, rows_most, w), np.float32)
    alpha_all = np.zeros((n_bcr, 3, w), np.float32)
    beta_all = np.ones((n_bcr, 3, w), np.float32)
    fp_x = np.empty((3, w), np.float32)
    fn_x = np.empty((3, w), np.float32)
    pos = np.empty((3, n_cc))
    neg = np.empty((3, n_cc))
    m = np.empty(w, np.float32)
    lv = np.empty(w, np.float32)
    vb = np.empty((rows_most, w), np.float32)
    off = np.zeros(w, np.float32)
    cb = np.empty((rows_most, w), np.uint16)
    keys = np.empty(rows_most * tw)
    steps = np.empty(rows_most * tw)
    where = np.empty(rows_most * tw, np.int64)
    col_a = np.empty(w)
    col_b = np.empty(w)
    col_c = np.empty(w)
    col_d = np.empty(w)
    col32 = np.empty((4, w), np.float32)  # per-column sums over the rows of one cell row
    cell_of = np.empty(w, np.int64)
    for x in range(w):
        cell_of[x] = x // tw
    band_factor = np.ones(3, np.float32)
    for bi in range(first_band, stop_band):
        y0 = bi * band_rows
        bh = min(pic_h, y0 + band_rows) - y0
        n_cr = (bh + th - 1) // th
        cr0 = y0 // th
        band_factor[:] = 1.0
        clipping = False
        if clip:
            # first run: each cell row's level-1 factors, and the band's sums
            want = np.zeros(3)
            have = np.zeros(3)
            for i in range(n_cr):
                rows = min(bh, (i + 1) * th) - i * th
                xi = band_xs[i]
                _upscale_rows(wide, ry_idx, ry_w, y0 + i * th, rows, xi)
                sums, outside = _clip_factors(xi, rows, th, tw, cell_of, alpha_all[i], beta_all[i],
                                              col32[0], col32[1], col32[2])
                clipping = clipping or outside
                want += sums
                # level 1 in place (the band factor is still 1); with nothing outside [0, 1]
                # every cell's factors are 0 and 1 and the rows stay as they were
                have += _clip_rows(xi, rows, alpha_all[i], beta_all[i], band_factor)
            if clipping:
                for c in range(3):
                    goal = min(max(want[c], 0.0), float(bh * w))
                    if have[c] > 0.0:
                        band_factor[c] = np.float32(goal / have[c])
        multiply = 0.0
        total = 0.0
        removed = 0.0
        for i in range(n_cr):
            yi = y0 + i * th
            rows = min(bh, (i + 1) * th) - i * th
            if clip:
                xs = band_xs[i]
                if clipping:
                    _band_factor_rows(xs, rows, band_factor)
            else:
                _upscale_rows(wide, ry_idx, ry_w, yi, rows, xs)
            pos[...] = 0.0
            neg[...] = 0.0
            mul, tot = _deviate_rows(xs, ds, rows, yi, ay, ax, sy, vx, mu, inv, kind, coeffs, ncoef, slope,
                                     head, tw, luma, pos, neg, in_cells[cr0 + i], m, lv,
                                     col32[0], col32[1], col32[2], col32[3])
            multiply += mul
            total += tot
            removed += _balance_factors(pos, neg, balance, cell_of, fp_x, fn_x)
            if linear:  # left in linear light, for a stage that sees the whole picture (glow)
                _linear_rows(xs, ds, rows, yi, fp_x, fn_x, head, lin)
                continue
            _settle_rows(xs, ds, rows, yi, fp_x, fn_x, head, ekind, top, code_table, lut, dither, bayer,
                         noise_key, lut_span, out, top_off, left_off, luma, dtab, tw, out_cells[cr0 + i],
                         channel_sums[bi], vb, off, cb, col_a, col_b, hold, run, keys, steps, where, gain)
        stats[bi, 0] = multiply
        stats[bi, 1] = total
        stats[bi, 2] = removed


# --------------------------------------------------------------------------
# The table route: a gather from precomputed codes.


_GATHER_SIGS = [f"void(uint8[:, :, ::1], {t}[:, :, :, ::1], int32[::1], int32[::1], int32[::1], int32[::1], "
                f"{t}[:, :, ::1], int64, int64, int64, int64)" for t in ("uint8", "uint16")]


@njit(cache=True, nogil=True)
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


@njit(cache=True, nogil=True)
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


@njit(cache=True, nogil=True)
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


_BLOCK_SIGS = ["float64[:, :, ::1](uint8[:, :, :], float64[::1], int64[::1], int64[::1])"]


@njit(cache=True, nogil=True)
def block_sums(codes, table, rows, cols):
    """Linear light (code -> ``table``) of each channel summed over blocks that start at
    ``rows`` and ``cols`` and reach the next start (the last, the edge): (R, C, 3)."""
    h, w = codes.shape[0], codes.shape[1]
    out = np.zeros((rows.shape[0], cols.shape[0], 3))
    br = 0
    for y in range(h):
        while br + 1 < rows.shape[0] and y >= rows[br + 1]:
            br += 1
        row = codes[y]
        for bc in range(cols.shape[0]):
            stop = cols[bc + 1] if bc + 1 < cols.shape[0] else w
            r = 0.0
            g = 0.0
            b = 0.0
            for x in range(cols[bc], stop):
                r += table[row[x, 0]]
                g += table[row[x, 1]]
                b += table[row[x, 2]]
            out[br, bc, 0] += r
            out[br, bc, 1] += g
            out[br, bc, 2] += b
    return out


_PEAK_SIGS = ["int64[::1](uint16[:, :, :])"]


@njit(cache=True, nogil=True)
def brightest_codes(codes):
    """How often each code is the brightest of a pixel's three: int64 (65536,)."""
    counts = np.zeros(65536, np.int64)
    for y in range(codes.shape[0]):
        row = codes[y]
        for x in range(row.shape[0]):
            counts[max(row[x, 0], row[x, 1], row[x, 2])] += 1
    return counts


#: The signatures each kernel is compiled for: [8-bit output] or [8-bit, 16-bit].
#: Only these are compiled (:func:`crtfilter.fast.ready`), each once per machine.
SIGNATURES = {
    "resample_columns": [_WIDE_SIG],
    "alpha_plane": _ALPHA_SIGS,
    "fused": _FUSED_SIGS,
    "settle_picture": _SETTLE_SIGS,
    "glow_rows": [_GLOW_SIG],
    "glow_columns": [_GLOW_SIG],
    "gather": _GATHER_SIGS,
    "tile_sums": _TILE_SIGS,
    "histograms": _HIST_SIGS,
    "brightest_codes": _PEAK_SIGS,
    "block_sums": _BLOCK_SIGS,
}
