#!/usr/bin/env python3
"""Draw the demo scenes and test charts used by crtfilter.

Everything here is drawn from code.  The scenes belong to an invented game,
"Saltwren Post": Imke, a courier on a three-wheeled sand yacht, carries
parcels between the salt-pan towns of the Pale Flats, reading the wind.
Text is drawn with the small bitmap fonts defined below (no system fonts).

Usage:  python make_samples.py [OUTPUT_DIR]

OUTPUT_DIR defaults to the folder this script lives in.  The output is fully
deterministic (fixed seeds and integer hashes only).  Requires numpy and
Pillow.
"""

import os
import sys

import numpy as np
from PIL import Image, ImageDraw

# --------------------------------------------------------------------------
# Palette shared by the colour scenes (32 colours, index -> sRGB)
# --------------------------------------------------------------------------

PALETTE = np.array([
    (0, 0, 0),         # 0  black
    (255, 255, 255),   # 1  white
    (18, 20, 44),      # 2  ink navy
    (28, 44, 128),     # 3  deep blue
    (36, 68, 228),     # 4  blue (saturated)
    (92, 148, 236),    # 5  sky
    (170, 208, 246),   # 6  pale sky
    (226, 236, 246),   # 7  haze (near-white, cool)
    (58, 30, 66),      # 8  plum
    (134, 76, 124),    # 9  mauve
    (232, 132, 154),   # 10 rose
    (14, 70, 44),      # 11 dark green
    (36, 188, 64),     # 12 green (saturated)
    (164, 214, 120),   # 13 lichen
    (62, 38, 26),      # 14 dark brown
    (126, 78, 42),     # 15 brown
    (206, 146, 48),    # 16 ochre
    (234, 204, 146),   # 17 sand
    (248, 242, 226),   # 18 salt (near-white, warm)
    (230, 34, 40),     # 19 red (saturated)
    (122, 20, 34),     # 20 dark red
    (244, 122, 34),    # 21 orange
    (252, 214, 60),    # 22 yellow
    (255, 246, 184),   # 23 pale yellow
    (46, 48, 60),      # 24 dark grey
    (104, 108, 124),   # 25 grey
    (174, 178, 190),   # 26 light grey
    (22, 126, 134),    # 27 teal
    (64, 206, 214),    # 28 cyan
    (12, 46, 58),      # 29 deep teal
    (166, 66, 30),     # 30 rust
    (214, 50, 150),    # 31 magenta
], dtype=np.uint8)

(BLACK, WHITE, NAVY, DBLUE, BLUE, SKY, PSKY, HAZE, PLUM, MAUVE, ROSE,
 DGREEN, GREEN, LICHEN, DBROWN, BROWN, OCHRE, SAND, SALT, RED, DRED, ORANGE,
 YELLOW, PYELLOW, DGREY, GREY, LGREY, TEAL, CYAN, DTEAL, RUST,
 MAGENTA) = range(32)

# Characters used in sprite art strings.  '.' is transparent.
KEY = {
    'K': BLACK, 'W': WHITE, 'n': NAVY, 'D': DBLUE, 'U': BLUE, 'u': SKY,
    'c': PSKY, 'h': HAZE, 'q': PLUM, 'v': MAUVE, 'i': ROSE, 'd': DGREEN,
    'G': GREEN, 'l': LICHEN, 'b': DBROWN, 'B': BROWN, 'a': OCHRE, 's': SAND,
    'w': SALT, 'R': RED, 'r': DRED, 'O': ORANGE, 'Y': YELLOW, 'P': PYELLOW,
    'k': DGREY, 'e': GREY, 'E': LGREY, 'T': TEAL, 'C': CYAN, 'x': DTEAL,
    't': RUST, 'M': MAGENTA,
}

# 4x4 ordered-dither thresholds (0..15)
BAYER4 = np.array([[0, 8, 2, 10],
                   [12, 4, 14, 6],
                   [3, 11, 1, 9],
                   [15, 7, 13, 5]], dtype=np.uint8)

# --------------------------------------------------------------------------
# Bitmap fonts (our own).  '#' = ink.
# --------------------------------------------------------------------------

FONT5X7_SRC = {
    'A': ".###. #...# #...# ##### #...# #...# #...#",
    'B': "####. #...# #...# ####. #...# #...# ####.",
    'C': ".###. #...# #.... #.... #.... #...# .###.",
    'D': "####. #...# #...# #...# #...# #...# ####.",
    'E': "##### #.... #.... ####. #.... #.... #####",
    'F': "##### #.... #.... ####. #.... #.... #....",
    'G': ".###. #...# #.... #.### #...# #...# .####",
    'H': "#...# #...# #...# ##### #...# #...# #...#",
    'I': ".###. ..#.. ..#.. ..#.. ..#.. ..#.. .###.",
    'J': "..### ...#. ...#. ...#. ...#. #..#. .##..",
    'K': "#...# #..#. #.#.. ##... #.#.. #..#. #...#",
    'L': "#.... #.... #.... #.... #.... #.... #####",
    'M': "#...# ##.## #.#.# #.#.# #...# #...# #...#",
    'N': "#...# #...# ##..# #.#.# #..## #...# #...#",
    'O': ".###. #...# #...# #...# #...# #...# .###.",
    'P': "####. #...# #...# ####. #.... #.... #....",
    'Q': ".###. #...# #...# #...# #.#.# #..#. .##.#",
    'R': "####. #...# #...# ####. #.#.. #..#. #...#",
    'S': ".#### #.... #.... .###. ....# ....# ####.",
    'T': "##### ..#.. ..#.. ..#.. ..#.. ..#.. ..#..",
    'U': "#...# #...# #...# #...# #...# #...# .###.",
    'V': "#...# #...# #...# #...# #...# .#.#. ..#..",
    'W': "#...# #...# #...# #.#.# #.#.# #.#.# .#.#.",
    'X': "#...# #...# .#.#. ..#.. .#.#. #...# #...#",
    'Y': "#...# #...# .#.#. ..#.. ..#.. ..#.. ..#..",
    'Z': "##### ....# ...#. ..#.. .#... #.... #####",
    '0': ".###. #...# #..## #.#.# ##..# #...# .###.",
    '1': "..#.. .##.. ..#.. ..#.. ..#.. ..#.. .###.",
    '2': ".###. #...# ....# ...#. ..#.. .#... #####",
    '3': "##### ...#. ..#.. ...#. ....# #...# .###.",
    '4': "...#. ..##. .#.#. #..#. ##### ...#. ...#.",
    '5': "##### #.... ####. ....# ....# #...# .###.",
    '6': "..##. .#... #.... ####. #...# #...# .###.",
    '7': "##### ....# ...#. ..#.. .#... .#... .#...",
    '8': ".###. #...# #...# .###. #...# #...# .###.",
    '9': ".###. #...# #...# .#### ....# ...#. .##..",
    ' ': "..... ..... ..... ..... ..... ..... .....",
    '.': "..... ..... ..... ..... ..... .##.. .##..",
    ',': "..... ..... ..... ..... .##.. ..#.. .#...",
    ':': "..... .##.. .##.. ..... .##.. .##.. .....",
    '!': "..#.. ..#.. ..#.. ..#.. ..#.. ..... ..#..",
    '?': ".###. #...# ....# ...#. ..#.. ..... ..#..",
    '-': "..... ..... ..... ##### ..... ..... .....",
    '+': "..... ..#.. ..#.. ##### ..#.. ..#.. .....",
    '/': "..... ....# ...#. ..#.. .#... #.... .....",
    '*': "..... #...# .#.#. ..#.. .#.#. #...# .....",
    '=': "..... ..... ##### ..... ##### ..... .....",
    '>': ".#... ..#.. ...#. ....# ...#. ..#.. .#...",
    '<': "...#. ..#.. .#... #.... .#... ..#.. ...#.",
    '(': "...#. ..#.. .#... .#... .#... ..#.. ...#.",
    ')': ".#... ..#.. ...#. ...#. ...#. ..#.. .#...",
    "'": "..#.. ..#.. .#... ..... ..... ..... .....",
    '#': ".#.#. .#.#. ##### .#.#. ##### .#.#. .#.#.",
    '%': "##... ##..# ...#. ..#.. .#... #..## ...##",
    '&': ".##.. #..#. #.#.. .#... #.#.# #..#. .##.#",
    '_': "..... ..... ..... ..... ..... ..... #####",
}

FONT3X5_SRC = {
    'A': ".#. #.# ### #.# #.#", 'B': "##. #.# ##. #.# ##.",
    'C': ".## #.. #.. #.. .##", 'D': "##. #.# #.# #.# ##.",
    'E': "### #.. ##. #.. ###", 'F': "### #.. ##. #.. #..",
    'G': ".## #.. #.# #.# .##", 'H': "#.# #.# ### #.# #.#",
    'I': "### .#. .#. .#. ###", 'J': "..# ..# ..# #.# .#.",
    'K': "#.# #.# ##. #.# #.#", 'L': "#.. #.. #.. #.. ###",
    'M': "#.# ### ### #.# #.#", 'N': "##. #.# #.# #.# #.#",
    'O': ".#. #.# #.# #.# .#.", 'P': "##. #.# ##. #.. #..",
    'Q': ".#. #.# #.# ##. .##", 'R': "##. #.# ##. #.# #.#",
    'S': ".## #.. .#. ..# ##.", 'T': "### .#. .#. .#. .#.",
    'U': "#.# #.# #.# #.# ###", 'V': "#.# #.# #.# #.# .#.",
    'W': "#.# #.# ### ### #.#", 'X': "#.# #.# .#. #.# #.#",
    'Y': "#.# #.# .#. .#. .#.", 'Z': "### ..# .#. #.. ###",
    '0': "### #.# #.# #.# ###", '1': ".#. ##. .#. .#. ###",
    '2': "##. ..# .#. #.. ###", '3': "##. ..# .#. ..# ##.",
    '4': "#.# #.# ### ..# ..#", '5': "### #.. ##. ..# ##.",
    '6': ".## #.. ### #.# ###", '7': "### ..# .#. .#. .#.",
    '8': "### #.# ### #.# ###", '9': "### #.# ### ..# ##.",
    ' ': "... ... ... ... ...", '.': "... ... ... ... .#.",
    ',': "... ... ... .#. #..", ':': "... .#. ... .#. ...",
    '!': ".#. .#. .#. ... .#.", '?': "##. ..# .#. ... .#.",
    '-': "... ... ### ... ...", '+': "... .#. ### .#. ...",
    '/': "..# ..# .#. #.. #..", "'": ".#. .#. ... ... ...",
    '(': ".#. #.. #.. #.. .#.", ')': ".#. ..# ..# ..# .#.",
    '=': "... ### ... ### ...", '>': "#.. .#. ..# .#. #..",
    '<': "..# .#. #.. .#. ..#", '*': "... #.# .#. #.# ...",
    '#': "#.# ### #.# ### #.#", '%': "#.# ..# .#. #.. #.#",
    '&': ".#. #.# .#. #.# .##", '_': "... ... ... ... ###",
}


def _build_font(src):
    glyphs = {}
    for ch, rows in src.items():
        glyphs[ch] = np.array(
            [[c == '#' for c in row] for row in rows.split()], dtype=bool)
    return glyphs


FONT5X7 = _build_font(FONT5X7_SRC)
FONT3X5 = _build_font(FONT3X5_SRC)


# Heavy letters for the title logo (only the ones the logo needs).
LOGO_SRC = {
    'S': ".######. ######## ##...... #######. .####### ......## ......## "
         "######## .######.",
    'A': ".######. ######## ##....## ##....## ######## ######## ##....## "
         "##....## ##....##",
    'L': "##...... ##...... ##...... ##...... ##...... ##...... ##...... "
         "######## ########",
    'T': "######## ######## ...##... ...##... ...##... ...##... ...##... "
         "...##... ...##...",
    'W': "##......## ##......## ##......## ##..##..## ##..##..## "
         "##.####.## ########## ####..#### .##....##.",
    'R': "#######. ######## ##....## ##....## #######. ######.. ##..###. "
         "##...### ##....##",
    'E': "######## ######## ##...... ##...... ######.. ######.. ##...... "
         "######## ########",
    'N': "##....## ###...## ####..## ##.##.## ##.##.## ##..#### ##...### "
         "##....## ##....##",
    'P': "#######. ######## ##....## ##....## ######## #######. ##...... "
         "##...... ##......",
    'O': ".######. ######## ##....## ##....## ##....## ##....## ##....## "
         "######## .######.",
}
LOGO_FONT = _build_font(LOGO_SRC)



def logo_mask(text, scale, gap=2):
    glyphs = [LOGO_FONT[ch] for ch in text]
    h = glyphs[0].shape[0]
    w = sum(g.shape[1] for g in glyphs) + gap * (len(glyphs) - 1)
    mask = np.zeros((h, w), dtype=bool)
    x = 0
    for g in glyphs:
        mask[:, x:x + g.shape[1]] = g
        x += g.shape[1] + gap
    return np.kron(mask, np.ones((scale, scale), dtype=bool))


def text_mask(text, font=FONT5X7, scale=1, spacing=1):
    """Boolean mask of a single line of text."""
    gh, gw = next(iter(font.values())).shape
    width = max(len(text) * (gw + spacing) - spacing, 1)
    mask = np.zeros((gh, width), dtype=bool)
    for i, ch in enumerate(text.upper()):
        g = font.get(ch, font['?'])
        x = i * (gw + spacing)
        mask[:, x:x + gw] = g
    if scale > 1:
        mask = np.kron(mask, np.ones((scale, scale), dtype=bool))
    return mask


def text_width(text, font=FONT5X7, scale=1, spacing=1):
    gw = next(iter(font.values())).shape[1]
    return (len(text) * (gw + spacing) - spacing) * scale


def art(rows):
    """Turn a list of art strings into an index array (-1 = transparent)."""
    w = max(len(r) for r in rows)
    a = np.full((len(rows), w), -1, dtype=np.int16)
    for y, row in enumerate(rows):
        for x, ch in enumerate(row):
            if ch != '.':
                a[y, x] = KEY[ch]
    return a


# --------------------------------------------------------------------------
# Indexed drawing surface
# --------------------------------------------------------------------------

