"""Captures: the part of a grabbed frame that is the game's picture, one row per source line.

A frame grabbed from a console or a capture card often carries more than the
picture the game drew: black or coloured borders, the edge a television hid
behind its bezel (overscan), and every line drawn twice (a 240-line picture
sent as 480 lines). This stage cuts the frame down to the picture before
anything else sees it, in this order:

1. ``crop`` ("X,Y,W,H", in the frame's own pixels, as an image viewer shows
   them) keeps that rectangle;
2. ``line_doubled`` takes each pair of rows as one source line (the upper
   row of the pair: in a line-doubled frame both rows are the same);
3. ``overscan`` (a percentage) cuts that share of the width and of the
   height, half from each side, as a television's bezel hid it.

Everything after this stage, from linear light to the light figures, sees
only what is left: the picture's mean luminance is measured on it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import SettingsError


def parse_crop(text: str) -> tuple[int, int, int, int]:
    """Parse ``"X,Y,W,H"`` into (x, y, width, height): x, y >= 0, width, height >= 1.

    The one parser of crops: a capture's (``--crop`` of render) and a comparison's.

    >>> parse_crop("8, 0, 304, 240")
    (8, 0, 304, 240)
    """
    try:
        x, y, w, h = (int(p) for p in str(text).replace(" ", "").split(","))
    except ValueError:
        raise SettingsError(f"crop must look like X,Y,W,H in pixels, e.g. 8,0,304,240 (got {text!r})") from None
    if x < 0 or y < 0 or w < 1 or h < 1:
        raise SettingsError(f"crop must have x, y >= 0 and w, h >= 1 (got {text!r})")
    return x, y, w, h


#: The most of each axis ``overscan`` may cut, in percent.
MAX_OVERSCAN = 50.0


@dataclass(frozen=True)
class CaptureSettings:
    """Which part of the frame is the picture.

    Parameters
    ----------
    crop : str or None
        ``"X,Y,W,H"``: keep this rectangle of the frame (its own pixels).
    line_doubled : bool
        Every source line is two rows of the frame: take each pair as one line.
    overscan : float
        Percent of the width and of the height to cut, half from each side
        (0 to :data:`MAX_OVERSCAN`).
    """

    crop: str | None = None
    line_doubled: bool = False
    overscan: float = 0.0

    def __post_init__(self):
        if self.crop is not None:
            parse_crop(self.crop)
        if not (0 <= float(self.overscan) <= MAX_OVERSCAN):
            raise SettingsError(f"overscan must be a percentage from 0 to {MAX_OVERSCAN:g} (got {self.overscan})")

    @property
    def active(self) -> bool:
        """True when this stage changes the frame."""
        return self.crop is not None or self.line_doubled or float(self.overscan) > 0


def _window(width: int, height: int, settings: CaptureSettings) -> tuple[int, int, int, int, int]:
    """(x, y, w, h, step): the frame's rows y, y + step, ... and columns x to x + w that are the picture."""
    x, y, w, h = 0, 0, width, height
    if settings.crop is not None:
        x, y, w, h = parse_crop(settings.crop)
        if x + w > width or y + h > height:
            raise SettingsError(f"crop {settings.crop} reaches past the {width}x{height} frame")
    step = 1
    if settings.line_doubled:
        if h % 2:
            raise SettingsError(f"a line-doubled frame has an even number of rows; "
                                f"this one {'is cropped to' if settings.crop else 'has'} {h}")
        step, h = 2, h // 2
    if settings.overscan:
        cut_w = round(w * float(settings.overscan) / 200)
        cut_h = round(h * float(settings.overscan) / 200)
        x, w = x + cut_w, w - 2 * cut_w
        y, h = y + step * cut_h, h - 2 * cut_h  # at most half of each axis: something is always left
    return x, y, w, h, step


def source_size(width: int, height: int, settings: CaptureSettings) -> tuple[int, int]:
    """The size of the picture this stage leaves of a ``width`` x ``height`` frame.

    Raises
    ------
    SettingsError
        When the crop reaches past the frame, or a line-doubled frame has an
        odd number of rows.
    """
    _x, _y, w, h, _step = _window(width, height, settings)
    return w, h


def cut(codes: np.ndarray, alpha: np.ndarray | None, settings: CaptureSettings
        ) -> tuple[np.ndarray, np.ndarray | None]:
    """The picture of a frame: cropped, one row per source line, overscan cut.

    Parameters
    ----------
    codes : numpy.ndarray
        (H, W, C) code values of the frame.
    alpha : numpy.ndarray or None
        (H, W) coverage, cut the same way.

    Returns
    -------
    codes, alpha
        Contiguous copies when anything was cut; the same arrays otherwise.
    """
    if not settings.active:
        return codes, alpha
    x, y, w, h, step = _window(codes.shape[1], codes.shape[0], settings)
    rows = slice(y, y + step * h, step)
    cols = slice(x, x + w)
    return (np.ascontiguousarray(codes[rows, cols]),
            None if alpha is None else np.ascontiguousarray(alpha[rows, cols]))


def doubled_lines(codes: np.ndarray) -> bool:
    """True when every pair of rows (0-1, 2-3, ...) of a frame of at least 400 rows is the
    same and the pairs are not all alike: a line-doubled capture, whose source lines
    are half as many (a frame of one flat colour is not taken for one)."""
    h = codes.shape[0]
    if h < 400 or h % 2:
        return False
    return bool(np.array_equal(codes[0::2], codes[1::2]) and not np.array_equal(codes[1:-1:2], codes[2::2]))
