"""Pictures for people: the energy map (and, later, sheets and previews).

Drawn with numpy and Pillow only, with the font that ships with Pillow, so
nothing here needs a display or a plotting library.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import terms
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
        f"local error: output vs input mean luminance per mask period cell ({terms.cell(local.window)}): "
        "blue lost light, red gained, grey black input",
        f"|error| p50 {terms.percent(local.p50)}   p99 {terms.percent(local.p99)}   max {terms.percent(local.max)}",
    ]
    for i, line in enumerate(lines):
        draw.text((pad, top + bar_h + 8 + (i + 1) * text), line, fill=_TEXT, font=font)
    return np.asarray(sheet)


# --------------------------------------------------------------------------
# Comparison sheets


def busiest_region(linear: np.ndarray, width: int, height: int) -> tuple[int, int, int, int]:
    """The ``width`` x ``height`` window of a source picture with the most detail.

    Detail is the summed magnitude of luminance differences to the right and
    below, boxed over the window (an integral image, so every position is tried).

    Returns
    -------
    (x, y, w, h) in source pixels.
    """
    from .color import luminance

    y = luminance(linear).astype(np.float64)
    h_src, w_src = y.shape
    w, h = max(1, min(width, w_src)), max(1, min(height, h_src))
    edges = np.zeros_like(y)
    edges[:, :-1] += np.abs(np.diff(y, axis=1))
    edges[:-1, :] += np.abs(np.diff(y, axis=0))
    s = np.zeros((h_src + 1, w_src + 1))
    s[1:, 1:] = edges.cumsum(axis=0).cumsum(axis=1)
    box = s[h:, w:] - s[:-h, w:] - s[h:, :-w] + s[:-h, :-w]
    top, left = np.unravel_index(int(np.argmax(box)), box.shape)
    return int(left), int(top), w, h


def source_structure(codes: np.ndarray, geometry: Geometry, encoding) -> tuple[np.ndarray, np.ndarray]:
    """What an output looks like over each source pixel's footprint, in linear light.

    Returns
    -------
    mean : numpy.ndarray
        float64 (src_h, src_w): the output's mean luminance over the footprint.
    structure : numpy.ndarray
        float64 (src_h, src_w): its standard deviation there over the mean (with a
        floor of 2 % of white, so near-black noise does not count): how plainly the
        mask and scanlines show over that pixel.
    """
    from .color import luminance

    g = geometry
    picture = codes[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w, :3]
    y = luminance(encoding.decode(picture), encoding.luma).astype(np.float64)
    rows = (np.arange(g.pic_h) * g.src_h) // g.pic_h
    cols = (np.arange(g.pic_w) * g.src_w) // g.pic_w
    index = (rows[:, None] * g.src_w + cols[None, :]).ravel()
    n = np.bincount(index, minlength=g.src_w * g.src_h)
    total = np.bincount(index, weights=y.ravel(), minlength=g.src_w * g.src_h)
    squares = np.bincount(index, weights=(y * y).ravel(), minlength=g.src_w * g.src_h)
    mean = total / np.maximum(n, 1)
    spread = np.sqrt(np.maximum(squares / np.maximum(n, 1) - mean * mean, 0.0))
    shape = (g.src_h, g.src_w)
    return mean.reshape(shape), (spread / (mean + 0.02)).reshape(shape)


def differing_region(looks: list[tuple[np.ndarray, np.ndarray]], width: int, height: int
                     ) -> tuple[int, int, int, int]:
    """The ``width`` x ``height`` window of the source where outputs look most different.

    ``looks`` holds :func:`source_structure` of each output (one per preset, same
    source size). The difference per source pixel sums, over every pair, how much
    the mask structure differs and how much the local mean differs (relative:
    a softer kernel moves light between neighbours). Flat white, where every
    standard-range mask fades, and black score nothing. With one output, its own
    structure is the score: where its mask shows most.

    Returns
    -------
    (x, y, w, h) in source pixels.
    """
    if len(looks) == 1:
        score = looks[0][1].copy()
    else:
        score = np.zeros_like(looks[0][0])
        for i in range(len(looks)):
            for j in range(i + 1, len(looks)):
                (ma, sa), (mb, sb) = looks[i], looks[j]
                score += np.abs(sa - sb) + np.abs(ma - mb) / (ma + mb + 0.02)
    h_src, w_src = score.shape
    w, h = max(1, min(width, w_src)), max(1, min(height, h_src))
    s = np.zeros((h_src + 1, w_src + 1))
    s[1:, 1:] = score.cumsum(axis=0).cumsum(axis=1)
    box = s[h:, w:] - s[:-h, w:] - s[h:, :-w] + s[:-h, :-w]
    top, left = np.unravel_index(int(np.argmax(box)), box.shape)
    return int(left), int(top), w, h


def crop_box(geometry: Geometry, crop: tuple[int, int, int, int]) -> tuple[int, int, int, int]:
    """A crop in source pixels as (x, y, w, h) in output pixels."""
    x, y, w, h = crop
    sx = geometry.pic_w / geometry.src_w
    sy = geometry.pic_h / geometry.src_h
    x0, y0 = geometry.pic_x + round(x * sx), geometry.pic_y + round(y * sy)
    x1, y1 = geometry.pic_x + round((x + w) * sx), geometry.pic_y + round((y + h) * sy)
    return x0, y0, max(1, x1 - x0), max(1, y1 - y0)


def view_linear(codes: np.ndarray, encoding=None) -> np.ndarray:
    """Output codes as linear BT.709 light for showing on a standard display.

    HDR (PQ, BT.2020) pictures are converted to BT.709 and clipped at the
    reference white: a sheet shows their structure, not their highlights.

    Returns
    -------
    numpy.ndarray
        float32 (h, w, 3), range [0, 1].
    """
    from .color import Encoding, source_matrix

    encoding = encoding or Encoding()
    lin = encoding.decode(np.ascontiguousarray(codes[..., :3]))
    if encoding.hdr:
        to_709 = np.linalg.inv(source_matrix("srgb", "d65", "hdr")).astype(np.float32)
        lin = np.einsum("...c,dc->...d", lin, to_709, optimize=True)
    return np.clip(lin, 0.0, 1.0).astype(np.float32)


def sdr_view(codes: np.ndarray, encoding=None) -> np.ndarray:
    """Output codes as 8-bit sRGB for a standard display (see :func:`view_linear`)."""
    from .color import encode_srgb

    return encode_srgb(view_linear(codes, encoding))


def overview(codes: np.ndarray, width: int, height: int, encoding=None) -> np.ndarray:
    """The whole output made small, averaged in linear light (uint8 sRGB).

    Averaging in linear light matters here: a fine mask averaged as code
    values would look darker than the light it holds.
    """
    from .color import encode_srgb
    from .scale import upscale

    h, w = codes.shape[:2]
    f = min(width / w, height / h)
    small = upscale(view_linear(codes, encoding), max(1, round(w * f)), max(1, round(h * f)), "sharp")
    return encode_srgb(small)


@dataclass(frozen=True)
class Panel:
    """One picture of a sheet: a 1:1 crop, a whole-frame overview and caption lines."""

    crop: np.ndarray
    overview: np.ndarray
    caption: tuple[str, ...]


#: Layout constants of comparison sheets, in pixels.
SHEET_PAD = 16
SHEET_OVERVIEW = (240, 180)
SHEET_LINE = 20
SHEET_TITLE = 34
SHEET_MAX_COLUMNS = 4


def sheet_size(n_panels: int, crop_w: int, crop_h: int, caption_lines: int = 3) -> tuple[int, int, int, int]:
    """(width, height, columns, rows) of a sheet of ``n_panels`` with crops up to crop_w x crop_h."""
    cols = min(n_panels, SHEET_MAX_COLUMNS)
    rows = -(-n_panels // cols)
    panel_w = max(crop_w, SHEET_OVERVIEW[0])
    panel_h = crop_h + SHEET_PAD // 2 + SHEET_OVERVIEW[1] + SHEET_PAD // 2 + caption_lines * SHEET_LINE
    width = SHEET_PAD + cols * (panel_w + SHEET_PAD)
    height = SHEET_TITLE + SHEET_PAD + rows * (panel_h + SHEET_PAD)
    return width, height, cols, rows


def sheet_picture(panels: list[Panel], title: str) -> np.ndarray:
    """Lay panels out in a grid of at most four columns under a title.

    Returns
    -------
    numpy.ndarray
        uint8 (h, w, 3), sRGB; its size is :func:`sheet_size` of the panels.
    """
    from PIL import Image, ImageDraw

    crop_w = max(p.crop.shape[1] for p in panels)
    crop_h = max(p.crop.shape[0] for p in panels)
    lines = max(len(p.caption) for p in panels)
    width, height, cols, _rows = sheet_size(len(panels), crop_w, crop_h, lines)
    panel_w = max(crop_w, SHEET_OVERVIEW[0])
    panel_h = crop_h + SHEET_PAD + SHEET_OVERVIEW[1] + lines * SHEET_LINE
    sheet = Image.new("RGB", (width, height), _BACKGROUND)
    draw = ImageDraw.Draw(sheet)
    draw.text((SHEET_PAD, 8), title, fill=_TEXT, font=_font(20))
    small = _font(15)
    for i, panel in enumerate(panels):
        row, col = divmod(i, cols)
        left = SHEET_PAD + col * (panel_w + SHEET_PAD)
        top = SHEET_TITLE + SHEET_PAD + row * (panel_h + SHEET_PAD)
        ch, cw = panel.crop.shape[:2]
        sheet.paste(Image.fromarray(np.ascontiguousarray(panel.crop[..., :3])),
                    (left + (panel_w - cw) // 2, top + (crop_h - ch) // 2))
        oh, ow = panel.overview.shape[:2]
        o_top = top + crop_h + SHEET_PAD // 2
        sheet.paste(Image.fromarray(panel.overview), (left + (panel_w - ow) // 2, o_top + (SHEET_OVERVIEW[1] - oh) // 2))
        for k, text in enumerate(panel.caption):
            draw.text((left, o_top + SHEET_OVERVIEW[1] + SHEET_PAD // 2 + k * SHEET_LINE), text,
                      fill=_TEXT if k == 0 else (190, 190, 190), font=small)
    return np.asarray(sheet)


# --------------------------------------------------------------------------
# Mask previews


def mask_preview(mask, *, cells: tuple[int, int] = (2, 4), zoom: int = 16, min_pixels: int = 12,
                 max_pixels: int = 64) -> np.ndarray:
    """A few period cells of a mask, enlarged, with the cell outlines and the means.

    Parameters
    ----------
    mask : crtfilter.masks.Mask
    cells : (down, across)
        How many cells to show; more are taken when a cell is smaller than
        ``min_pixels`` so the pattern reads.
    zoom : int
        Screen pixels per mask pixel (nearest neighbour).
    max_pixels : int
        At most this many mask pixels a side are shown (a fractional pitch can
        make a cell hundreds of pixels wide); the text says when a cell is cut.

    Returns
    -------
    numpy.ndarray
        uint8 (h, w, 3), sRGB: mask values shown as light (open = bright).
    """
    from PIL import Image, ImageDraw

    from .color import encode_srgb

    rows, cols = mask.cell
    down = max(cells[0], -(-min_pixels // rows))
    across = max(cells[1], -(-min_pixels // cols))
    h, w = mask.shape
    view_h = min(h, rows * down, max(rows, max_pixels) if rows <= max_pixels else max_pixels)
    view_w = min(w, cols * across, max(cols, max_pixels) if cols <= max_pixels else max_pixels)
    values = mask.pixels(rows=slice(0, view_h), columns=slice(0, view_w))
    big = np.repeat(np.repeat(encode_srgb(values), zoom, axis=0), zoom, axis=1)
    pad, text_w = 16, 330
    sheet = Image.new("RGB", (big.shape[1] + 3 * pad + text_w, max(big.shape[0], 150) + 2 * pad), _BACKGROUND)
    sheet.paste(Image.fromarray(big), (pad, pad))
    draw = ImageDraw.Draw(sheet)
    outline = (255, 214, 0)
    for r in range(0, view_h + 1, rows):
        draw.line([(pad, pad + r * zoom), (pad + view_w * zoom - 1, pad + r * zoom)], fill=outline)
    for c in range(0, view_w + 1, cols):
        draw.line([(pad + c * zoom, pad), (pad + c * zoom, pad + view_h * zoom - 1)], fill=outline)
    font = _font(16)
    x = big.shape[1] + 2 * pad
    cut = " (part of one cell)" if view_h < rows or view_w < cols else ""
    lines = [f"period cell: {terms.cell(mask.cell)} (outlined)", f"shown: {terms.size(view_w, view_h)} px{cut}, x{zoom}",
             "mask mean over one cell:"]
    lines += [f"  {name}: {m:.4f}" for name, m in zip(("red", "green", "blue"), mask.mean, strict=True)]
    for k, text in enumerate(lines):
        draw.text((x, pad + k * 22), text, fill=_TEXT, font=font)
    return np.asarray(sheet)