class Canvas:
    """An image of palette indices with a few simple drawing operations."""

    def __init__(self, width, height, fill=BLACK):
        self.w, self.h = width, height
        self.px = np.full((height, width), fill, dtype=np.uint8)
        yy, xx = np.mgrid[0:height, 0:width]
        self.yy, self.xx = yy, xx
        self.bayer = BAYER4[yy % 4, xx % 4]

    # -- basic shapes -------------------------------------------------------
    def rect(self, x, y, w, h, col):
        x, y = int(round(x)), int(round(y))
        w, h = int(round(w)), int(round(h))
        x0, y0 = max(x, 0), max(y, 0)
        x1, y1 = min(x + w, self.w), min(y + h, self.h)
        if x1 > x0 and y1 > y0:
            self.px[y0:y1, x0:x1] = col

    def frame(self, x, y, w, h, col):
        self.rect(x, y, w, 1, col)
        self.rect(x, y + h - 1, w, 1, col)
        self.rect(x, y, 1, h, col)
        self.rect(x + w - 1, y, 1, h, col)

    def fill(self, mask, col, level=16):
        """Paint col where mask is set; level < 16 paints an ordered dither."""
        if level < 16:
            mask = mask & (self.bayer < level)
        self.px[mask] = col

    def disc_mask(self, cx, cy, r):
        return (self.xx - cx) ** 2 + (self.yy - cy) ** 2 <= r * r + r * 0.8

    def ellipse_mask(self, cx, cy, rx, ry):
        return ((self.xx - cx) / rx) ** 2 + ((self.yy - cy) / ry) ** 2 <= 1.0

    def disc(self, cx, cy, r, col, level=16):
        self.fill(self.disc_mask(cx, cy, r), col, level)

    def box_mask(self, x, y, w, h):
        return ((self.xx >= x) & (self.xx < x + w) &
                (self.yy >= y) & (self.yy < y + h))

    def remap(self, mask, mapping, level=16):
        """Replace colours inside mask through a colour->colour mapping."""
        if level < 16:
            mask = mask & (self.bayer < level)
        lut = np.arange(256, dtype=np.uint8)
        for a, b in mapping.items():
            lut[a] = b
        self.px[mask] = lut[self.px[mask]]

    # -- bitmaps ------------------------------------------------------------
    def blit(self, x, y, a, scale=1, flip=False):
        """Draw an art() array (transparent where -1)."""
        if flip:
            a = a[:, ::-1]
        if scale > 1:
            a = np.kron(a, np.ones((scale, scale), dtype=a.dtype))
        h, w = a.shape
        sx0, sy0 = max(0, -x), max(0, -y)
        sx1, sy1 = min(w, self.w - x), min(h, self.h - y)
        if sx1 <= sx0 or sy1 <= sy0:
            return
        sub = a[sy0:sy1, sx0:sx1]
        dst = self.px[y + sy0:y + sy1, x + sx0:x + sx1]
        opaque = sub >= 0
        dst[opaque] = sub[opaque].astype(np.uint8)

    def stamp(self, x, y, mask, col):
        h, w = mask.shape
        sx0, sy0 = max(0, -x), max(0, -y)
        sx1, sy1 = min(w, self.w - x), min(h, self.h - y)
        if sx1 <= sx0 or sy1 <= sy0:
            return
        dst = self.px[y + sy0:y + sy1, x + sx0:x + sx1]
        dst[mask[sy0:sy1, sx0:sx1]] = col

    def text(self, x, y, s, col, font=FONT5X7, scale=1, shadow=None,
             spacing=1):
        m = text_mask(s, font, scale, spacing)
        if shadow is not None:
            self.stamp(x + scale, y + scale, m, shadow)
        self.stamp(x, y, m, col)

    def text_centered(self, cx, y, s, col, **kw):
        font = kw.get('font', FONT5X7)
        scale = kw.get('scale', 1)
        self.text(cx - text_width(s, font, scale) // 2, y, s, col, **kw)

    # -- larger helpers -----------------------------------------------------
    def gradient_rows(self, y0, y1, cols, x0=0, x1=None, steps=4):
        """Vertical gradient through cols, as bands joined by stepped dither.

        Each band is solid in its middle; between bands the rows step
        through 25 %, 50 % and 75 % patterns of the next colour.
        """
        x1 = self.w if x1 is None else x1
        n = len(cols) - 1
        span = y1 - y0
        for y in range(y0, y1):
            t = (y - y0) / max(span - 1, 1) * n
            i = min(int(t), n - 1)
            f = t - i
            # keep most of each band solid, dither the last part
            lvl = int(np.clip((f - 0.55) / 0.45, 0, 1) * steps + 0.5)
            lvl = lvl * 16 // steps
            row = self.px[y, x0:x1]
            row[:] = cols[i]
            if lvl > 0:
                th = self.bayer[y, x0:x1]
                row[th < lvl] = cols[i + 1]

    # -- polygons and lines (drawn with Pillow into a mask) ----------------
    def poly_mask(self, pts):
        im = Image.new('1', (self.w, self.h), 0)
        ImageDraw.Draw(im).polygon([(float(x), float(y)) for x, y in pts],
                                   fill=1)
        return np.asarray(im, dtype=bool)

    def poly(self, pts, col, level=16):
        self.fill(self.poly_mask(pts), col, level)

    def line_mask(self, pts):
        im = Image.new('1', (self.w, self.h), 0)
        ImageDraw.Draw(im).line([(float(x), float(y)) for x, y in pts],
                                fill=1, width=1)
        return np.asarray(im, dtype=bool)

    def line(self, pts, col, level=16):
        self.fill(self.line_mask(pts), col, level)

    def dot(self, x, y, col):
        if 0 <= x < self.w and 0 <= y < self.h:
            self.px[y, x] = col

    def to_rgb(self):
        return PALETTE[self.px]


def outline_mask(mask, r=1):
    """Pixels within r (square neighbourhood) of mask but not in it."""
    out = mask.copy()
    for dy in range(-r, r + 1):
        for dx in range(-r, r + 1):
            out |= np.roll(np.roll(mask, dy, 0), dx, 1)
    return out & ~mask


def pad(mask, n):
    h, w = mask.shape
    out = np.zeros((h + 2 * n, w + 2 * n), dtype=bool)
    out[n:n + h, n:n + w] = mask
    return out


# --------------------------------------------------------------------------
# Sprites of the invented game
# --------------------------------------------------------------------------

# Imke at the helm, head and shoulders above the seat pod, facing right:
# dark hair in a bun, flying goggles down, a teal scarf streaming back.
HELM = art([
    "...KKKK....",
    "..KnnnnKK..",
    ".KnnnnnnnK.",
    "KnKnnnnnnnK",
    "KnKnkkCCCkK",
    ".KKnkCWCCK.",
    "TTKnnsssssK",
    "TCTKssssiK.",
    ".KTTTKKKK..",
    "..KTTaaaK..",
])


def hash01(i, j, salt=0):
    """A deterministic pseudo-random number in [0, 1) per integer pair."""
    h = (np.asarray(i, dtype=np.int64) * 73856093
         ^ np.asarray(j, dtype=np.int64) * 19349663
         ^ (salt * 83492791)) & 0x7FFFFFFF
    h = (h ^ (h >> 13)) * 1274126177 & 0x7FFFFFFF
    h = h ^ (h >> 16)
    return (h & 0xFFFF) / 65536.0


def land_yacht(c, x, y, stripes, k=1, flip=False, shadow=None,
               size=1.0):
    """Imke's sand yacht, side on, nose to the right (or left, flipped): a
    three-wheeled frame, a blue seat pod and a tall striped sail.  (x, y) is
    the point on the ground below the mast.  k scales the pixels, size
    only the frame and sail (lines stay one pixel wide)."""
    if flip:
        # draw it on a mirrored copy of the picture and mirror it back
        tmp = Canvas(c.w, c.h)
        tmp.px[:] = c.px[:, ::-1]
        land_yacht(tmp, c.w - 1 - x, y, stripes, k, False, shadow, size)
        c.px[:] = tmp.px[:, ::-1]
        return
    g = k * size
    if shadow is not None:
        c.fill(c.ellipse_mask(x + 2 * g, y + 1, 30 * g, 1.6 * g), shadow,
               level=8)
    # sail: a tall triangle behind the mast, its leech gently curved
    top = (x - 3 * g, y - 64 * g)
    sail = c.poly_mask([top, (x, y - 18 * g), (x - 27 * g, y - 18 * g),
                        (x - 21 * g, y - 34 * g), (x - 12 * g, y - 50 * g)])
    c.fill(outline_mask(sail), BLACK)
    band = np.clip((c.yy - top[1]) * len(stripes) // int(46 * g), 0,
                   len(stripes) - 1)
    for i, col in enumerate(stripes):
        c.fill(sail & (band == i), col)
    c.fill(sail & ~np.roll(sail, -2 * k, 1), DGREY, level=8)   # leech shade
    c.fill(sail & ~np.roll(sail, 1, 1) & (c.xx > x - 14 * g), WHITE)
    # mast, boom, sheet and a pennant
    c.line([(x + 1 * g, y - 10 * g), top], DGREY)
    c.line([(x + 2 * g, y - 10 * g), (top[0] + 1, top[1])], LGREY)
    c.rect(x - 28 * g, y - 18 * g, 30 * g, max(1, k), DGREY)
    c.line([(x - 26 * g, y - 17 * g), (x - 13 * g, y - 11 * g)], GREY)
    c.poly([(top[0], top[1] - 1), (top[0] + 8 * g, top[1] + 1 * g),
            (top[0], top[1] + 3 * g)], RED)
    # chassis, wheels and the seat pod
    c.rect(x - 22 * g, y - 7 * g, 50 * g, 2 * k, DGREY)
    c.rect(x - 22 * g, y - 7 * g, 50 * g, max(1, k // 2), LGREY)
    c.line([(x + 24 * g, y - 6 * g), (x + 26 * g, y - 3 * g)], DGREY)
    c.line([(x - 18 * g, y - 6 * g), (x - 18 * g, y - 3 * g)], DGREY)
    for wx, wy in [(x - 18 * g, y - 3 * g), (x + 26 * g, y - 3 * g)]:
        c.disc(wx, wy, 3 * g, BLACK)
        c.disc(wx, wy, 2 * g, DGREY)
        c.disc(wx, wy, max(1, g) - 0.5, LGREY)
    pod = c.poly_mask([(x - 17 * g, y - 6 * g), (x - 15 * g, y - 12 * g),
                       (x - 3 * g, y - 13 * g), (x + 8 * g, y - 9 * g),
                       (x + 11 * g, y - 6 * g)])
    c.fill(outline_mask(pod), BLACK)
    c.fill(pod, BLUE)
    c.fill(pod & (c.yy <= y - 11 * g), SKY)
    c.fill(pod & (c.yy >= y - 8 * g), DBLUE)
    c.fill(pod & (c.yy == int(round(y - 10 * g))) & (c.xx > x - 12 * g) &
           (c.xx < x + 4 * g), SALT)
    c.blit(int(x - 15 * g), int(y - 13 * g) - 9 * k, HELM, scale=k)


def tern(c, x, y, col=DGREY, up=True):
    """A small sea bird, wings raised (up) or level."""
    if up:
        for dx, dy in [(0, 0), (1, 1), (2, 2), (3, 1), (4, 1), (5, 0),
                       (6, -1)]:
            c.dot(x + dx, y + dy - 1, col)
        c.dot(x + 3, y + 1, WHITE)
    else:
        for dx in range(7):
            c.dot(x + dx, y + (1 if dx in (0, 6) else 0), col)
        c.dot(x + 3, y + 1, col)


# --------------------------------------------------------------------------
# Scene 1: gliding over the Pale Flats at midday, 320x240
# --------------------------------------------------------------------------

HORIZON = 140
GROUND_K, GROUND_F = 240.0, 160.0   # depth = K / rows below the horizon


def ground_xz(c, cx=160):
    dy = np.maximum(c.yy - HORIZON, 0.5).astype(float)
    z = GROUND_K / dy
    x = (c.xx - cx) * z / GROUND_F
    return x, z


def to_screen(x, z, cx=160):
    return cx + x * GROUND_F / z, HORIZON + GROUND_K / z


def salt_crust(c, region, scale=1.6):
    """Polygon ridges of a dry salt pan: Voronoi cells in ground space."""
    gx, gz = ground_xz(c)
    u, v = gx / scale, gz / scale
    iu, iv = np.floor(u).astype(np.int64), np.floor(v).astype(np.int64)
    best = np.full(u.shape, np.inf)
    ident = np.zeros(u.shape, dtype=np.int64)
    for du in (-1, 0, 1):
        for dv in (-1, 0, 1):
            cu, cv = iu + du, iv + dv
            su = cu + 0.15 + 0.7 * hash01(cu, cv, 1)
            sv = cv + 0.15 + 0.7 * hash01(cu, cv, 2)
            d = (u - su) ** 2 + (v - sv) ** 2
            closer = d < best
            best[closer] = d[closer]
            ident[closer] = (cu * 7919 + cv)[closer]
    right = ident != np.roll(ident, -1, 1)
    down = ident != np.roll(ident, -1, 0)
    ridge = region & (right | down)
    near = gz < 22
    mid = (gz >= 22) & (gz < 40)
    c.fill(ridge & near, SAND)
    c.fill(np.roll(ridge & near & down, -1, 0) & region & ~ridge, WHITE)
    c.fill(ridge & mid, SAND, level=8)


def scene_flats():
    W, H = 320, 240
    c = Canvas(W, H)
    dash_y = 200

    # midday sky: deep blue at the top to a pale haze at the horizon
    c.gradient_rows(0, HORIZON, [DBLUE, BLUE, SKY, PSKY, HAZE])

    # fair-weather clouds with flat, shaded bellies
    def cumulus(x, y, w, h):
        m = np.zeros((H, W), dtype=bool)
        n = max(3, w // 9)
        for k in range(n):
            px_ = x + w * (k + 0.5) / n
            r = h * (0.55 + 0.45 * np.sin(np.pi * (k + 0.5) / n)) \
                * (0.85 + 0.3 * hash01(k, x, 5))
            m |= c.disc_mask(px_, y + h - r, r)
        m &= c.yy <= y + h
        c.fill(outline_mask(m) & (c.yy <= y + h + 1), PSKY)
        c.fill(m, WHITE)
        c.fill(m & (c.yy > y + h - 3), HAZE)
        c.fill(m & (c.yy > y + h - 6) & (c.yy <= y + h - 3), HAZE, level=8)
        c.fill(m & (c.yy == y + h), PSKY)
        return m
    cumulus(14, 22, 70, 18)
    cumulus(196, 12, 54, 14)
    cumulus(128, 58, 40, 10)
    cumulus(264, 74, 44, 9)

    # far mesas on the horizon: flat tops, banded cliffs, lit from the left
    for x0, x1, top in [(-6, 52, 122), (98, 136, 129), (170, 226, 118),
                        (238, 262, 131), (282, 330, 124)]:
        for xx in range(max(x0, 0), min(x1, W)):
            edge = min(xx - x0, x1 - 1 - xx)
            t = top + (0 if edge >= 4 else (4 - edge) * 2)
            t += int(hash01(xx // 2, top, 7) < 0.2)
            if t >= HORIZON:
                continue
            c.rect(xx, t, 1, HORIZON - t, MAUVE)
            if xx - x0 < 6:
                c.rect(xx, t, 1, HORIZON - t, ROSE)
            elif x1 - 1 - xx < 8:
                c.rect(xx, t, 1, HORIZON - t, PLUM)
            c.rect(xx, t, 1, 1, ROSE if x1 - 1 - xx >= 8 else MAUVE)
            for sy in range(t + 4, HORIZON - 4, 4):
                if hash01(xx // 5, sy, 8) < 0.7:
                    c.dot(xx, sy, RUST if x1 - 1 - xx >= 8 else DRED)
    hills = c.box_mask(0, 110, W, HORIZON - 110)
    far = hills & np.isin(c.px, [MAUVE, ROSE, PLUM, RUST, DRED])
    c.fill(far & (c.yy >= HORIZON - 6), PSKY, level=6)
    c.fill(far & (c.yy >= HORIZON - 3), HAZE, level=10)
    # a far town on the horizon
    for hx, hw, hh in [(146, 5, 4), (152, 4, 6), (157, 6, 3), (164, 3, 5)]:
        c.rect(hx, HORIZON - hh, hw, hh, GREY)
        c.dot(hx + 1, HORIZON - hh + 1, LGREY)
    c.rect(155, HORIZON - 10, 1, 4, GREY)

    # the salt pan
    ground = c.yy >= HORIZON
    c.fill(ground, SALT)
    c.fill(ground & (c.yy < HORIZON + 3), HAZE)
    c.fill(ground & (c.yy >= HORIZON + 3) & (c.yy < HORIZON + 6), HAZE, 8)
    gx, gz = ground_xz(c)

    # evaporation ponds: each its own colour, walled by earth dykes
    ponds = [(-11.0, -4.6, 8.0, 11.5, RED, DRED),
             (-4.0, 0.6, 8.0, 11.5, GREEN, DGREEN),
             (-13.0, -5.5, 12.5, 19.0, BLUE, DBLUE),
             (-5.0, 0.4, 12.5, 19.0, ROSE, MAUVE),
             (-16.0, -3.0, 20.0, 34.0, TEAL, DTEAL)]
    for x0, x1, z0, z1, col, dark in ponds:
        dyke = (gx >= x0 - 0.35) & (gx <= x1 + 0.35) & \
            (gz >= z0 - 0.4) & (gz <= z1 + 0.4) & ground
        water = (gx >= x0) & (gx <= x1) & (gz >= z0) & (gz <= z1) & ground
        c.fill(dyke, BROWN)
        c.fill(dyke & ~water & (gz < z0), OCHRE)          # sunlit near wall
        c.fill(water, col)
        c.fill(water & (gz > z1 - 0.9), dark)             # far wall shadow
        ripple = water & (hash01(c.yy, (c.xx // 3), 3) < 0.05) & \
            (gz < z1 - 0.9)
        c.fill(ripple, WHITE)
        c.fill(np.roll(ripple, 1, 1) & water & ~ripple, PSKY)

    dry = ground & (c.px == SALT)
    salt_crust(c, dry)

    # shadows of the clouds fall on the salt
    for sxw, szw, ax, az in [(-6.0, 6.5, 3.0, 1.2), (9.0, 15.0, 5.0, 2.5),
                             (-2.0, 30.0, 7.0, 4.0)]:
        sh = (((gx - sxw) / ax) ** 2 + ((gz - szw) / az) ** 2 <= 1) & ground
        c.remap(sh, {SALT: PSKY, SAND: SKY, WHITE: HAZE, HAZE: PSKY},
                level=8)

    # a cart track to the horizon, with marker posts and red flags
    for rx_ in (1.15, 1.75):
        xs0, ys0 = to_screen(rx_, 3.6)
        c.line([(xs0, ys0), (160, HORIZON + 1)], SAND)
        c.line([(xs0 + 1, ys0), (161, HORIZON + 1)], LGREY, level=6)
    for z in [4.2, 5.6, 7.5, 10.0, 13.5, 18.0, 25.0, 35.0]:
        px_, py_ = to_screen(2.5, z)
        hgt = max(2, int(round(1.1 * GROUND_F / z / 4)))
        px_, py_ = int(round(px_)), int(round(py_))
        c.rect(px_, py_ - hgt, 1, hgt + 1, BROWN)
        c.dot(px_ + 1, py_, SAND)
        if hgt >= 4:
            fw = max(2, hgt // 3)
            c.rect(px_ + 1, py_ - hgt, fw, max(1, hgt // 4), RED)

    # heaps of raked salt waiting for the carts
    for hx_, hz_, size in [(-3.4, 6.2, 1.0), (-1.2, 5.0, 1.2),
                           (-2.2, 5.6, 0.8), (0.1, 6.8, 0.9)]:
        sx_, sy_ = to_screen(hx_, hz_)
        sx_, sy_ = int(round(sx_)), int(round(sy_))
        hw = int(round(size * 260 / hz_ / 3))
        hh = int(round(hw * 0.75))
        c.poly([(sx_ - 2, sy_ + 1), (sx_ + hw + 6, sy_ + 1),
                (sx_ + hw + 2, sy_ - 1), (sx_, sy_ - 1)], SAND, level=8)
        cone = c.poly_mask([(sx_ - hw, sy_), (sx_ - 1, sy_ - hh),
                            (sx_ + 1, sy_ - hh), (sx_ + hw, sy_)])
        c.fill(outline_mask(cone) & (c.yy <= sy_), LGREY)
        c.fill(cone, WHITE)
        c.fill(cone & (c.xx > sx_ + 1), LGREY)
        c.fill(cone & (c.xx == sx_ + 1), HAZE)
        c.fill(cone & (c.yy == sy_) & (c.xx > sx_ - hw + 1), SAND)

    # a wind pump and a brine tank beside the ponds
    wpx, wpy = 22, 163
    c.rect(wpx + 8, wpy - 9, 12, 9, DGREY)
    c.rect(wpx + 8, wpy - 9, 12, 1, LGREY)
    c.rect(wpx + 8, wpy - 9, 2, 9, GREY)
    c.rect(wpx + 8, wpy - 5, 12, 1, BLACK)
    c.line([(wpx - 4, wpy), (wpx - 1, wpy - 22)], DGREY)
    c.line([(wpx + 4, wpy), (wpx + 1, wpy - 22)], DGREY)
    for yy in (wpy - 6, wpy - 13):
        c.line([(wpx - 3, yy), (wpx + 3, yy - 6)], GREY)
        c.line([(wpx + 3, yy), (wpx - 3, yy - 6)], GREY)
    rx_, ry_ = wpx, wpy - 25
    for k in range(12):
        t = k * np.pi / 6 + 0.1
        c.line([(rx_ + 2 * np.cos(t), ry_ + 2 * np.sin(t)),
                (rx_ + 7 * np.cos(t), ry_ + 7 * np.sin(t))],
               GREY if k % 2 else DGREY)
    c.disc(rx_, ry_, 1, BLACK)
    c.line([(rx_ + 1, ry_), (rx_ + 9, ry_)], DGREY)
    c.poly([(rx_ + 8, ry_ - 3), (rx_ + 12, ry_ - 3), (rx_ + 12, ry_ + 1),
            (rx_ + 8, ry_)], RED)
    c.fill(c.box_mask(wpx - 6, wpy, 28, 2) & (c.px == SALT), SAND)

    # Halven relay tower: a timber lattice with a hut, lamp and windsock
    base, top = 176, 84
    lx0, lx1, rx0, rx1 = 250, 262, 298, 286
    for k in range(4):
        y0 = base - (base - top) * k / 4
        y1 = base - (base - top) * (k + 1) / 4
        xl0 = lx0 + (lx1 - lx0) * k / 4
        xl1 = lx0 + (lx1 - lx0) * (k + 1) / 4
        xr0 = rx0 + (rx1 - rx0) * k / 4
        xr1 = rx0 + (rx1 - rx0) * (k + 1) / 4
        c.line([(xl0, y0), (xr1, y1)], BROWN)
        c.line([(xr0, y0), (xl1, y1)], BROWN)
        c.line([(xl1, y1), (xr1, y1)], DBROWN)
    for a, b in [((lx0, base), (lx1, top)), ((rx0, base), (rx1, top))]:
        c.line([a, b], DBROWN)
        c.line([(a[0] + 1, a[1]), (b[0] + 1, b[1])], OCHRE)
    c.fill(c.box_mask(244, base - 1, 60, 3) & (c.px == SALT), SAND)
    # platform and hut
    c.rect(252, top - 2, 44, 3, DBROWN)
    c.rect(252, top - 2, 44, 1, OCHRE)
    for px_ in range(253, 296, 5):
        c.rect(px_, top - 8, 1, 6, DBROWN)
    c.rect(252, top - 8, 44, 1, BROWN)
    c.rect(262, top - 22, 24, 20, BLACK)
    c.rect(263, top - 21, 22, 19, SAND)
    c.rect(263, top - 21, 1, 19, SALT)
    for py_ in range(top - 19, top - 2, 3):
        c.rect(264, py_, 21, 1, OCHRE)
    c.rect(270, top - 17, 8, 7, BLACK)
    c.rect(271, top - 16, 6, 5, YELLOW)
    c.rect(271, top - 16, 2, 2, PYELLOW)
    c.rect(274, top - 16, 1, 5, ORANGE)
    for i in range(16):
        c.rect(258 + i, top - 22 - i // 2, 32 - 2 * i, 1,
               RUST if i % 2 else DRED)
    c.rect(258, top - 22, 32, 1, BLACK)
    # lamp on the roof ridge
    c.rect(273, top - 35, 3, 4, BLACK)
    c.rect(274, top - 34, 1, 2, WHITE)
    c.disc(274, top - 33, 4, PYELLOW, level=4)
    c.dot(274, top - 33, WHITE)
    # windsock: pole and a red and white striped cone blowing east
    c.rect(295, top - 34, 1, 26, DGREY)
    c.rect(294, top - 35, 3, 1, DGREY)
    for i in range(16):
        hh = 6 - i // 4
        col = RED if (i // 4) % 2 == 0 else WHITE
        c.rect(296 + i, top - 33 + (6 - hh) // 2 + i // 6, 1, hh, col)
    # sign board under the platform
    c.rect(251, top + 2, 46, 11, BLACK)
    c.rect(252, top + 3, 44, 9, SALT)
    c.rect(252, top + 11, 44, 1, SAND)
    c.text(254, top + 5, "HALVEN", DBLUE, font=FONT3X5)
    c.text(280, top + 5, "POST", DRED, font=FONT3X5)

    # a dust devil whirling across the far salt
    for yy in range(92, 152):
        t = (152 - yy) / 60.0
        cx_ = 206 + 4 * np.sin(yy / 5.0) + 10 * t
        half = 2 + 9 * t ** 1.4
        row = (c.xx[yy] >= cx_ - half) & (c.xx[yy] <= cx_ + half)
        m = np.zeros((H, W), dtype=bool)
        m[yy] = row
        lvl = 10 if t < 0.6 else 6 if t < 0.85 else 3
        c.fill(m, SAND, level=lvl)
        c.fill(m & ((c.xx - int(cx_ - half)) == 0), LGREY)
        if hash01(yy, 5, 25) < 0.3:
            c.fill(m & (c.xx > cx_) & (c.xx < cx_ + half - 1), SALT, 8)
    c.fill(c.ellipse_mask(206, 152, 8, 2), SAND, level=8)

    # terns
    tern(c, 214, 48, DGREY, True)
    tern(c, 228, 56, DGREY, False)
    tern(c, 204, 62, GREY, True)

    # Imke, running before the wind with the day's parcels
    for k in range(14):                            # dust from the wheels
        dx = 20 + k * 4 + int(hash01(k, 1, 26) * 3)
        dy = int(hash01(k, 2, 26) * 4)
        c.disc(180 - dx, 191 - dy - k // 3, 1 + k // 4, SAND,
               level=max(2, 10 - k // 2))
    land_yacht(c, 180, 195, [TEAL, SALT, OCHRE, RED, SALT, TEAL],
               shadow=SAND, size=1.4)

    # ---------------------------------------------------------------
    # dashboard across the bottom
    c.rect(0, dash_y, W, H - dash_y, DBROWN)
    for gy_ in range(dash_y + 3, H, 4):
        for gx_ in range(0, W, 1):
            if hash01(gx_ // 7, gy_, 9) < 0.35:
                c.dot(gx_, gy_, BROWN)
    c.rect(0, dash_y, W, 1, BLACK)
    c.rect(0, dash_y + 1, W, 1, OCHRE)
    c.rect(0, dash_y + 2, W, 1, BROWN)

    def brass_ring(cx, cy, r):
        c.disc(cx, cy, r + 1, BLACK)
        c.disc(cx, cy, r, OCHRE)
        c.fill(c.disc_mask(cx, cy, r) & ~c.disc_mask(cx + 1, cy + 1, r),
               YELLOW)
        c.disc(cx, cy, r - 2, BLACK)
        c.disc(cx, cy, r - 3, NAVY)

    # wind compass: the wind comes from the west
    wcx, wcy = 20, 220
    brass_ring(wcx, wcy, 16)
    for k in range(16):
        t = k * np.pi / 8
        rr = 12 if k % 4 else 10
        c.dot(int(round(wcx + np.cos(t) * rr)),
              int(round(wcy + np.sin(t) * rr)), LGREY if k % 4 else WHITE)
    c.stamp(wcx - 1, wcy - 11, text_mask("N", FONT3X5), CYAN)
    c.line([(wcx - 8, wcy - 1), (wcx + 8, wcy + 1)], RED)
    c.line([(wcx - 8, wcy), (wcx + 7, wcy + 2)], DRED)
    c.poly([(wcx + 10, wcy + 1), (wcx + 6, wcy - 2), (wcx + 6, wcy + 4)], RED)
    c.rect(wcx, wcy, 2, 2, WHITE)

    # sail trim meter
    c.rect(41, 205, 9, 31, BLACK)
    c.rect(42, 206, 7, 29, NAVY)
    for ty in range(207, 235, 4):
        c.rect(42, ty, 2, 1, GREY)
    c.rect(42, 220, 7, 1, WHITE)
    c.rect(44, 211, 4, 9, GREEN)
    c.rect(44, 211, 4, 1, LICHEN)
    c.text(53, 206, "SAIL", LGREY, font=FONT3X5)
    c.text(53, 213, "FULL", GREEN, font=FONT3X5)
    c.text(53, 222, "KM/H", LGREY, font=FONT3X5)
    c.text(53, 229, "38", WHITE, font=FONT3X5)

    # parcel manifest pinned to the dash
    mx, my, mw, mh = 78, 204, 124, 33
    c.rect(mx + 2, my + 2, mw, mh, BLACK)
    c.rect(mx, my, mw, mh, SALT)
    c.rect(mx, my + mh - 1, mw, 1, SAND)
    c.rect(mx + mw - 1, my, 1, mh, SAND)
    c.text(mx + 4, my + 3, "MANIFEST", DRED, font=FONT3X5)
    c.text(mx + 74, my + 3, "3 PARCELS", GREY, font=FONT3X5)
    c.rect(mx + 4, my + 9, mw - 8, 1, ROSE)
    rows = [("SEED SACK", "HALVEN", True), ("TEA CHEST", "OSKEL", False),
            ("LETTERS X4", "BRIMMER WELL", False)]
    for i, (what, where, done) in enumerate(rows):
        ry = my + 12 + i * 7
        c.frame(mx + 4, ry, 5, 5, DGREY)
        if done:
            c.line([(mx + 5, ry + 2), (mx + 6, ry + 3), (mx + 9, ry - 1)],
                   GREEN)
        c.text(mx + 12, ry, what, DBROWN if not done else GREY,
               font=FONT3X5)
        c.text(mx + mw - 4 - text_width(where, FONT3X5), ry, where,
               DBLUE, font=FONT3X5)
    c.rect(mx + mw // 2 - 2, my - 1, 5, 3, RED)      # pin
    c.dot(mx + mw // 2 - 1, my - 1, PYELLOW)

    # sun arc: where the sun is in the day
    ax_, ay_ = 232, 228
    c.fill(c.box_mask(208, 205, 49, 31), BLACK)
    c.fill(c.box_mask(209, 206, 47, 29), NAVY)
    c.fill(c.box_mask(209, 206, 47, 22) & (c.yy < ay_), DBLUE, level=8)
    arc = c.disc_mask(ax_, ay_, 18) & ~c.disc_mask(ax_, ay_, 17) & \
        (c.yy <= ay_)
    c.fill(arc, SKY, level=8)
    c.fill(c.box_mask(209, ay_, 47, 1), OCHRE)
    t = np.deg2rad(-120)
    sx_, sy_ = int(round(ax_ + 17.5 * np.cos(t))), \
        int(round(ay_ + 17.5 * np.sin(t)))
    c.disc(sx_, sy_, 3, YELLOW)
    c.dot(sx_ - 1, sy_ - 1, WHITE)
    c.text(211, 230, "DAY 3", LGREY, font=FONT3X5)
    c.text(234, 230, "11:40", WHITE, font=FONT3X5)

    # water flask
    fx, fy = 270, 205
    c.rect(fx + 4, fy, 6, 3, DGREY)
    c.rect(fx + 5, fy, 4, 1, LGREY)
    c.rect(fx, fy + 3, 14, 28, BLACK)
    c.rect(fx + 1, fy + 4, 12, 26, DGREY)
    c.rect(fx + 1, fy + 14, 12, 16, BLUE)
    c.rect(fx + 1, fy + 14, 12, 1, SKY)
    c.rect(fx + 2, fy + 15, 1, 13, SKY)
    c.rect(fx + 11, fy + 5, 1, 24, GREY)
    c.text(fx + 18, fy + 2, "WATER", LGREY, font=FONT3X5)
    c.text(fx + 18, fy + 10, "3/5", WHITE, font=FONT3X5)
    c.text(fx + 18, fy + 19, "WIND", LGREY, font=FONT3X5)
    c.text(fx + 18, fy + 26, "W 12", ORANGE, font=FONT3X5)
    return c


# --------------------------------------------------------------------------
# Scene 2: the sorting loft of Halven Post at dusk, 256x224
# --------------------------------------------------------------------------

# Imke on foot, facing right: bun, goggles pushed up, teal scarf, belted
# ochre coat, a satchel on her hip, mauve trousers and boots.
COURIER = art([
    ".....KKKKK........",
    "...KKnnnnnKK......",
    "..KnnnnnnnnnK.....",
    ".KnnnKkkkkCCCK....",
    "KnnnKnnkCCWCCCK...",
    "KnnnKnnnkCCCCkK...",
    "KnnnKnnnnnnnnnnK..",
    ".KKKnnnnnsssssnK..",
    "...KnnnssssssssK..",
    "...KnnsssKsssKsK..",
    "...KnssssKsssKssK.",
    "....KsssssssssssK.",
    "....KKssiisssiiK..",
    ".....KKsssssrsK...",
    "....KTTKKKKTK.....",
    "...KTTTTTTTTTK....",
    "..KTCCTTTTTTTTK...",
    ".KaKTTCTTTTKaaaK..",
    "KaaaKTTTTKaaaaaaK.",
    "KaaaKTTTKaaaaaaaK.",
    "KaaaKTTKaaaaaaaaK.",
    "KaBaKTTKaaaaaBaaK.",
    "KaBaKTKaaaaaaBaaK.",
    "KaBaKKaaaaaaaBaaK.",
    "KssKaaaaaaaaaBaK..",
    "KssKbbbbbbbbbbbK..",
    ".KKKbbYbbbbbbbbK..",
    "...KaaaaKaaBBBBBK.",
    "...KaaaaKaaBttBBK.",
    "...KaaaKvKaBBBBBK.",
    "....KKKvvvKKKKKK..",
    "....KvvvKvvvK.....",
    "....KvvvKvvvK.....",
    "....KvvvKKvvvK....",
    "....KvvvK.KvvK....",
    "....KvvK..KvvvK...",
    "...KbbbK..KbbbK...",
    "...KbbbbK.KbbbbK..",
    "...KKKKKK.KKKKKK..",
])

# Hasp the post clerk, seen above the counter: a tall old man with a teal
# eyeshade, white side hair, round spectacles, a grey cardigan, a red bow.
CLERK = art([
    "......KKKKKKKKK.......",
    "....KKxxxxxxxxxKK.....",
    "...KTTTTTTTTTTTTTK....",
    "..KTCCCCCCCCCCCCCTK...",
    "...KKKKKKKKKKKKKKK....",
    "...KWWBBBBBBBBBWWK....",
    "..KWWWBBBBBBBBBBWWK...",
    "..KWWKKKKBBBKKKKWWK...",
    "..KWKEWEEKBKEWEEKWK...",
    "...KBKEEEKKKEEEKBK....",
    "...KBBKKKBBBKKKBBK....",
    "....KBBBBBbBBBBBK.....",
    "....KBBBBbbBBBBBK.....",
    ".....KBBBrrBBBK.......",
    "......KKBBBBKK........",
    "....KKKWWRRWWKKK......",
    "...KeeKWRRRRWKeeK.....",
    "..KeeeeKWRRWKeeeeK....",
    ".KeeeeeKWWWWKeeeeeK...",
    ".KeeEeeeKWWKeeeEeeK...",
    "KeeeEeeeKWWKeeeEeeeK..",
    "KeeeEeeeeKKeeeeEeeeK..",
    "KeeeEeeeeYeeeeeEeeeK..",
    "KeeKEeeeeeeeeeeEKeeK..",
    "KeeKEeeeeYeeeeeEKeeK..",
    "KeeKEeeeeeeeeeeEKeeK..",
    "KBBKEeeeeeeeeeeEKBBK..",
    "KBBKEeeeeYeeeeeEKBBK..",
    "KKKKEeeeeeeeeeeEKKKK..",
])


def scene_loft():
    W, H = 256, 224
    c = Canvas(W, H, DBROWN)
    wall_y = 152          # where the back wall meets the floor
    counter_y = 156       # top of the counter (it runs from x = 96)
    floor_y = 178

    # plaster wall with a timber frame
    c.rect(0, 0, W, wall_y, SAND)
    for yy in range(0, wall_y, 2):
        for xx in range(0, W):
            if hash01(xx // 3, yy, 11) < 0.08:
                c.dot(xx, yy, OCHRE)
    c.rect(0, 0, W, 12, DBROWN)                 # ceiling beam
    c.rect(0, 11, W, 1, BLACK)
    c.rect(0, 2, W, 1, BROWN)
    for bx in range(8, W, 40):                  # joist ends
        c.rect(bx, 4, 10, 6, BROWN)
        c.rect(bx, 4, 10, 1, OCHRE)
        c.rect(bx + 9, 4, 1, 6, BLACK)
    for px_ in (0, 104):                        # posts
        c.rect(px_, 12, 8, wall_y - 12, BROWN)
        c.rect(px_, 12, 2, wall_y - 12, OCHRE)
        c.rect(px_ + 7, 12, 1, wall_y - 12, DBROWN)
    c.rect(8, 122, 96, 5, BROWN)                # dado rail
    c.rect(8, 122, 96, 1, OCHRE)
    c.rect(8, 126, 96, 1, DBROWN)
    for bx in range(16, 104, 12):               # panelling below
        c.rect(bx, 127, 1, wall_y - 127, BROWN)
    c.rect(8, wall_y - 3, 96, 3, DBROWN)        # skirting

    # floor boards
    c.rect(0, wall_y, W, floor_y - wall_y, BROWN)
    for yy, col in [(wall_y, DBROWN), (wall_y + 1, BLACK),
                    (wall_y + 7, DBROWN), (wall_y + 15, DBROWN)]:
        c.rect(0, yy, W, 1, col)
    for k in range(12):
        yy = [wall_y + 2, wall_y + 8, wall_y + 16][k % 3]
        hgt = [5, 7, 9][k % 3]
        xx = int(hash01(k, 3, 15) * W)
        c.rect(xx, yy, 1, hgt, DBROWN)
        c.rect(xx + 1, yy, 1, hgt, OCHRE)
    c.fill(c.box_mask(0, wall_y + 2, W, 4), DBROWN, level=6)

    # window onto the flats at dusk
    wx, wy, ww, wh = 22, 28, 66, 78
    c.rect(wx - 3, wy - 3, ww + 6, wh + 6, DBROWN)
    c.rect(wx - 2, wy - 2, ww + 4, wh + 4, BROWN)
    hz = wy + 60
    c.gradient_rows(wy, hz, [PLUM, MAUVE, ROSE, ORANGE, YELLOW, PYELLOW],
                    x0=wx, x1=wx + ww)
    c.rect(wx, hz, ww, wh - 60, MAUVE)
    c.fill(c.box_mask(wx, hz + 4, ww, wh - 64), PLUM, level=8)
    c.fill(c.box_mask(wx, hz + 10, ww, wh - 70), PLUM)
    sun = c.disc_mask(wx + 44, hz, 7) & (c.yy < hz)
    c.fill(sun, WHITE)
    c.rect(wx, hz, ww, 1, ROSE)
    c.rect(wx + 35, hz + 1, 19, 1, PYELLOW)
    c.rect(wx + 39, hz + 3, 11, 1, YELLOW)
    c.rect(wx + 41, hz + 6, 7, 1, ORANGE)
    # the relay tower far off, terns, the first stars
    for k in range(2):
        c.line([(wx + 9 + k * 11, hz), (wx + 13 + k * 3, hz - 18)], PLUM)
    c.line([(wx + 10, hz - 4), (wx + 18, hz - 12)], PLUM)
    c.line([(wx + 19, hz - 4), (wx + 11, hz - 12)], PLUM)
    c.rect(wx + 10, hz - 24, 10, 6, PLUM)
    c.poly([(wx + 9, hz - 24), (wx + 15, hz - 28), (wx + 21, hz - 24)],
           PLUM)
    c.dot(wx + 15, hz - 30, YELLOW)
    c.dot(wx + 14, hz - 21, ORANGE)
    tern(c, wx + 50, wy + 22, PLUM, True)
    tern(c, wx + 30, wy + 30, PLUM, False)
    for sx_, sy_, col in [(wx + 10, wy + 6, WHITE), (wx + 30, wy + 3, PSKY),
                          (wx + 58, wy + 9, PYELLOW), (wx + 48, wy + 4,
                                                        WHITE)]:
        c.dot(sx_, sy_, col)
    # glazing bars
    for k in (1, 2):
        c.rect(wx + ww * k // 3 - 1, wy, 2, wh, DBROWN)
    c.rect(wx, wy + wh // 2 - 1, ww, 2, DBROWN)
    c.rect(wx - 5, wy + wh + 2, ww + 10, 4, BROWN)    # sill
    c.rect(wx - 5, wy + wh + 2, ww + 10, 1, OCHRE)
    c.rect(wx - 5, wy + wh + 5, ww + 10, 1, BLACK)
    # a pot of samphire on the sill
    c.rect(wx + 4, wy + wh - 4, 9, 6, RUST)
    c.rect(wx + 4, wy + wh - 4, 9, 1, ORANGE)
    c.rect(wx + 11, wy + wh - 3, 1, 5, DRED)
    for k in range(6):
        c.line([(wx + 6 + k, wy + wh - 5),
                (wx + 4 + k * 2 - 1, wy + wh - 12 + (k % 2) * 2)], GREEN)
    c.dot(wx + 5, wy + wh - 12, LICHEN)
    c.dot(wx + 13, wy + wh - 10, LICHEN)

    # the painted sign over the pigeonholes
    c.rect(124, 15, 116, 11, DBROWN)
    c.rect(125, 16, 114, 9, DTEAL)
    c.rect(125, 16, 114, 1, TEAL)
    c.text(130, 18, "HALVEN POST", SALT)
    c.text(130 + text_width("HALVEN POST "), 18, "LOFT", OCHRE)

    # pigeonhole cabinet
    cx0, cy0, cols, rows_, cw, ch = 122, 30, 10, 8, 12, 10
    cwid, chgt = cols * cw + 1, rows_ * ch + 1
    c.rect(cx0 - 3, cy0 - 2, cwid + 6, chgt + 4, DBROWN)
    c.rect(cx0 - 3, cy0 - 2, cwid + 6, 1, OCHRE)
    inks = [RED, BLUE, GREEN, RED, BLUE, MAGENTA]
    for r in range(rows_):
        for k in range(cols):
            x0, y0 = cx0 + k * cw, cy0 + r * ch
            c.rect(x0, y0, cw + 1, ch + 1, BROWN)
            c.rect(x0 + 1, y0 + 1, cw - 1, ch - 2, BLACK)
            c.rect(x0 + 1, y0 + ch - 1, cw - 1, 1, OCHRE)
            kind = int(hash01(r, k, 12) * 6)
            if kind == 0:
                continue                       # an empty box
            if kind in (1, 2, 3):              # a stack of letters
                n = 1 + kind
                for j in range(n):
                    ly = y0 + ch - 2 - j * 2
                    lx = x0 + 2 + (j % 2)
                    c.rect(lx, ly - 1, cw - 5, 1, SALT if j % 2 else HAZE)
                    c.rect(lx, ly, cw - 5, 1, LGREY)
                    c.dot(lx + cw - 7, ly - 1,
                          inks[int(hash01(r * 8 + k, j, 13) * 6)])
            elif kind == 4:                    # an envelope standing up
                col = [SALT, SKY, ROSE][int(hash01(r, k, 16) * 3)]
                c.rect(x0 + 3, y0 + 2, 6, 7, col)
                c.line([(x0 + 3, y0 + 2), (x0 + 5, y0 + 4), (x0 + 6, y0 + 4),
                        (x0 + 8, y0 + 2)], LGREY if col == SALT else WHITE)
                c.dot(x0 + 5, y0 + 5, inks[int(hash01(r, k, 14) * 3)])
            else:                              # a parcel tied with string
                c.rect(x0 + 2, y0 + 3, cw - 4, 6, OCHRE)
                c.rect(x0 + 2, y0 + 3, cw - 4, 1, SAND)
                c.rect(x0 + 6, y0 + 3, 1, 6, RUST)
                c.rect(x0 + 2, y0 + 6, cw - 4, 1, RUST)
    # brass label plates with town initials under each column
    towns = "HOBSMAKTRE"
    c.rect(cx0 - 3, cy0 + chgt, cwid + 6, 9, DBROWN)
    for k, ch_ in enumerate(towns):
        x0 = cx0 + k * cw
        c.rect(x0 + 3, cy0 + chgt + 1, 7, 7, OCHRE)
        c.rect(x0 + 3, cy0 + chgt + 1, 7, 1, YELLOW)
        c.text(x0 + 5, cy0 + chgt + 2, ch_, DBROWN, font=FONT3X5)

    # route chart pinned beside the cabinet (bottom right of the wall)
    mx_, my_ = 200, 122
    c.rect(mx_, my_, 44, 24, SALT)
    c.rect(mx_, my_ + 23, 44, 1, SAND)
    c.rect(mx_ + 43, my_, 1, 24, SAND)
    c.poly([(mx_ + 3, my_ + 20), (mx_ + 12, my_ + 8), (mx_ + 20, my_ + 16),
            (mx_ + 30, my_ + 5), (mx_ + 40, my_ + 12), (mx_ + 40, my_ + 21),
            (mx_ + 3, my_ + 21)], SAND)
    c.rect(mx_ + 24, my_ + 14, 12, 6, SKY)        # a pond
    route = [(mx_ + 5, my_ + 19), (mx_ + 14, my_ + 13), (mx_ + 22, my_ + 18),
             (mx_ + 31, my_ + 9), (mx_ + 39, my_ + 6)]
    for (x0, y0), (x1, y1) in zip(route, route[1:]):
        n = int(max(abs(x1 - x0), abs(y1 - y0)))
        for t in range(0, n, 2):
            c.dot(int(x0 + (x1 - x0) * t / n), int(y0 + (y1 - y0) * t / n),
                  RED)
    for x0, y0 in (route[0], route[-1]):
        c.rect(x0 - 1, y0 - 1, 3, 3, DBLUE)
    c.text(mx_ + 2, my_ + 2, "ROUTE", DBROWN, font=FONT3X5)
    c.rect(mx_ + 20, my_ - 1, 3, 3, RED)          # pin

    # a spare sail, rolled on its spar, leaning in the corner
    bag = c.poly_mask([(9, wall_y), (15, wall_y), (33, 18), (28, 17)])
    c.fill(outline_mask(bag), BLACK)
    c.fill(bag, TEAL)
    edge = bag & ~np.roll(bag, 2, 1)
    c.fill(edge, CYAN)
    c.fill(bag & ~np.roll(bag, -2, 1), DTEAL)
    for yy in (46, 92, 132):
        t = (wall_y - yy) / (wall_y - 17)
        bx = 9 + 19 * t
        c.rect(int(bx) - 1, yy, 9, 2, DBROWN)
        c.rect(int(bx) - 1, yy, 9, 1, OCHRE)
    c.rect(13, 96, 4, 5, RED)                      # tag
    c.rect(14, 97, 2, 1, SALT)

    # hanging oil lamp and its warm light
    lampx, lampy = 110, 46
    warm = {SAND: PYELLOW, OCHRE: SAND, BROWN: OCHRE, DBROWN: BROWN,
            BLACK: DBROWN, RUST: ORANGE, SALT: PYELLOW, DTEAL: TEAL}
    c.remap(c.disc_mask(lampx, lampy, 46), warm, level=4)
    c.remap(c.disc_mask(lampx, lampy, 32), warm, level=8)
    c.remap(c.disc_mask(lampx, lampy, 18), warm)
    c.rect(lampx, 12, 1, lampy - 21, DGREY)
    c.rect(lampx - 4, lampy - 9, 9, 3, DGREY)
    c.rect(lampx - 3, lampy - 10, 7, 1, GREY)
    c.rect(lampx - 4, lampy - 6, 9, 10, BLACK)
    c.rect(lampx - 3, lampy - 5, 7, 8, YELLOW)
    c.rect(lampx - 1, lampy - 4, 3, 6, PYELLOW)
    c.rect(lampx, lampy - 3, 1, 3, WHITE)
    c.rect(lampx - 4, lampy + 3, 9, 3, OCHRE)
    c.rect(lampx - 4, lampy + 3, 9, 1, YELLOW)

    # the clerk behind the counter
    c.blit(150, counter_y - CLERK.shape[0] + 2, CLERK)

    # counter
    c.rect(96, counter_y, W - 96, 5, OCHRE)
    c.rect(96, counter_y, W - 96, 1, PYELLOW)
    c.rect(96, counter_y + 4, W - 96, 1, DBROWN)
    c.rect(96, counter_y + 5, W - 96, floor_y - counter_y - 5, BROWN)
    c.rect(96, counter_y, 1, floor_y - counter_y, DBROWN)
    for bx in range(100, W, 26):
        c.frame(bx, counter_y + 8, 22, floor_y - counter_y - 12, DBROWN)
        c.rect(bx + 1, counter_y + 9, 20, 1, OCHRE)
    c.fill(c.box_mask(96, counter_y + 5, W, 3), DBROWN, level=8)

    # on the counter: a brass scale with a parcel, a ledger, ink, a stamp
    sx_, sy_ = 124, counter_y
    c.rect(sx_ - 9, sy_ - 3, 20, 3, BLACK)
    c.rect(sx_ - 8, sy_ - 3, 18, 2, OCHRE)
    c.rect(sx_ - 8, sy_ - 3, 18, 1, YELLOW)
    c.disc(sx_ + 1, sy_ - 9, 5, BLACK)
    c.disc(sx_ + 1, sy_ - 9, 4, SALT)
    c.line([(sx_ + 1, sy_ - 9), (sx_ + 4, sy_ - 11)], RED)
    c.dot(sx_ + 1, sy_ - 12, DGREY)
    c.dot(sx_ - 2, sy_ - 9, DGREY)
    c.dot(sx_ + 4, sy_ - 9, DGREY)
    c.rect(sx_ - 10, sy_ - 16, 23, 2, YELLOW)
    c.rect(sx_ - 10, sy_ - 15, 23, 1, OCHRE)
    c.rect(sx_ - 7, sy_ - 25, 17, 9, BLACK)
    c.rect(sx_ - 6, sy_ - 24, 15, 7, OCHRE)
    c.rect(sx_ - 6, sy_ - 24, 15, 1, SAND)
    c.rect(sx_ + 1, sy_ - 24, 1, 7, RUST)
    c.rect(sx_ - 6, sy_ - 21, 15, 1, RUST)
    c.rect(sx_ - 5, sy_ - 23, 4, 2, SALT)
    # ledger
    lx_, ly_ = 178, counter_y - 4
    c.poly([(lx_, ly_ + 4), (lx_ + 4, ly_ - 4), (lx_ + 30, ly_ - 4),
            (lx_ + 28, ly_ + 4)], SALT)
    c.poly([(lx_ + 28, ly_ + 4), (lx_ + 30, ly_ - 4), (lx_ + 56, ly_ - 4),
            (lx_ + 56, ly_ + 4)], HAZE)
    c.line([(lx_, ly_ + 4), (lx_ + 56, ly_ + 4)], DGREY)
    c.line([(lx_ + 28, ly_ + 4), (lx_ + 30, ly_ - 4)], LGREY)
    for k in range(3):
        yy = ly_ - 2 + k * 2
        c.line([(lx_ + 6 - k, yy), (lx_ + 26 - k, yy)], DBLUE)
        c.line([(lx_ + 33, yy), (lx_ + 53, yy)], GREY)
    c.rect(lx_ + 6, ly_ - 2, 3, 1, RED)
    # ink pot and pen
    c.rect(100, counter_y - 6, 7, 6, BLACK)
    c.rect(101, counter_y - 5, 5, 4, DBLUE)
    c.rect(102, counter_y - 8, 3, 2, DGREY)
    c.line([(104, counter_y - 7), (110, counter_y - 19)], WHITE)
    c.line([(105, counter_y - 7), (111, counter_y - 19)], LGREY)
    # a rubber stamp
    c.rect(236, counter_y - 3, 10, 3, RED)
    c.rect(236, counter_y - 3, 10, 1, ORANGE)
    c.rect(239, counter_y - 9, 4, 6, BROWN)
    c.rect(238, counter_y - 12, 6, 3, DBROWN)

    # a blue mail sack on the floor, and Imke, just in
    sack = c.poly_mask([(70, floor_y - 1), (89, floor_y - 1), (92, 169),
                        (90, 161), (84, 156), (75, 156), (69, 161),
                        (67, 169)])
    c.poly([(75, 149), (78, 152), (80, 152), (84, 148), (83, 155),
            (76, 155)], SKY)
    c.fill(outline_mask(sack), BLACK)
    c.fill(sack, BLUE)
    c.fill(sack & (c.xx > 86), DBLUE)
    c.fill(sack & (c.xx < 72), SKY)
    c.line([(79, 158), (77, 176)], DBLUE)          # folds
    c.line([(84, 159), (86, 175)], DBLUE)
    c.rect(75, 154, 9, 2, OCHRE)                   # the tie
    c.rect(75, 154, 9, 1, YELLOW)
    c.rect(70, 167, 19, 2, RED)
    c.rect(70, 167, 19, 1, ORANGE)
    c.blit(40, floor_y - COURIER.shape[0], COURIER)

    # dialogue box
    bx_, by_, bw_, bh_ = 6, 180, 244, 40
    c.rect(0, floor_y, W, H - floor_y, DBROWN)
    c.rect(bx_ + 2, by_ + 2, bw_, bh_, BLACK)
    c.rect(bx_, by_, bw_, bh_, NAVY)
    c.frame(bx_, by_, bw_, bh_, SALT)
    c.frame(bx_ + 1, by_ + 1, bw_ - 2, bh_ - 2, OCHRE)
    c.frame(bx_ + 2, by_ + 2, bw_ - 4, bh_ - 4, BLACK)
    c.rect(bx_ + 8, by_ - 5, 26, 9, BLACK)
    c.rect(bx_ + 9, by_ - 4, 24, 7, TEAL)
    c.text(bx_ + 13, by_ - 3, "HASP", SALT, font=FONT3X5)
    c.text(bx_ + 8, by_ + 8, "THREE FOR OSKEL BEFORE THE", WHITE)
    c.text(bx_ + 8, by_ + 18, "LAMPS ARE LIT. MIND THE", WHITE)
    c.text(bx_ + 8 + text_width("LAMPS ARE LIT. MIND THE "), by_ + 18,
           "GUSTS.", ORANGE)
    c.text(bx_ + 8, by_ + 29, "WEIGHT 6.5 KG", LGREY, font=FONT3X5)
    c.text(bx_ + 70, by_ + 29, "PAY 14 SHELLS", YELLOW, font=FONT3X5)
    c.poly([(bx_ + bw_ - 14, by_ + bh_ - 9), (bx_ + bw_ - 8, by_ + bh_ - 9),
            (bx_ + bw_ - 11, by_ + bh_ - 6)], SALT)
    return c


# --------------------------------------------------------------------------
# Scene 3: evening approach to Oskel harbour, 384x224 (wide)
# --------------------------------------------------------------------------

def scene_harbour():
    W, H = 384, 224
    c = Canvas(W, H, NAVY)
    rng = np.random.default_rng(384224)
    sea_y = 146
    sun_x = 236

    # dusk sky
    c.gradient_rows(0, sea_y, [NAVY, PLUM, MAUVE, ROSE, ORANGE, YELLOW])
    for _ in range(70):
        sx_, sy_ = int(rng.integers(0, W)), int(rng.integers(0, 40))
        if c.px[sy_, sx_] in (NAVY, PLUM):
            c.px[sy_, sx_] = [LGREY, WHITE, PSKY][int(rng.integers(0, 3))]
    # the sun, half set, with a dithered glow
    warmer = {MAUVE: ROSE, ROSE: ORANGE, ORANGE: YELLOW, YELLOW: PYELLOW}
    sky = c.yy < sea_y
    for r, lvl in [(70, 4), (52, 8), (36, 12)]:
        c.remap(sky & c.ellipse_mask(sun_x, sea_y, r * 1.3, r), warmer,
                level=lvl)
    c.disc(sun_x, sea_y, 16, PYELLOW)
    c.disc(sun_x, sea_y, 13, WHITE)

    # long clouds, lit from below
    for cx0, cy0, cw, thick in [(20, 34, 150, 3), (120, 52, 110, 2),
                                (250, 22, 120, 2), (200, 88, 150, 3),
                                (40, 100, 90, 2), (290, 112, 70, 2)]:
        for k in range(thick):
            x0 = cx0 + k * 6
            ww = cw - k * 14
            c.rect(x0, cy0 + k, ww, 1, MAUVE if cy0 < 70 else ROSE)
        c.rect(cx0 + 8, cy0 + thick, cw - 24, 1,
               ROSE if cy0 < 70 else ORANGE)
        c.rect(cx0 + 20, cy0 + thick + 1, cw - 50, 1,
               ORANGE if cy0 < 70 else PYELLOW)

    # a storm far out over the sea, with rain and a fork of lightning
    storm = np.zeros((H, W), dtype=bool)
    for bx, by, r in [(330, 70, 20), (352, 58, 26), (376, 66, 22),
                      (306, 84, 14), (392, 80, 20), (344, 40, 16),
                      (366, 34, 14)]:
        storm |= c.disc_mask(bx, by, r)
    storm &= c.yy < 96
    c.fill(outline_mask(storm) & (c.yy < 96), MAUVE)
    c.fill(storm, DGREY)
    c.fill(storm & ~c.disc_mask(348, 76, 40), GREY)
    c.fill(storm & (c.yy > 88), PLUM)
    rain = c.box_mask(300, 96, 84, sea_y - 96)
    streak = ((c.xx + c.yy // 3) % 5 == 0) & rain & \
        (hash01(c.xx, c.yy // 6, 21) < 0.6)
    c.fill(streak, GREY)
    c.fill(rain & (c.px == YELLOW), ORANGE, level=6)
    bolt = [(346, 94), (342, 106), (348, 110), (340, 126), (346, 130),
            (338, 146)]
    c.line(bolt, WHITE)
    c.line([(p[0] + 1, p[1]) for p in bolt], PSKY, level=8)
    c.line([(342, 106), (334, 116)], WHITE)

    # sea: deep colour, a broken path of sunlight, small waves
    c.rect(0, sea_y, W, H - sea_y, DTEAL)
    c.gradient_rows(sea_y, H, [MAUVE, TEAL, DTEAL, NAVY])
    for yy in range(sea_y, H):
        d = yy - sea_y
        half = 10 + d * 0.9
        for xx in range(int(sun_x - half), int(sun_x + half) + 1):
            if not 0 <= xx < W:
                continue
            t = abs(xx - sun_x) / half
            h = hash01(xx // (2 + d // 10), yy, 22)
            if h < 0.55 * (1 - t) + 0.1:
                c.px[yy, xx] = (WHITE if t < 0.2 and d < 30 else
                                PYELLOW if t < 0.45 else
                                YELLOW if t < 0.7 else ORANGE)
    for _ in range(220):
        wx_ = int(rng.integers(0, W))
        wy_ = int(rng.integers(sea_y + 2, H))
        ln = 2 + (wy_ - sea_y) // 12
        if abs(wx_ - sun_x) > 14 + (wy_ - sea_y):
            c.rect(wx_, wy_, ln, 1, TEAL if wy_ > sea_y + 30 else ROSE)
    c.rect(0, sea_y, W, 1, ROSE)

    # the headland and the town of Oskel
    x = np.arange(W)
    cliff_top = (96 + 10 * np.sin(x / 30.0) + 3 * np.sin(x / 7.0)
                 ).astype(int)
    cliff_edge = 150 - (x > 130) * (x - 130) * 3
    land = (c.yy >= cliff_top[None, :]) & (c.xx < 150) & \
        (c.xx < cliff_edge[None, :] + (c.yy - 96) // 2)
    land &= c.yy < sea_y + 6
    c.fill(land, PLUM)
    c.fill(land & (hash01(c.xx // 3, c.yy // 2, 23) < 0.3), DGREY)
    c.fill(land & (c.yy < cliff_top[None, :] + 2), MAUVE)
    # houses stepping down the cliff, their windows lit
    houses = [(6, 84, 18, 16), (26, 80, 14, 22), (44, 88, 20, 14),
              (66, 92, 16, 14), (86, 86, 12, 20), (100, 96, 18, 12),
              (14, 110, 16, 12), (36, 116, 18, 12), (60, 112, 14, 14),
              (80, 120, 20, 12), (104, 124, 14, 10)]
    for hx, hy, hw, hh in houses:
        c.rect(hx, hy, hw, hh, DGREY)
        c.rect(hx, hy, 1, hh, GREY)
        c.rect(hx + hw - 1, hy, 1, hh, BLACK)
        roof = [(hx - 2, hy), (hx + hw // 2, hy - hw // 3 - 2),
                (hx + hw + 1, hy)]
        c.poly(roof, DRED)
        c.line([roof[0], roof[1]], RUST)
        for wx_ in range(hx + 3, hx + hw - 3, 5):
            for wy_ in range(hy + 3, hy + hh - 3, 6):
                lit = hash01(wx_, wy_, 24) < 0.7
                c.rect(wx_, wy_, 2, 3, YELLOW if lit else NAVY)
                if lit:
                    c.dot(wx_, wy_, PYELLOW)
    # signal tower on the clifftop with a lit deck
    tx = 120
    c.line([(tx, 96), (tx + 4, 52)], BLACK)
    c.line([(tx + 16, 96), (tx + 12, 52)], BLACK)
    for yy in range(58, 96, 9):
        c.line([(tx + 1, yy + 9), (tx + 15, yy)], DGREY)
        c.line([(tx + 15, yy + 9), (tx + 1, yy)], DGREY)
    c.rect(tx - 6, 50, 30, 3, BLACK)
    c.rect(tx - 6, 50, 30, 1, GREY)
    for k in range(5):
        c.dot(tx - 5 + k * 7, 49, [YELLOW, RED][k % 2])
    c.rect(tx + 22, 34, 1, 16, BLACK)
    for i in range(10):
        hh = 4 - i // 4
        c.rect(tx + 23 + i, 35 + (4 - hh) // 2, 1, hh,
               RED if (i // 3) % 2 == 0 else WHITE)

    # harbour wall with a beacon, and boats
    c.rect(100, sea_y - 4, 120, 6, DGREY)
    c.rect(100, sea_y - 4, 120, 1, GREY)
    for bx in range(104, 220, 8):
        c.rect(bx, sea_y - 3, 1, 4, BLACK)
    c.rect(214, sea_y - 18, 6, 14, SALT)
    c.rect(214, sea_y - 12, 6, 3, RED)
    c.rect(213, sea_y - 21, 8, 3, BLACK)
    c.rect(216, sea_y - 24, 2, 3, RED)
    c.disc(217, sea_y - 23, 4, RED, level=4)
    c.dot(216, sea_y - 24, WHITE)
    c.rect(132, sea_y - 13, 2, 9, BLACK)
    c.rect(174, sea_y - 13, 2, 9, BLACK)
    c.rect(124, sea_y - 20, 60, 9, BLACK)
    c.rect(125, sea_y - 19, 58, 7, DTEAL)
    c.text(127, sea_y - 18, "OSKEL", SALT, font=FONT3X5)
    c.text(149, sea_y - 18, "HARBOUR", CYAN, font=FONT3X5)

    def boat(bx, by, sail, flip=False):
        hull = [(bx - 10, by - 3), (bx + 10, by - 3), (bx + 7, by),
                (bx - 7, by)]
        c.poly(hull, BLACK)
        c.line([(bx - 9, by - 3), (bx + 9, by - 3)], BROWN)
        m = 1 if not flip else -1
        c.rect(bx, by - 20, 1, 17, BLACK)
        c.poly([(bx + m, by - 19), (bx + m, by - 5), (bx + m * 10, by - 5)],
               sail)
        c.line([(bx + m, by - 19), (bx + m * 10, by - 5)], WHITE)
        c.rect(bx - 8, by + 1, 16, 1, NAVY)
    boat(166, sea_y + 10, SALT)
    boat(196, sea_y + 22, RED, flip=True)
    boat(60, sea_y + 18, SAND)

    # a sand bar in the foreground, where the coast road runs
    x = np.arange(W)
    bar = (204 + 3 * np.sin(x / 40.0) + 2 * np.sin(x / 11.0)).astype(int)
    bm = c.yy >= bar[None, :]
    c.fill(outline_mask(bm) & ~bm, TEAL)
    c.fill(bm, SAND)
    c.fill(bm & (c.yy <= bar[None, :] + 1), PYELLOW)
    c.fill(bm & (c.yy > bar[None, :] + 6), OCHRE, level=8)
    c.fill(bm & (c.yy > bar[None, :] + 12), OCHRE)
    for k in range(40):
        xx = int(hash01(k, 7, 27) * W)
        yy = bar[xx] + 4 + int(hash01(k, 8, 27) * 14)
        c.rect(xx, yy, 3, 1, BROWN if yy > bar[xx] + 10 else OCHRE)
    # wheel tracks along the bar
    for dy in (9, 12):
        for xx in range(0, 250, 1):
            if hash01(xx // 3, dy, 28) < 0.8:
                c.dot(xx, bar[xx] + dy, BROWN)

    # terns, and Imke running along the bar towards the town
    tern(c, 262, 70, PLUM, True)
    tern(c, 276, 64, PLUM, False)
    tern(c, 186, 40, NAVY, True)
    for k in range(12):
        dx = 24 + k * 4
        c.disc(258 + dx, 210 - k // 3 - int(hash01(k, 3, 29) * 3),
               1 + k // 4, PYELLOW, level=max(2, 9 - k // 2))
    land_yacht(c, 260, 214, [TEAL, SALT, OCHRE, RED, SALT, TEAL],
               flip=True, shadow=OCHRE)

    # HUD: the route strip at the top, sail and gust meters at the sides
    px0, pw = 112, 160
    c.rect(px0, 4, pw, 19, BLACK)
    c.frame(px0 + 1, 5, pw - 2, 17, DGREY)
    c.text(px0 + 5, 8, "HALVEN", LGREY, font=FONT3X5)
    c.text(px0 + pw - 5 - text_width("OSKEL", FONT3X5), 8, "OSKEL",
           YELLOW, font=FONT3X5)
    lx0, lx1 = px0 + 32, px0 + pw - 30
    for xx in range(lx0, lx1, 3):
        c.dot(xx, 10, GREY)
    prog = lx0 + int((lx1 - lx0) * 0.82)
    c.rect(lx0, 10, prog - lx0, 1, CYAN)
    c.poly([(prog - 3, 8), (prog + 3, 10), (prog - 3, 12)], WHITE)
    for k in range(3):
        bx = px0 + 5 + k * 10
        c.rect(bx, 15, 7, 5, OCHRE if k < 2 else DGREY)
        c.rect(bx + 3, 15, 1, 5, RUST if k < 2 else GREY)
        if k < 2:
            c.line([(bx + 1, 17), (bx + 3, 19), (bx + 7, 14)], GREEN)
    c.text(px0 + 40, 15, "2 OF 3 DELIVERED", SALT, font=FONT3X5)

    def meter(x0, label, fill, col, hi):
        c.rect(x0, 40, 9, 122, BLACK)
        c.rect(x0 + 1, 41, 7, 120, NAVY)
        for yy in range(44, 160, 8):
            c.rect(x0 + 1, yy, 2, 1, GREY)
        top = 160 - int(116 * fill)
        c.rect(x0 + 3, top, 4, 160 - top, col)
        c.rect(x0 + 3, top, 4, 1, hi)
        c.text(x0 + 5 - text_width(label, FONT3X5) // 2, 164, label,
               LGREY, font=FONT3X5)
    meter(4, "SAIL", 0.8, GREEN, LICHEN)
    meter(W - 13, "GUST", 0.7, RED, ORANGE)
    c.text(W - 34, 172, "SW 21", ORANGE, font=FONT3X5)
    c.rect(W - 50, 211, 48, 11, BLACK)
    c.frame(W - 49, 212, 46, 9, DGREY)
    c.text(W - 46, 214, "DUSK", LGREY, font=FONT3X5)
    c.text(W - 26, 214, "18:12", WHITE, font=FONT3X5)
    return c


# --------------------------------------------------------------------------
# Scene 4: night camp at Brimmer Well, 160x144, four shades only
# --------------------------------------------------------------------------

# Four warm shades, from near-black plum to near-white parchment.
SHADES = np.array([(22, 16, 30), (92, 70, 98), (188, 150, 128),
                   (244, 234, 208)], dtype=np.uint8)
S0, S1, S2, S3 = range(4)


def art4(rows):
    """Sprite rows in the four shades: '0'..'3', '.' is transparent."""
    w = max(len(r) for r in rows)
    a = np.full((len(rows), w), -1, dtype=np.int16)
    for y, row in enumerate(rows):
        for x, ch in enumerate(row):
            if ch != '.':
                a[y, x] = int(ch)
    return a


# Imke sitting on her pack by the fire, hugging her knees, facing right;
# the firelight is on her face and knees.
SITTER = art4([
    "....00000.........",
    "..001111100.......",
    ".01111111110......",
    "0110111111110.....",
    "0110111112230.....",
    "0110111123330.....",
    ".000011230330.....",
    "....0112333330....",
    "....0112333330....",
    ".....012233330....",
    ".....00122000.....",
    "....001111100.....",
    "...0111111110.....",
    "..011111222330....",
    "..0111122222330...",
    "..01112222333330..",
    "..0111222223333300",
    "..011122222333220.",
    "..0111122111110...",
    "..01110111122330..",
    "..0110.0111233330.",
    ".0000000000000000.",
    "0222222222222220..",
    "0211111111111110..",
    ".00000000000000...",
])

KETTLE = art4([
    "..00..",
    ".0220.",
    "022330",
    "023320",
    ".0000.",
])


def scene_camp():
    W, H = 160, 144
    c = Canvas(W, H, S0)
    rng = np.random.default_rng(160144)
    hz = 74
    box_y = 108

    # night sky: dithered from black to dusk at the horizon
    c.gradient_rows(0, hz, [S0, S0, S1], steps=4)
    # a band of faint stars across the sky
    band = np.abs((c.yy - 60) - (c.xx - 80) * -0.45) < 12
    c.fill(band & (c.yy < hz) & (hash01(c.xx, c.yy, 31) < 0.10), S1)
    c.fill(band & (c.yy < hz) & (hash01(c.xx, c.yy, 32) < 0.025), S2)
    for _ in range(40):
        sx_, sy_ = int(rng.integers(0, W)), int(rng.integers(0, hz - 12))
        c.dot(sx_, sy_, S3 if rng.random() < 0.4 else S2)
    for sx_, sy_ in [(22, 14), (124, 10), (70, 30)]:
        c.dot(sx_, sy_, S3)
        for d in (-1, 1):
            c.dot(sx_ + d, sy_, S2)
            c.dot(sx_, sy_ + d, S2)
    c.line([(112, 22), (126, 28)], S2)           # a falling star
    c.dot(126, 28, S3)

    # far dunes on the horizon
    x = np.arange(W)
    dune = (hz - 6 + 3 * np.sin(x / 13.0) + 2 * np.sin(x / 5.0 + 1)
            ).astype(int)
    dm = c.yy >= dune[None, :]
    c.fill(dm, S0)
    c.fill(dm & (c.yy == dune[None, :]), S1)
    # the salt, dark in the night
    c.fill(c.yy >= hz, S1)
    c.fill(c.box_mask(0, hz, W, 3), S0, level=8)
    for k in range(30):
        xx = int(hash01(k, 1, 33) * W)
        yy = hz + 4 + int(hash01(k, 2, 33) * (box_y - hz - 4))
        c.rect(xx, yy, 2 + k % 3, 1, S2 if yy > hz + 10 else S0)

    # the well: a stone ring with a timber frame, a rope and a bucket
    wx_, wy_ = 20, 92
    ring = c.ellipse_mask(wx_, wy_, 14, 5)
    c.fill(outline_mask(ring), S0)
    c.fill(ring, S2)
    c.fill(c.ellipse_mask(wx_, wy_ - 1, 10, 3), S0)
    c.rect(wx_ - 14, wy_ + 1, 29, 7, S2)
    for k in range(-13, 15, 6):
        c.rect(wx_ + k, wy_ + 1, 1, 7, S1)
    c.rect(wx_ - 14, wy_ + 4, 29, 1, S1)
    for k in range(-10, 15, 6):
        c.rect(wx_ + k, wy_ + 5, 1, 3, S1)
    c.rect(wx_ - 14, wy_ + 7, 29, 1, S0)
    c.line([(wx_ - 11, wy_ + 1), (wx_ - 7, wy_ - 28)], S2)
    c.line([(wx_ - 10, wy_ + 1), (wx_ - 6, wy_ - 28)], S1)
    c.line([(wx_ + 11, wy_ + 1), (wx_ + 7, wy_ - 28)], S2)
    c.line([(wx_ + 12, wy_ + 1), (wx_ + 8, wy_ - 28)], S1)
    c.rect(wx_ - 10, wy_ - 30, 21, 3, S2)
    c.rect(wx_ - 10, wy_ - 30, 21, 1, S3)
    c.rect(wx_ - 4, wy_ - 27, 9, 3, S1)                # windlass drum
    c.rect(wx_ - 4, wy_ - 27, 9, 1, S2)
    c.rect(wx_, wy_ - 24, 1, 11, S2)                   # rope
    c.rect(wx_ - 3, wy_ - 13, 7, 6, S2)                # bucket
    c.rect(wx_ - 3, wy_ - 13, 7, 1, S3)
    c.rect(wx_ - 3, wy_ - 9, 7, 1, S1)
    c.dot(wx_ - 3, wy_ - 14, S2)
    c.dot(wx_ + 3, wy_ - 14, S2)
    c.dot(wx_, wy_ - 15, S2)

    # the sand yacht, parked for the night with its sail furled
    yx, yy_ = 146, 100
    c.line([(yx - 1, yy_ - 8), (yx - 4, yy_ - 62)], S2)        # mast
    c.line([(yx, yy_ - 8), (yx - 3, yy_ - 62)], S1)
    c.poly([(yx - 4, yy_ - 58), (yx - 1, yy_ - 14), (yx - 6, yy_ - 14),
            (yx - 7, yy_ - 40)], S2)                         # furled sail
    for k in range(5):
        c.line([(yx - 7, yy_ - 50 + k * 8), (yx - 1, yy_ - 47 + k * 8)],
               S0)
    c.line([(yx - 4, yy_ - 58), (yx - 7, yy_ - 40)], S3)
    c.rect(yx - 30, yy_ - 15, 30, 1, S2)                       # boom
    c.rect(yx - 24, yy_ - 7, 40, 2, S2)                        # frame
    c.rect(yx - 24, yy_ - 7, 40, 1, S3)
    pod = [(yx - 18, yy_ - 6), (yx - 16, yy_ - 12), (yx - 4, yy_ - 13),
           (yx + 6, yy_ - 9), (yx + 9, yy_ - 6)]
    c.poly(pod, S1)
    c.line(pod[:4], S2)
    for wx in (yx - 20, yx + 13):
        c.disc(wx, yy_ - 3, 3, S0)
        c.disc(wx, yy_ - 3, 1, S2)
    c.line([(yx + 16, yy_ - 6), (yx + 16, yy_ - 3)], S0)
    c.line([(yx - 30, yy_ - 15), (yx - 36, yy_)], S2)          # a stake line

    # the tent
    tent = [(86, 100), (104, 64), (128, 100)]
    c.poly(tent, S1)
    c.poly([(86, 100), (104, 64), (106, 100)], S2)
    c.line([(86, 100), (104, 64)], S3)
    c.line([(104, 64), (106, 100)], S0, level=8)
    c.poly([(99, 100), (104, 80), (109, 100)], S0)
    c.line([(104, 64), (104, 60)], S2)
    c.line([(104, 61), (92, 72)], S1)
    c.line([(128, 100), (134, 102)], S2)
    c.line([(86, 100), (80, 102)], S2)

    # the campfire, its glow on the ground and the tent
    fx, fy = 68, 100
    glow = {S0: S1, S1: S2, S2: S3}
    c.remap(c.ellipse_mask(fx, fy - 4, 44, 22) & (c.yy > hz - 30), glow,
            level=4)
    c.remap(c.ellipse_mask(fx, fy - 2, 28, 13), glow, level=8)
    c.remap(c.ellipse_mask(fx, fy, 13, 5), glow)
    c.line([(fx - 7, fy + 3), (fx + 7, fy - 1)], S0)
    c.line([(fx - 7, fy - 1), (fx + 7, fy + 3)], S0)
    c.line([(fx - 7, fy + 2), (fx + 7, fy - 2)], S1)
    c.poly([(fx - 6, fy + 1), (fx - 3, fy - 10), (fx - 1, fy - 6),
            (fx + 1, fy - 14), (fx + 3, fy - 7), (fx + 4, fy - 10),
            (fx + 6, fy + 1)], S2)
    c.poly([(fx - 4, fy + 1), (fx - 2, fy - 5), (fx, fy - 3), (fx + 1, fy - 9),
            (fx + 3, fy - 3), (fx + 4, fy + 1)], S3)
    for sx_, sy_ in [(fx + 1, fy - 20), (fx - 3, fy - 24), (fx + 4, fy - 28),
                     (fx - 1, fy - 33)]:
        c.dot(sx_, sy_, S3)
    # tripod and kettle over the fire
    c.line([(fx - 10, fy + 2), (fx, fy - 26)], S0)
    c.line([(fx + 10, fy + 2), (fx, fy - 26)], S0)
    c.rect(fx, fy - 26, 1, 8, S0)
    c.blit(fx - 3, fy - 19, KETTLE)
    c.dot(fx + 3, fy - 21, S2)                         # steam
    c.dot(fx + 4, fy - 23, S2)

    # Imke, warming her hands
    c.blit(fx - 32, fy + 2 - SITTER.shape[0], SITTER)

    # text box
    c.rect(0, box_y, W, H - box_y, S0)
    c.frame(2, box_y + 3, W - 4, H - box_y - 5, S3)
    c.frame(3, box_y + 4, W - 6, H - box_y - 7, S1)
    c.rect(8, box_y, 54, 7, S0)
    c.text(10, box_y + 1, "BRIMMER WELL", S3, font=FONT3X5)
    c.text(8, box_y + 10, "FLASK FILLED. WATER 5/5", S3)
    c.text(8, box_y + 22, ">", S3)
    c.text(15, box_y + 22, "REST HERE", S3)
    c.text(96, box_y + 22, "SAIL ON", S2)
    return c


# --------------------------------------------------------------------------
# Scene 5: title screen, 640x480 (finer detail)
# --------------------------------------------------------------------------

# A salt wren, the post's emblem: a small brown bird with a cocked tail.
WREN = art([
    "..........KK..",
    "...KKKK..KBK..",
    "..KBBBBK.KBK..",
    ".KBKBBBBKBK...",
    "KOKBBsBBBBK...",
    ".KKBssssBBK...",
    "...KKsssBK....",
    ".....KKKK.....",
    "......K.K.....",
])


def scene_title():
    W, H = 640, 480
    c = Canvas(W, H)
    rng = np.random.default_rng(640480)
    hz = 300                     # the horizon, and the mirror line

    # dawn sky, and the same sky mirrored in a film of water on the salt
    sky = [NAVY, DBLUE, MAUVE, ROSE, ORANGE, YELLOW, PYELLOW]
    c.gradient_rows(0, hz, sky, steps=4)
    for _ in range(160):
        sx_, sy_ = int(rng.integers(0, W)), int(rng.integers(0, 110))
        if c.px[sy_, sx_] in (NAVY, DBLUE):
            c.px[sy_, sx_] = [LGREY, WHITE, PSKY][int(rng.integers(0, 3))]
    # the sun just clearing the horizon
    sun_x = 430
    warmer = {MAUVE: ROSE, ROSE: ORANGE, ORANGE: YELLOW, YELLOW: PYELLOW,
              DBLUE: MAUVE}
    up = c.yy < hz
    for r, lvl in [(150, 3), (110, 6), (76, 10)]:
        c.remap(up & c.ellipse_mask(sun_x, hz, r * 1.4, r), warmer,
                level=lvl)
    c.fill(up & c.disc_mask(sun_x, hz, 30), PYELLOW)
    c.fill(up & c.disc_mask(sun_x, hz, 26), WHITE)
    # thin clouds, lit from beneath
    for cx0, cy0, cw in [(30, 150, 220), (300, 120, 260), (470, 200, 160),
                         (90, 232, 180), (360, 250, 120)]:
        c.rect(cx0, cy0, cw, 2, MAUVE if cy0 < 200 else ROSE)
        c.rect(cx0 + 12, cy0 + 2, cw - 30, 1, ROSE if cy0 < 200 else ORANGE)
        c.rect(cx0 + 30, cy0 + 3, cw - 80, 1,
               ORANGE if cy0 < 200 else PYELLOW)
        c.rect(cx0 + 40, cy0 - 1, cw - 110, 1, MAUVE)

    # mesas and the Halven tower along the horizon
    for x0, x1, top in [(-40, 150, 282), (170, 236, 290), (250, 340, 284),
                        (520, 610, 288), (600, 700, 280)]:
        for xx in range(max(x0, 0), min(x1, W)):
            edge = min(xx - x0, x1 - 1 - xx)
            cliff = 10                       # a sheer cap, then scree
            if edge >= 26:
                t = top + int(hash01(xx // 3, top, 43) < 0.3)
            elif edge >= 22:
                t = top + (26 - edge) * 2
            else:
                t = top + 8 + int((22 - edge) * 0.45)
            t = min(t, hz - 1)
            c.rect(xx, t, 1, hz - t, PLUM)
            if edge >= 26:
                c.dot(xx, t, MAUVE)
                for sy in range(t + 3, min(t + cliff, hz), 3):
                    if hash01(xx // 4, sy, 44) < 0.5:
                        c.dot(xx, sy, MAUVE)
    tx = 96
    c.line([(tx, hz), (tx + 10, 214)], BLACK)
    c.line([(tx + 40, hz), (tx + 30, 214)], BLACK)
    for k in range(5):
        y0 = hz - k * 17
        xa, xb = tx + 2 * k, tx + 40 - 2 * k
        c.line([(xa, y0), (xb - 2, y0 - 17)], BLACK)
        c.line([(xb, y0), (xa + 2, y0 - 17)], BLACK)
    c.rect(tx + 2, 208, 36, 6, BLACK)
    c.rect(tx + 8, 190, 24, 18, BLACK)
    c.poly([(tx + 4, 190), (tx + 20, 178), (tx + 36, 190)], BLACK)
    c.rect(tx + 16, 195, 8, 7, YELLOW)
    c.rect(tx + 17, 196, 3, 3, PYELLOW)
    c.rect(tx + 19, 170, 2, 8, BLACK)
    c.rect(tx + 18, 166, 4, 4, YELLOW)
    c.disc(tx + 20, 168, 7, PYELLOW, level=4)
    c.rect(tx + 38, 170, 1, 38, BLACK)
    for i in range(22):
        hh = 8 - i // 4
        c.rect(tx + 39 + i, 171 + (8 - hh) // 2 + i // 8, 1, hh,
               RED if (i // 5) % 2 == 0 else WHITE)

    # the mirror: everything above the horizon, upside down, a shade deeper
    deeper = {PYELLOW: YELLOW, WHITE: PYELLOW, YELLOW: ORANGE,
              ORANGE: ROSE, ROSE: MAUVE, MAUVE: PLUM, DBLUE: NAVY,
              PLUM: NAVY, RED: DRED}
    n = H - hz
    c.px[hz:, :] = c.px[hz - 1:hz - 1 - n:-1, :]
    lut = np.arange(256, dtype=np.uint8)
    for a, b in deeper.items():
        lut[a] = b
    low = c.box_mask(0, hz, W, n)
    c.px[low & (c.bayer < 8)] = lut[c.px[low & (c.bayer < 8)]]
    # ripples and dry salt ridges break the reflection into bands
    for yy in range(hz + 2, H):
        d = yy - hz
        if hash01(yy, 0, 41) < 0.35:
            for xx in range(0, W, 1):
                if hash01(xx // (4 + d // 6), yy, 42) < 0.18:
                    c.px[yy, xx] = SALT if d > 60 else SAND
    c.rect(0, hz, W, 1, SALT)

    # the title
    logo = pad(logo_mask("SALTWREN", 6, gap=2), 8)
    lh, lw = logo.shape
    lx0, ly0 = (W - lw) // 2, 30
    shadow = np.zeros_like(logo)
    shadow[5:, 4:] = logo[:-5, :-4]
    c.stamp(lx0, ly0, outline_mask(logo | shadow, 2) | shadow, NAVY)
    c.stamp(lx0, ly0, shadow & ~logo, PLUM)
    c.stamp(lx0, ly0, outline_mask(logo, 1), BLACK)
    c.stamp(lx0, ly0, logo, SALT)
    rows = np.arange(lh)[:, None] + np.zeros((1, lw), dtype=int)
    # a teal band through the middle of every letter, and a lit top edge
    band = logo & (rows >= 8 + 6 * 4) & (rows < 8 + 6 * 5)
    c.stamp(lx0, ly0, band, TEAL)
    c.stamp(lx0, ly0, logo & (rows >= 8 + 6 * 5) & (rows < 8 + 6 * 5 + 2),
            DTEAL)
    c.stamp(lx0, ly0, logo & ~np.roll(logo, 1, 0), WHITE)
    lower = logo & (rows >= 8 + 6 * 7)
    yy_, xx_ = np.mgrid[0:lh, 0:lw]
    bay = BAYER4[(yy_ + ly0) % 4, (xx_ + lx0) % 4]
    c.stamp(lx0, ly0, lower & (bay < 8), SAND)
    c.stamp(lx0, ly0, logo & (rows >= 8 + 6 * 8), SAND)
    # a wren perched on the last letter
    c.blit(lx0 + lw - 40, ly0 - 10, WREN, scale=2)

    sub = "P O S T"
    sy_ = ly0 + lh + 4
    c.text_centered(W // 2, sy_, sub, NAVY, scale=3, shadow=None)
    c.text_centered(W // 2 - 1, sy_ - 1, sub, PYELLOW, scale=3)
    sw = text_width(sub, scale=3)
    for side in (-1, 1):
        x0 = W // 2 + side * (sw // 2 + 16)
        x1 = W // 2 + side * (sw // 2 + 110)
        c.rect(min(x0, x1), sy_ + 9, abs(x1 - x0), 2, PYELLOW)
        c.rect(min(x0, x1), sy_ + 11, abs(x1 - x0), 1, NAVY)
    c.text_centered(W // 2, sy_ + 30, "LETTERS AND PARCELS ACROSS THE PALE "
                    "FLATS", SALT, shadow=NAVY)

    # Imke sailing across the wet salt, mirrored in it
    deep = {PYELLOW: YELLOW, WHITE: PYELLOW, YELLOW: ORANGE, ORANGE: ROSE,
            ROSE: MAUVE, MAUVE: PLUM, DBLUE: NAVY, PLUM: NAVY, RED: DRED,
            SALT: SAND, SAND: OCHRE, BLUE: DBLUE, SKY: BLUE, TEAL: DTEAL,
            OCHRE: BROWN, LGREY: GREY, GREY: DGREY, DGREY: BLACK, CYAN: TEAL}
    ground = 404
    art_ = Canvas(W, H, 255)
    land_yacht(art_, 540, ground, [TEAL, SALT, OCHRE, RED, SALT, TEAL], k=2,
               flip=True)
    drawn = art_.px != 255
    c.px[drawn] = art_.px[drawn]
    n = H - ground
    mirror = np.zeros((H, W), dtype=bool)
    mirror[ground:] = drawn[ground - 1:ground - 1 - n:-1]
    src = np.zeros_like(c.px)
    src[ground:] = art_.px[ground - 1:ground - 1 - n:-1]
    lut = np.arange(256, dtype=np.uint8)
    for a_, b_ in deep.items():
        lut[a_] = b_
    ripple = hash01(c.yy, 0, 45) < 0.75
    put = mirror & ripple
    c.px[put] = lut[src[put]]
    c.rect(466, ground, 130, 1, SALT)
    for bx, by, upw in [(300, 190, True), (318, 200, False),
                        (286, 206, False), (560, 120, True)]:
        tern(c, bx, by, NAVY, upw)

    # the menu, written on a parcel tag
    tx0, ty0, tw, th = 224, 336, 192, 112
    tag = c.poly_mask([(tx0 + 18, ty0), (tx0 + tw, ty0), (tx0 + tw, ty0 + th),
                       (tx0 + 18, ty0 + th), (tx0, ty0 + th - 18),
                       (tx0, ty0 + 18)])
    shadow_tag = np.roll(np.roll(tag, 4, 0), 4, 1)
    c.fill(shadow_tag & ~tag, NAVY)
    c.fill(outline_mask(tag), BLACK)
    c.fill(tag, SALT)
    c.fill(tag & (c.xx >= tx0 + tw - 3), SAND)
    c.fill(tag & (c.yy >= ty0 + th - 3), SAND)
    c.disc(tx0 + 16, ty0 + th // 2, 6, BLACK)
    c.disc(tx0 + 16, ty0 + th // 2, 5, OCHRE)
    c.disc(tx0 + 16, ty0 + th // 2, 3, NAVY)
    c.line([(tx0 + 12, ty0 + th // 2), (tx0 - 30, ty0 + th // 2 + 40),
            (tx0 - 60, ty0 + th // 2 + 50)], OCHRE)
    c.line([(tx0 + 12, ty0 + th // 2 + 1), (tx0 - 30, ty0 + th // 2 + 41),
            (tx0 - 60, ty0 + th // 2 + 51)], BROWN)
    c.rect(tx0 + 34, ty0 + 8, tw - 44, 1, ROSE)
    c.text(tx0 + 34, ty0 + 12, "ROUTE BOOK", DRED)
    c.text(tx0 + tw - 10 - text_width("NO. 0417"), ty0 + 12, "NO. 0417",
           GREY)
    c.rect(tx0 + 34, ty0 + 22, tw - 44, 1, ROSE)
    items = ["SET SAIL", "LOGBOOK", "WORKSHOP", "SETTINGS"]
    for i, item in enumerate(items):
        y = ty0 + 30 + i * 19
        col = DBLUE if i == 0 else DBROWN
        c.text(tx0 + 52, y, item, col, scale=2)
    c.blit(tx0 + 32, ty0 + 31, WREN)
    c.rect(tx0 + 52, ty0 + 46, text_width(items[0], scale=2), 1, DBLUE)

    # small print along the bottom, in the 1x font
    c.rect(0, H - 14, W, 14, BLACK)
    c.rect(0, H - 14, W, 1, DGREY)
    c.text(8, H - 10, "WIND WEST 12, FALLING", LGREY)
    c.text_centered(W // 2, H - 10, "HALVEN TO OSKEL 41 KM", SALT)
    c.text(W - 8 - text_width("VERSION 0.9.4"), H - 10, "VERSION 0.9.4",
           GREY)
    return c

# --------------------------------------------------------------------------
# Test charts (true-colour, not limited to the game palette)
# --------------------------------------------------------------------------

def chart_grey_ramp():
    W, H = 320, 240
    img = np.zeros((H, W, 3), dtype=np.uint8)
    ramp = np.round(np.arange(W) * 255.0 / (W - 1)).astype(np.uint8)
    img[:H // 2] = ramp[None, :, None]
    step = np.arange(W) * 16 // W
    img[H // 2:] = (step * 17).astype(np.uint8)[None, :, None]
    return img


def chart_colour_bars():
    W, H = 320, 240
    img = np.zeros((H, W, 3), dtype=np.uint8)
    order = [(1, 1, 1), (1, 1, 0), (0, 1, 1), (0, 1, 0),
             (1, 0, 1), (1, 0, 0), (0, 0, 1), (0, 0, 0)]
    top = H * 2 // 3
    bw = W // 8
    for i, rgb in enumerate(order):
        img[:top, i * bw:(i + 1) * bw] = np.array(rgb) * 191
        img[top:, i * bw:(i + 1) * bw] = np.array(rgb) * 255
    return img


def chart_checker():
    W, H = 320, 240
    yy, xx = np.mgrid[0:H, 0:W]
    v = ((xx + yy) % 2).astype(np.uint8)
    # regions of 1-px vertical lines and 1-px horizontal lines
    for x0, y0, w, h, kind in [(16, 16, 96, 64, 'v'), (208, 16, 96, 64, 'h'),
                               (16, 160, 96, 64, 'h'), (208, 160, 96, 64, 'v'),
                               (128, 96, 64, 48, 'v')]:
        sub = (xx[y0:y0 + h, x0:x0 + w] if kind == 'v'
               else yy[y0:y0 + h, x0:x0 + w]) % 2
        v[y0:y0 + h, x0:x0 + w] = sub
    img = (v * 255).astype(np.uint8)
    return np.repeat(img[:, :, None], 3, axis=2)


def chart_fine_text():
    W, H = 320, 240
    img = np.zeros((H, W, 3), dtype=np.uint8)
    img[:] = (16, 16, 24)

    def put(x, y, s, rgb, font=FONT5X7):
        m = text_mask(s, font)
        h, w = m.shape
        w = min(w, W - x)
        img[y:y + h, x:x + w][m[:, :w]] = rgb

    white = (255, 255, 255)
    big, small = FONT5X7, FONT3X5
    lines = [
        ("THE QUICK BROWN FOX JUMPS OVER THE LAZY DOG", white, big),
        ("0123456789 +-=/*:.,!?()'#%&<>_", white, big),
        ("SALTWREN POST - LETTERS ACROSS THE PALE FLATS", white, big),
        ("THE QUICK BROWN FOX JUMPS OVER THE LAZY DOG 0123456789 +-=/*:.,!?()",
         white, small),
        ("WIND W 12  SAIL FULL  38 KM/H  WATER 3/5  PARCELS 1 OF 3",
         white, small),
        ("GREY TEXT: HALF BRIGHT LETTERS 128/255", (128, 128, 128), big),
        ("RED TEXT: THE GUST FLAG IS UP AT HALVEN", (255, 40, 40), big),
        ("GREEN TEXT: SAMPHIRE BY THE BRINE PONDS", (40, 255, 40), big),
        ("BLUE TEXT: DEEP WATER OFF OSKEL HARBOUR", (64, 96, 255), big),
        ("YELLOW TEXT: 14 SHELLS FOR THREE PARCELS", (255, 230, 40), big),
        ("CYAN TEXT: THE TEAL POND AT NOON", (40, 230, 255), big),
        ("MAGENTA TEXT: ROUTE BOOK NO. 0417", (255, 40, 220), big),
        ("SMALL RED: ABCDEFGHIJKLMNOPQRSTUVWXYZ 0123456789", (255, 64, 64),
         small),
        ("SMALL GREEN: ABCDEFGHIJKLMNOPQRSTUVWXYZ 0123456789", (64, 255, 64),
         small),
        ("SMALL BLUE: ABCDEFGHIJKLMNOPQRSTUVWXYZ 0123456789", (96, 128, 255),
         small),
    ]
    y = 6
    for s, rgb, font in lines:
        put(8, y, s, rgb, font)
        y += 11 if font is big else 8

    # light band with black text
    y += 4
    img[y:y + 30] = (232, 228, 216)
    black = (0, 0, 0)
    put(8, y + 4, "BLACK ON LIGHT: THE QUICK BROWN FOX 0123", black)
    put(8, y + 14, "BLACK ON LIGHT: SMALL 3X5 LETTERS AND DIGITS 0123456789",
        black, small)
    put(8, y + 21, "ABCDEFGHIJKLMNOPQRSTUVWXYZ +-=/*:.,!?", black, small)
    y += 36

    # neighbouring letters in different primaries, then white again
    rgb_cycle = [(255, 40, 40), (40, 255, 40), (64, 96, 255)]
    for i, ch in enumerate("RGBRGBRGB MIXED COLOUR LETTERS RGBRGBRGB"):
        put(8 + i * 6, y, ch, rgb_cycle[i % 3])
    put(8, y + 11, "WHITE: 1-PX STROKES ON A DARK GROUND", white)
    return img


# --------------------------------------------------------------------------

def save_png(rgb, path):
    rgb = np.ascontiguousarray(rgb, dtype=np.uint8)
    assert rgb.ndim == 3 and rgb.shape[2] == 3
    Image.fromarray(rgb, 'RGB').save(path, format='PNG', optimize=True)


def clip_pan():
    """A slow pan across the salt flats: 22 frames of 256x192, 3 pixels a frame.

    Frames only slide (no flashing): the animated sample for clips.
    """
    flats = scene_flats().to_rgb()
    return [flats[24:216, x:x + 256] for x in range(0, 64, 3)]


def save_gif(frames, path, ms):
    """An animated GIF of few-colour frames, exactly (one global palette)."""
    stack = np.ascontiguousarray(np.stack(frames), dtype=np.uint8)
    colours, index = np.unique(stack.reshape(-1, 3), axis=0, return_inverse=True)
    assert len(colours) <= 256
    palette = colours.ravel().tolist() + [0] * (768 - 3 * len(colours))
    images = []
    for k in range(len(frames)):
        im = Image.fromarray(index.reshape(stack.shape[:3])[k].astype(np.uint8), 'P')
        im.putpalette(palette)
        images.append(im)
    images[0].save(path, format='GIF', save_all=True, append_images=images[1:],
                   duration=ms, loop=0, optimize=False, disposal=1)


def main(argv):
    out_dir = argv[1] if len(argv) > 1 else os.path.dirname(
        os.path.abspath(__file__))
    os.makedirs(out_dir, exist_ok=True)
    jobs = [
        ("scene-320x240.png", lambda: scene_flats().to_rgb()),
        ("scene-256x224.png", lambda: scene_loft().to_rgb()),
        ("scene-384x224.png", lambda: scene_harbour().to_rgb()),
        ("scene-160x144.png", lambda: SHADES[scene_camp().px]),
        ("scene-640x480.png", lambda: scene_title().to_rgb()),
        ("chart-grey-ramp-320x240.png", chart_grey_ramp),
        ("chart-colour-bars-320x240.png", chart_colour_bars),
        ("chart-checker-320x240.png", chart_checker),
        ("chart-fine-text-320x240.png", chart_fine_text),
    ]
    for name, make in jobs:
        path = os.path.join(out_dir, name)
        rgb = make()
        save_png(rgb, path)
        colours = len(np.unique(rgb.reshape(-1, 3), axis=0))
        print(f"wrote {path} ({rgb.shape[1]}x{rgb.shape[0]}, "
              f"{colours} colours, {os.path.getsize(path)} bytes)")
    path = os.path.join(out_dir, "clip-pan-256x192.gif")
    frames = clip_pan()
    save_gif(frames, path, 80)
    print(f"wrote {path} ({len(frames)} frames of 256x192 at 80 ms, "
          f"{os.path.getsize(path)} bytes)")


if __name__ == "__main__":
    main(sys.argv)
