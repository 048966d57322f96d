"""A check of moving output for general flashes and red flashes (WCAG 2.2, 2.3.1).

This is an aid, not a certification: it follows the definitions of WCAG 2.2
success criterion 2.3.1 ("Three Flashes or Below Threshold") and its
definitions of the general flash and red flash thresholds, on the decoded
output, frame by frame, in bounded memory (the state is per block, not per frame).

The definitions, as implemented (WCAG 2.2, "general flash and red flash
thresholds"; the figures from memory, checked against the text we recall):

- **Relative luminance** L: BT.709 weights of linear sRGB (WCAG's definition).
- **General flash**: a pair of opposing changes in L of 0.1 or more (10 % of
  the maximum, 1.0) where the darker of the two is below 0.8.
- **Red flash**: a pair of opposing transitions involving saturated red:
  R / (R + G + B) >= 0.8, and the change in max(0, (R - G - B) x 320) is more
  than 20 (R, G, B linear, 0 to 1).
- **Too many**: more than three flashes (so more than six transitions) in any
  one-second period.
- **Too large**: the flashing area, concurrently, covers more than 25 % of any
  10-degree visual field, which WCAG estimates as a 341 x 256 pixel rectangle
  of a screen viewed at 1024 x 768: here a window of 1/3 of the frame's width
  and 1/3 of its height, on a grid of blocks.

A region that flashes too often fails only when it is also too large; the
check reports the seconds (from the clip's start) in which both hold.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .color import LUMA_BT709
from .scale import Tiles

#: WCAG 2.2 general flash: a change of 10 % of the maximum relative luminance...
GENERAL_CHANGE = 0.1
#: ... where the darker image is below 0.80.
GENERAL_DARKER_BELOW = 0.8
#: WCAG 2.2 red flash: saturated red is R / (R + G + B) >= 0.8 ...
RED_RATIO = 0.8
#: ... and the change in max(0, (R - G - B) x 320) is more than 20.
RED_SCALE, RED_CHANGE = 320.0, 20.0
#: More than three flashes (pairs of opposing transitions) in any one second fail.
MOST_TRANSITIONS = 6
#: 25 % of a 10-degree visual field (WCAG 2.2).
FIELD_SHARE = 0.25
#: The grid the frame is measured on, and the 10-degree field on it: 341 x 256 of
#: 1024 x 768 is a third of each side (WCAG 2.2's estimate).
GRID = (36, 48)
FIELD = (12, 16)


def grid_starts(h: int, w: int, grid: tuple[int, int] = GRID) -> tuple[np.ndarray, np.ndarray]:
    """First row and first column of each block of the grid on an (h, w) frame (int64)."""
    rows = np.unique(np.linspace(0, h, grid[0] + 1).astype(np.int64)[:-1])
    cols = np.unique(np.linspace(0, w, grid[1] + 1).astype(np.int64)[:-1])
    return rows, cols


def block_means(linear: np.ndarray, grid: tuple[int, int] = GRID) -> np.ndarray:
    """Mean of a (H, W, 3) linear frame over a grid of (rows, columns) blocks, float64."""
    h, w = linear.shape[:2]
    blocks = Tiles(*grid_starts(h, w, grid), (h, w))
    row_n, col_n = blocks.counts
    return blocks.sums(linear) / (row_n[:, None] * col_n[None, :])[..., None]


class _Transitions:
    """Opposing changes of one quantity per block, by hysteresis from the last extreme."""

    def __init__(self, shape, change: float, darker_below: float | None):
        self.change = change
        self.darker_below = darker_below
        self.extreme = None
        self.direction = np.zeros(shape, np.int8)  # +1 rising, -1 falling, 0 not yet moved

    def step(self, value: np.ndarray) -> np.ndarray:
        """Feed one frame's values; returns where a transition completed (bool)."""
        if self.extreme is None:
            self.extreme = value.copy()
            return np.zeros(value.shape, bool)
        delta = value - self.extreme
        # carry on in the same direction: the extreme follows the value
        same = ((self.direction > 0) & (delta > 0)) | ((self.direction < 0) & (delta < 0))
        self.extreme[same] = value[same]
        if self.darker_below is None:  # red: a change of more than the threshold
            big = np.abs(delta) > self.change
        else:  # general: a change of the threshold or more, the darker side below a level
            big = (np.abs(delta) >= self.change) & (np.minimum(value, self.extreme) < self.darker_below)
        turned = big & ~same & (np.sign(delta) != self.direction)
        self.direction[turned] = np.sign(delta[turned]).astype(np.int8)
        self.extreme[turned] = value[turned]
        return turned


