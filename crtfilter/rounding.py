"""Rounding to codes that holds each mask cell's light: the reference, in NumPy.

Rounding every sample to its nearest code is unbiased on average but not per
cell: near black one code is a large share of a cell's light, and on a uniform
dark frame every cell errs the same way, so the whole picture does. Here each
cell (one mask period cell, from the picture's top-left corner; cells cut by the
picture's edge count as cells) and channel is settled on its own:

1. round every sample to its nearest code;
2. E = the cell's sum of linear light wanted minus the sum its codes decode to,
   plus what the cell before it left over (step 4);
3. in order of rounding residual in the direction E asks for (the sample that
   rounding moved furthest against that direction first; ties by place, row by
   row), move a sample one code that way while that step is less than 2|E| (so
   it brings the sum nearer), and stop at the first that would not;
4. carry what is left of E into the next cell to the right, within a *run* of
   cells: each source pixel's columns where every source pixel covers whole
   cells (:func:`carry_run`), else the whole cell row. A uniform picture, whose
   cells would all err alike, then errs by at most half a code step per run.

Deterministic, no noise; no sample moves by more than one code from its
nearest. The fast path (:mod:`crtfilter.fast`) does the same, cell by cell in
the same order, with the same float64 sums.
"""

from __future__ import annotations

import numpy as np

#: How samples are rounded to codes where no dither is asked for: ``cell-light``
#: holds each mask cell's light (this module), ``nearest`` rounds each on its own.
ROUNDINGS = ("cell-light", "nearest")


def carry_run(geometry, cell: tuple[int, int]) -> int:
    """Cells per run along a cell row over which a cell's leftover light is carried on.

    The cells of one source pixel's columns where the scale is whole and every
    source pixel covers whole cells (then a run depends on that pixel alone,
    which lets the table route hold it per colour); else 0: the whole cell row.

    Examples
    --------
    >>> from crtfilter.scale import Geometry
    >>> g = Geometry(src_w=320, src_h=240, out_w=2880, out_h=2160, pic_w=2880, pic_h=2160, pic_x=0, pic_y=0)
    >>> carry_run(g, (9, 3)), carry_run(g, (9, 6))
    (3, 0)
    """
    g = geometry
    th, tw = cell
    if g.pic_w % g.src_w or g.pic_h % g.src_h:
        return 0
    sy, sx = g.pic_h // g.src_h, g.pic_w // g.src_w
    if sy % th or sx % tw or g.pic_w % tw or g.pic_h % th:
        return 0
    return sx // tw


def _cells(a: np.ndarray, cell: tuple[int, int]) -> np.ndarray:
    """(H, W, C) with H, W whole cells -> (cell rows, cell columns, C, samples of a cell, row by row)."""
    h, w, c = a.shape
    th, tw = cell
    return a.reshape(h // th, th, w // tw, tw, c).transpose(0, 2, 4, 1, 3).reshape(h // th, w // tw, c, th * tw)


def _picture(a: np.ndarray, cell: tuple[int, int], shape: tuple[int, int, int]) -> np.ndarray:
    """The inverse of :func:`_cells`."""
    h, w, c = shape
    th, tw = cell
    return a.reshape(h // th, w // tw, c, th, tw).transpose(0, 3, 1, 4, 2).reshape(h, w, c)


def hold_cell_light(values: np.ndarray, codes: np.ndarray, decoded: np.ndarray,
                    cell: tuple[int, int], run: int = 0) -> np.ndarray:
    """Move codes by one where that brings each cell's decoded light nearer its wanted light.

    Parameters
    ----------
    values : numpy.ndarray
        float32 (h, w, C): the linear light wanted, as encoded into ``codes``;
        row 0 and column 0 start a cell.
    codes : numpy.ndarray
        uint8 or uint16 (h, w, C): each value's nearest code.
    decoded : numpy.ndarray
        float64 (number of codes,): the linear light of each code (the
        encoding's :meth:`~crtfilter.color.Encoding.table`).
    cell : (rows, columns)
    run : int
        Cells per run of carried light along a cell row (:func:`carry_run`;
        0: the whole row).

    Returns
    -------
    numpy.ndarray
        The codes, same shape and type.

    Examples
    --------
    Four samples wanting code 1.25's light: rounding alone gives 1, 1, 1, 1;
    holding the cell's light moves one of them to 2.

    >>> decoded = np.arange(256) / 255.0
    >>> wanted = np.full((2, 2, 1), 1.25 / 255, np.float32)
    >>> hold_cell_light(wanted, np.ones((2, 2, 1), np.uint8), decoded, (2, 2))[..., 0].tolist()
    [[2, 1], [1, 1]]
    """
    h, w, n_ch = values.shape
    th, tw = cell
    big_h, big_w = -(-h // th) * th, -(-w // tw) * tw
    v = np.zeros((big_h, big_w, n_ch), np.float32)
    v[:h, :w] = values
    n = np.zeros((big_h, big_w, n_ch), np.int32)
    n[:h, :w] = codes
    inside = np.zeros((big_h, big_w, n_ch), bool)
    inside[:h, :w] = True
    v, n, inside = _cells(v, cell), _cells(n, cell), _cells(inside, cell)
    n_cr, n_cc = n.shape[:2]
    run = run if run and n_cc % run == 0 else n_cc
    # (runs, place in the run, C, samples): the runs side by side, their cells in turn
    v, n, inside = (a.reshape(n_cr * (n_cc // run), run, *a.shape[2:]) for a in (v, n, inside))
    carry = np.zeros((n.shape[0], n_ch))
    for j in range(run):
        n[:, j], carry = _settle_cells(v[:, j].astype(np.float64), n[:, j], inside[:, j], decoded, carry)
    out = _picture(n.reshape(n_cr, n_cc, n_ch, th * tw), cell, (big_h, big_w, n_ch))
    return out[:h, :w].astype(codes.dtype)


def _settle_cells(v, n, inside, decoded, carry):
    """One cell of every run: (runs, C, samples) -> its codes and the light left over, signed."""
    top = decoded.shape[0] - 1
    have = decoded[n]
    error = carry.copy()
    for k in range(n.shape[-1]):  # one sample after another, as the fast path adds them
        error += np.where(inside[..., k], v[..., k] - have[..., k], 0.0)
    way = np.where(error > 0, 1, -1)[..., None]
    nxt = np.clip(n + way, 0, top)
    step = np.abs(decoded[nxt] - have)
    step[~inside | (nxt == n)] = np.inf  # outside the picture, or no code further that way
    key = np.where(inside, -way * (v - have), np.inf)  # most rounded against the way first
    order = np.argsort(key, axis=-1, kind="stable")
    size = np.abs(error)
    going = np.ones(size.shape, bool)
    moved = np.zeros(n.shape, np.int32)
    for k in range(n.shape[-1]):
        at = order[..., k:k + 1]
        s = np.take_along_axis(step, at, axis=-1)[..., 0]
        going &= s < 2.0 * size
        size = np.where(going, size - s, size)
        np.put_along_axis(moved, at, going[..., None].astype(np.int32), axis=-1)
    return n + way * moved, way[..., 0] * size
