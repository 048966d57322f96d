"""Test charts made on the fly, and the bundled sample frames.

The charts stress what a mask can get wrong: flat greys (where the light must
hold exactly), a smooth ramp (banding), saturated bars (one channel at a time)
and a one-pixel checkerboard (detail finer than a mask cell).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .files import data_folder

CHART_SIZE = (320, 240)


def chart_grey_levels(width: int = 320, height: int = 240) -> np.ndarray:
    """Eight flat bands of grey from black to white, left to right (uint8 sRGB, (H, W, 3))."""
    levels = np.round(np.linspace(0, 255, 8)).astype(np.uint8)
    band = np.repeat(levels, -(-width // 8))[:width]
    return np.broadcast_to(band[None, :, None], (height, width, 3)).copy()


def chart_ramp(width: int = 320, height: int = 240) -> np.ndarray:
    """A smooth grey ramp, black at the left to white at the right (uint8 sRGB, (H, W, 3))."""
    row = np.round(np.linspace(0, 255, width)).astype(np.uint8)
    return np.broadcast_to(row[None, :, None], (height, width, 3)).copy()


def chart_colour_bars(width: int = 320, height: int = 240) -> np.ndarray:
    """Bars of white, yellow, cyan, green, magenta, red, blue, black at 75 % (uint8 sRGB)."""
    on = 191  # 75 % of 255
    bars = np.array([[1, 1, 1], [1, 1, 0], [0, 1, 1], [0, 1, 0], [1, 0, 1], [1, 0, 0], [0, 0, 1],
                     [0, 0, 0]], np.uint8) * on
    index = np.minimum(np.arange(width) * 8 // width, 7)
    return np.broadcast_to(bars[index][None], (height, width, 3)).copy()


def chart_checker(width: int = 320, height: int = 240) -> np.ndarray:
    """A one-pixel black and white checkerboard (uint8 sRGB, (H, W, 3))."""
    board = (np.indices((height, width)).sum(axis=0) % 2 * 255).astype(np.uint8)
    return np.repeat(board[..., None], 3, axis=2)


#: Charts keyed by the names they are reported under.
CHARTS = {
    "chart:grey-levels": chart_grey_levels,
    "chart:ramp": chart_ramp,
    "chart:colour-bars": chart_colour_bars,
    "chart:checker-1px": chart_checker,
}


def samples_folder() -> Path:
    """The folder of bundled sample frames (installed with the package, or in a checkout)."""
    return data_folder("samples", "*.png")


def bundled_samples() -> list[Path]:
    """The bundled sample frames, sorted by name."""
    return sorted(samples_folder().glob("*.png"))