def red_quantity(blocks: np.ndarray) -> np.ndarray:
    """max(0, (R - G - B) x 320) where the block is saturated red, else 0 (WCAG 2.2)."""
    r, g, b = blocks[..., 0], blocks[..., 1], blocks[..., 2]
    total = r + g + b
    saturated = (total > 0) & (r >= RED_RATIO * total)
    return np.where(saturated, np.maximum(0.0, (r - g - b) * RED_SCALE), 0.0)


def _too_large(flashing: np.ndarray) -> bool:
    """Whether flashing blocks cover more than FIELD_SHARE of any FIELD window of the grid."""
    fr, fc = min(FIELD[0], flashing.shape[0]), min(FIELD[1], flashing.shape[1])
    c = np.pad(np.cumsum(np.cumsum(flashing.astype(np.int32), 0), 1), ((1, 0), (1, 0)))
    windows = c[fr:, fc:] - c[:-fr, fc:] - c[fr:, :-fc] + c[:-fr, :-fc]
    return bool((windows > FIELD_SHARE * fr * fc).any())


@dataclass
class FlashCheck:
    """Feed decoded linear frames in order with :meth:`add`; read :meth:`failing_seconds`."""

    fps: float
    grid: tuple[int, int] = GRID
    frames: int = 0
    general: list[tuple[int, int]] = field(default_factory=list)  # (first, last) transition frames
    red: list[tuple[int, int]] = field(default_factory=list)        # of each failing second

    def __post_init__(self):
        if not self.fps > 0:
            raise ValueError("frames per second must be above 0")
        self._window = max(1, int(round(self.fps)))
        self._lum = None
        self._red = None
        self._history: list[tuple[np.ndarray, np.ndarray]] = []
        self._counts = None

    def add(self, linear: np.ndarray) -> None:
        """One frame, (H, W, 3) linear light in [0, 1] (standard range: above 1 counts as 1)."""
        self.add_blocks(block_means(linear, self.grid))

    def add_blocks(self, means: np.ndarray) -> None:
        """One frame as its :func:`block_means` (rows, columns, 3), however they were summed."""
        blocks = np.minimum(means, 1.0)
        lum = blocks @ LUMA_BT709
        if self._lum is None:
            self._lum = _Transitions(lum.shape, GENERAL_CHANGE, GENERAL_DARKER_BELOW)
            self._red = _Transitions(lum.shape, RED_CHANGE, None)
            self._counts = (np.zeros(lum.shape, np.int32), np.zeros(lum.shape, np.int32))
        step = (self._lum.step(lum), self._red.step(red_quantity(blocks)))
        self._history.append(step)
        for count, s in zip(self._counts, step):
            count += s
        if len(self._history) > self._window:  # the window holds one second of frames
            for count, s in zip(self._counts, self._history.pop(0)):
                count -= s
        for k, (kind, count) in enumerate(zip((self.general, self.red), self._counts)):
            flashing = count > MOST_TRANSITIONS
            if _too_large(flashing):
                # the span of the failing second's transitions in the blocks that flash
                moved = [j for j, h in enumerate(self._history) if (h[k] & flashing).any()]
                first = self.frames - len(self._history) + 1
                kind.append((first + moved[0], first + moved[-1]))
        self.frames += 1

    def failing_seconds(self) -> list[tuple[float, float]]:
        """Spans (start, end) in seconds of the clip over which either kind of flash fails, merged.

        A span runs from the first to the last transition of a one-second period
        that fails (the frame after the last: its change is shown for a frame).
        """
        spans: list[list[float]] = []
        for a, b in sorted(set(self.general) | set(self.red)):
            start, end = a / self.fps, (b + 1) / self.fps
            if spans and start <= spans[-1][1]:
                spans[-1][1] = max(spans[-1][1], end)
            else:
                spans.append([start, end])
        return [(round(a, 3), round(b, 3)) for a, b in spans]

    def figures(self) -> dict:
        """For a report: the rule, the spans that fail, and which kinds failed."""
        return {"rule": "WCAG 2.2 SC 2.3.1 general and red flash thresholds (an aid, not a certification)",
                "frames": self.frames, "fps": self.fps,
                "failing_seconds": [list(s) for s in self.failing_seconds()],
                "general": bool(self.general), "red": bool(self.red)}


def caution_line(spans: list[tuple[float, float]]) -> str | None:
    """One line for stderr naming the seconds that exceed the thresholds, or None."""
    if not spans:
        return None
    text = ", ".join(f"{a:.2f}-{b:.2f} s" for a, b in spans)
    return (f"caution: flashes above the WCAG 2.3.1 thresholds at {text}; this can trigger seizures in "
            "people with photosensitive epilepsy (the check is an aid, not a certification)")
