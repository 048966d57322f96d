"""Measurements: how much light a render held, and how visible its mask is.

All figures are relative luminance Y = 0.2126 R + 0.7152 G + 0.0722 B of
linear values (ITU-R BT.709 primaries, D65), accumulated in float64. The
output is measured from the written file's bytes, decoded back to linear
light, over the picture area (borders, if any, are left out and said so).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import color
from .masks import Mask
from .pipeline import mask_weights
from .scale import Geometry
from .tone import TonePair

#: The grey level (linear) at which mask visibility is quoted.
REFERENCE_GREY = 0.18


@dataclass(frozen=True)
class Measured:
    """Mean light of an sRGB-encoded picture.

    Attributes
    ----------
    luminance : float
        Mean relative luminance over the picture area, linear.
    channels : tuple of float
        Mean linear R, G, B over the picture area.
    frame_luminance : float
        Mean relative luminance over the whole frame, borders included.
    """

    luminance: float
    channels: tuple[float, float, float]
    frame_luminance: float


def measure_codes(codes: np.ndarray, geometry: Geometry | None = None) -> Measured:
    """Measure sRGB-encoded code values (uint8 or uint16, shape (H, W, 3+)).

    Returns
    -------
    Measured
    """
    lin = color.decode(np.ascontiguousarray(codes[..., :3]))
    if geometry is None:
        pic = lin
    else:
        g = geometry
        pic = lin[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w]
    channels = color.channel_means(pic)
    luminance = float(channels @ color.LUMA_BT709)
    return Measured(
        luminance=luminance,
        channels=tuple(float(c) for c in channels),
        frame_luminance=luminance if pic is lin else color.mean_luminance(lin),
    )


def measure_png(path: str | Path, geometry: Geometry | None = None) -> Measured:
    """Decode a written PNG from its bytes and measure it (see :func:`measure_codes`)."""
    from .files import read_png_codes

    return measure_codes(read_png_codes(path), geometry)


def michelson(values: np.ndarray, low: float = 1.0, high: float = 99.0) -> float:
    """Return (p_high - p_low) / (p_high + p_low) of the values, 0 for an all-black set.

    Percentiles instead of the extremes keep a stray pixel from deciding it.
    """
    lo, hi = np.percentile(np.asarray(values, dtype=np.float64), [low, high])
    return float((hi - lo) / (hi + lo)) if hi + lo > 0 else 0.0


def grey_contrast(mask: Mask, pairs: tuple[TonePair, ...], level: float = REFERENCE_GREY,
                  *, channel: int | None = 1, depth: int = 8) -> float:
    """Mask visibility on a uniform grey field, as the output file would show it.

    One period cell of the mask is rendered at linear grey ``level``, encoded
    to ``depth`` bits and decoded back, and the Michelson contrast (p1 to p99)
    is taken of one channel (``channel`` 0, 1, 2) or of luminance (None).

    Returns
    -------
    float
        In [0, 1].
    """
    rows, cols = mask.cell
    m = mask.pixels(rows=slice(0, rows), columns=slice(0, cols))
    k = mask_weights(m, mask.mean)
    x = np.full(m.shape, level, np.float32)
    y = np.empty_like(x)
    for c, pair in enumerate(pairs):
        y[..., c] = pair.apply(x[..., c], k[..., c])
    back = color.decode(color.encode_srgb(y, depth))
    values = color.luminance(back) if channel is None else back[..., channel]
    return michelson(values)


def light_figures(source_luminance: float, output: Measured, plain_multiply_luminance: float,
                  source_channels: np.ndarray) -> dict:
    """The report's ``luminance`` and ``channels`` entries.

    Returns
    -------
    dict
        ``{"luminance": {"input", "output", "ratio", "plain_multiply_ratio"},
        "channels": {"input": [r, g, b], "output": [r, g, b]}}``; ratios are
        None where the input is black.
    """
    def ratio(a: float) -> float | None:
        return a / source_luminance if source_luminance > 0 else None

    return {
        "luminance": {
            "input": source_luminance,
            "output": output.luminance,
            "ratio": ratio(output.luminance),
            "plain_multiply_ratio": ratio(plain_multiply_luminance),
        },
        "channels": {
            "input": [float(c) for c in source_channels],
            "output": list(output.channels),
        },
    }


#: The source size at which a preset's mask figures are quoted in listings.
REFERENCE_SOURCE = (320, 240)


def preset_figures(settings, source: tuple[int, int] = REFERENCE_SOURCE) -> dict:
    """A preset's mask and curve figures for a source of the given size.

    Parameters
    ----------
    settings : crtfilter.pipeline.Settings
    source : (width, height)

    Returns
    -------
    dict
        ``output`` [w, h], ``mask_mean`` [r, g, b], ``cell`` [rows, columns],
        ``curves`` (one description per channel), ``slope`` per channel, and
        ``contrast_grey`` (green channel) and ``contrast_grey_luminance`` at
        :data:`REFERENCE_GREY`.
    """
    from .masks import build_mask
    from .scale import plan_geometry
    from .tone import solve_channels

    geometry = plan_geometry(*source, settings.geometry)
    mask = build_mask(geometry, settings.mask)
    pairs = solve_channels(mask.mean, settings.tone)
    return {
        "source": list(source),
        "output": [geometry.out_w, geometry.out_h],
        "mask_mean": [float(m) for m in mask.mean],
        "cell": list(mask.cell),
        "curves": [p.describe() for p in pairs],
        "slope": [p.slope for p in pairs],
        "contrast_grey": grey_contrast(mask, pairs, depth=settings.depth),
        "contrast_grey_luminance": grey_contrast(mask, pairs, channel=None, depth=settings.depth),
    }
