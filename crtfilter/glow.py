"""Glow: light spread in the face glass, moving no light.

A share g of every output pixel's light is spread over its neighbourhood by a
wide, normalised kernel K and the rest stays where it is:

    y' = (1 - g) y + g (K * y)

K is three box filters in a row along each axis (close to a Gaussian; common
practice, no source), each of half-width a = radius / 3 output pixels. At the
picture's edges the picture is extended by mirroring it (half-sample symmetric):
for a symmetric kernel that makes the filter its own transpose, so no light
leaves the picture - the mean of y' is the mean of y (to float64 round-off) - a
uniform picture stays uniform, and y' stays within [0, max y]. Applied in
linear light after the mask and the tone pair, before rounding to codes; the
fast path calls the same function.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import SettingsError

#: Picture rows (or columns) spread at a time, to bound the float64 temporaries.
_STRIP = 256


#: The allowed range of each setting of the glow (what the preset loader and the tuning
#: page allow).
LIMITS = {"share": (0.0, 0.5), "radius": (1.0, 400.0)}


@dataclass(frozen=True)
class GlowSettings:
    """How much light the face glass spreads, and how far.

    Parameters
    ----------
    share : float
        0 (no glow, the default) to 0.5: the share of each pixel's light spread.
    radius : float
        1 to 400: how far it reaches, in output pixels.
    """

    share: float = 0.0
    radius: float = 24.0

    def __post_init__(self):
        lo, hi = LIMITS["share"]
        if not (isinstance(self.share, (int, float)) and lo <= self.share <= hi):
            raise SettingsError(f"glow share must be between {lo:g} and {hi:g} (got {self.share!r})")
        lo, hi = LIMITS["radius"]
        if not (isinstance(self.radius, (int, float)) and lo <= self.radius <= hi):
            raise SettingsError(f"glow radius must be between {lo:g} and {hi:g} output pixels (got {self.radius!r})")

    @property
    def on(self) -> bool:
        return self.share > 0.0

    @property
    def half_width(self) -> int:
        """Half-width of each of the three boxes, in output pixels."""
        return max(1, round(self.radius / 3))


def mirror_index(n: int, half: int) -> np.ndarray:
    """Where each of the n + 2 half samples of a line extended by mirroring comes from:
    ..., 1, 0 | 0, 1, ..., n-1 | n-1, n-2, ... (half-sample symmetric, repeated as needed)."""
    m = np.arange(-half, n + half) % (2 * n)
    return np.where(m < n, m, 2 * n - 1 - m)


def _box_along(x: np.ndarray, half: int, axis: int) -> np.ndarray:
    """One box of 2 half + 1 samples along ``axis``, the line extended by mirroring at its
    ends. For a symmetric kernel that extension makes the filter its own transpose, so
    with rows summing to 1 its columns do too: no light leaves the line, and a uniform
    line stays uniform. float64 in, float64 out."""
    n = x.shape[axis]
    ext = np.take(x, mirror_index(n, half), axis=axis)
    c = np.cumsum(ext, axis=axis)
    c = np.concatenate([np.zeros_like(np.take(c, [0], axis=axis)), c], axis=axis)
    width = 2 * half + 1
    hi = np.take(c, np.arange(width, width + n), axis=axis)
    lo = np.take(c, np.arange(0, n), axis=axis)
    return (hi - lo) / width


def spread(y: np.ndarray, half: int) -> np.ndarray:
    """K * y: three boxes of half-width ``half`` along rows, then along columns.

    Parameters
    ----------
    y : numpy.ndarray
        float32 (H, W, C) linear light.

    Returns
    -------
    numpy.ndarray
        float32 (H, W, C), with the same sum per channel (to float64 round-off).

    Examples
    --------
    >>> y = np.zeros((5, 9, 1), np.float32); y[2, 0] = 1.0
    >>> out = spread(y, 1)
    >>> round(float(out.sum()), 6), bool(out[2, 0, 0] < 1.0)
    (1.0, True)
    """
    h, w = y.shape[:2]
    mid = np.empty(y.shape, np.float32)
    for top in range(0, h, _STRIP):
        rows = slice(top, min(h, top + _STRIP))
        band = y[rows].astype(np.float64)
        for _ in range(3):
            band = _box_along(band, half, axis=1)
        mid[rows] = band
    out = np.empty(y.shape, np.float32)
    for left in range(0, w, _STRIP):
        cols = slice(left, min(w, left + _STRIP))
        strip = mid[:, cols].astype(np.float64)
        for _ in range(3):
            strip = _box_along(strip, half, axis=0)
        out[:, cols] = strip
    return out


def apply_glow(y: np.ndarray, settings: GlowSettings) -> np.ndarray:
    """y' = (1 - share) y + share (K * y), in place where it can be; returns y'.

    Examples
    --------
    >>> y = np.random.default_rng(1).uniform(0, 1, (40, 60, 3)).astype(np.float32)
    >>> out = apply_glow(y.copy(), GlowSettings(share=0.2, radius=9))
    >>> bool(abs(out.mean(dtype=np.float64) - y.mean(dtype=np.float64)) < 1e-6)
    True
    """
    if not settings.on:
        return y
    g = np.float32(settings.share)
    spread_light = spread(y, settings.half_width)
    y *= np.float32(1.0) - g
    y += g * spread_light
    return y
