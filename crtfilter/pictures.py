"""Pictures for people: the energy map (and, later, sheets and previews).

Drawn with numpy and Pillow only, with the font that ships with Pillow, so
nothing here needs a display or a plotting library.
"""

from __future__ import annotations

import math

import numpy as np

from .audit import LocalEnergy
from .scale import Geometry

#: Diverging colours: light lost (blue), held (near white), gained (red).
_LOST = np.array([33, 102, 172], np.float32)
_HELD = np.array([247, 247, 247], np.float32)
_GAINED = np.array([178, 24, 43], np.float32)
_BLACK_INPUT = np.array([96, 96, 96], np.float32)
_BACKGROUND = (28, 28, 32)
_TEXT = (235, 235, 235)


def _font(size: int):
    from PIL import ImageFont

    return ImageFont.load_default(size=size)


def nice_bound(value: float, floor: float = 0.01) -> float:
    """Round ``value`` up to 1, 2 or 5 times a power of ten, at least ``floor``."""
    value = max(float(value), floor)
    exp = math.floor(math.log10(value))
    for step in (1, 2, 5, 10):
        if step * 10**exp >= value - 1e-15:
            return step * 10**exp
    return 10 ** (exp + 1)  # pragma: no cover - the loop always returns


def diverging_colours(values: np.ndarray, bound: float) -> np.ndarray:
    """Map signed values in [-bound, bound] to RGB; NaN to grey.

    Returns
    -------
    numpy.ndarray
        uint8, shape values.shape + (3,).
    """
    t = np.clip(np.nan_to_num(values, nan=0.0) / bound, -1.0, 1.0)[..., None].astype(np.float32)
    rgb = np.where(t < 0, _HELD + (-t) * (_LOST - _HELD), _HELD + t * (_GAINED - _HELD))
    rgb = np.where(np.isnan(values)[..., None], _BLACK_INPUT, rgb)
    return (rgb + 0.5).astype(np.uint8)


def energy_map_picture(local: LocalEnergy, geometry: Geometry, *, width: int = 1200) -> np.ndarray:
    """Draw where light was gained or lost, one block per mask cell, with a legend.

    Parameters
    ----------
    local : LocalEnergy
        From :func:`crtfilter.audit.local_energy`.
    geometry : Geometry
        The render's geometry, for the picture's shape.
    width : int
        Width of the map area in pixels (at most the picture's width).

    Returns
    -------
    numpy.ndarray
        uint8, shape (h, w, 3), sRGB.
    """
    from PIL import Image, ImageDraw

    bound = nice_bound(local.p99 if local.p99 > 0 else local.max)
    grid = diverging_colours(local.grid, bound)
    map_w = min(width, geometry.pic_w)
    map_h = max(1, round(map_w * geometry.pic_h / geometry.pic_w))
    body = Image.fromarray(grid).resize((map_w, map_h), Image.Resampling.NEAREST)

    pad, bar_h, text = 16, 18, 18
    sheet = Image.new("RGB", (map_w + 2 * pad, map_h + 5 * pad + bar_h + 3 * text), _BACKGROUND)
    sheet.paste(body, (pad, pad))
    draw = ImageDraw.Draw(sheet)
    font = _font(text - 2)
    top = map_h + 2 * pad
    ramp = np.linspace(-bound, bound, map_w)[None, :].repeat(bar_h, axis=0)
    sheet.paste(Image.fromarray(diverging_colours(ramp, bound)), (pad, top))
    for frac in (0.0, 0.25, 0.5, 0.75, 1.0):
        x = pad + round(frac * (map_w - 1))
        value = (2 * frac - 1) * bound
        draw.line([(x, top + bar_h), (x, top + bar_h + 5)], fill=_TEXT)
        label = f"{100 * value:+.2g} %" if value else "0"
        lw = draw.textlength(label, font=font)
        draw.text((min(max(x - lw / 2, pad), pad + map_w - lw), top + bar_h + 6), label, fill=_TEXT, font=font)
    rows, cols = local.window
    lines = [
        f"output vs input mean luminance per mask cell ({rows}x{cols} px): "
        "blue lost light, red gained, grey black input",
        f"|error| p50 {100 * local.p50:.2f} %   p99 {100 * local.p99:.2f} %   max {100 * local.max:.2f} %",
    ]
    for i, line in enumerate(lines):
        draw.text((pad, top + bar_h + 8 + (i + 1) * text), line, fill=_TEXT, font=font)
    return np.asarray(sheet)
