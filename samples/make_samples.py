#!/usr/bin/env python3
"""Draw the demo scenes and test charts used by crtfilter.

Everything here is drawn from code: the scenes belong to an invented game,
"Tolliwag and the Sky Lanterns", set in the Fernlands.  Text is drawn with
the small bitmap fonts defined below (no system fonts are used).

Usage:  python make_samples.py [OUTPUT_DIR]

OUTPUT_DIR defaults to the folder this script lives in.  The output is fully
deterministic (fixed seeds only).  Requires numpy and Pillow.
"""

import os
import sys

import numpy as np
from PIL import Image

# --------------------------------------------------------------------------
# Palette shared by the game scenes (32 colours, index -> sRGB)
# --------------------------------------------------------------------------

PALETTE = np.array([
    (0, 0, 0),         # 0  black
    (255, 255, 255),   # 1  white
    (20, 16, 48),      # 2  night navy
    (32, 48, 136),     # 3  deep blue
    (64, 112, 232),    # 4  sky blue
    (112, 176, 255),   # 5  light sky
    (184, 228, 255),   # 6  pale cyan
    (60, 28, 92),      # 7  dark purple
    (112, 60, 168),    # 8  purple
    (172, 124, 224),   # 9  lavender
    (12, 64, 40),      # 10 dark green
    (28, 132, 52),     # 11 green
    (88, 200, 48),     # 12 bright green
    (184, 240, 80),    # 13 lime
    (64, 36, 20),      # 14 dark brown
    (128, 72, 32),     # 15 brown
    (200, 128, 64),    # 16 tan
    (248, 204, 136),   # 17 sand
    (128, 16, 36),     # 18 dark red
    (228, 36, 40),     # 19 red
    (252, 128, 20),    # 20 orange
    (255, 216, 40),    # 21 yellow
    (255, 248, 184),   # 22 pale yellow
    (52, 52, 72),      # 23 dark grey
    (108, 108, 136),   # 24 grey
    (176, 176, 200),   # 25 light grey
    (252, 176, 140),   # 26 peach
    (236, 60, 164),    # 27 magenta
    (20, 116, 140),    # 28 teal
    (48, 204, 220),    # 29 cyan
    (12, 44, 64),      # 30 deep teal
    (172, 60, 20),     # 31 rust
], dtype=np.uint8)

(BLACK, WHITE, NAVY, DBLUE, BLUE, LBLUE, PCYAN, DPURPLE, PURPLE, LAVENDER,
 DGREEN, GREEN, BGREEN, LIME, DBROWN, BROWN, TAN, SAND, DRED, RED, ORANGE,
 YELLOW, PYELLOW, DGREY, GREY, LGREY, PEACH, MAGENTA, TEAL, CYAN, DTEAL,
 RUST) = range(32)

# Characters used in sprite and tile art strings.  '.' is transparent.
KEY = {
    'K': BLACK, 'W': WHITE, 'n': NAVY, 'D': DBLUE, 'U': BLUE, 'u': LBLUE,
    'c': PCYAN, 'q': DPURPLE, 'p': PURPLE, 'v': LAVENDER, 'd': DGREEN,
    'g': GREEN, 'G': BGREEN, 'l': LIME, 'b': DBROWN, 'B': BROWN, 't': TAN,
    's': SAND, 'r': DRED, 'R': RED, 'O': ORANGE, 'Y': YELLOW, 'P': PYELLOW,
    'k': DGREY, 'e': GREY, 'E': LGREY, 'S': PEACH, 'M': MAGENTA, 'T': TEAL,
    'C': CYAN, 'x': DTEAL, 'o': RUST,
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
    '@': "..... .#.#. ##### ##### .###. ..#.. .....",  # heart
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
    'T': "######## ######## ...##... ...##... ...##... ...##... ...##... "
         "...##... ...##...",
    'O': ".######. ######## ##....## ##....## ##....## ##....## ##....## "
         "######## .######.",
    'L': "##...... ##...... ##...... ##...... ##...... ##...... ##...... "
         "######## ########",
    'I': "###### ###### ..##.. ..##.. ..##.. ..##.. ..##.. ###### ######",
    'W': "##......## ##......## ##......## ##..##..## ##..##..## "
         "##.####.## ########## ####..#### .##....##.",
    'A': ".######. ######## ##....## ##....## ######## ######## ##....## "
         "##....## ##....##",
    'G': ".######. ######## ##...... ##...... ##..#### ##..#### ##....## "
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

    def block(self, x, y, w, h, light, mid, dark, outline=BLACK):
        """Bevelled block: highlight top/left, shadow bottom/right."""
        self.rect(x, y, w, h, outline)
        self.rect(x + 1, y + 1, w - 2, h - 2, mid)
        self.rect(x + 1, y + 1, w - 2, 1, light)
        self.rect(x + 1, y + 1, 1, h - 2, light)
        self.rect(x + 1, y + h - 2, w - 2, 1, dark)
        self.rect(x + w - 2, y + 1, 1, h - 2, dark)

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
# Sprites and tiles of the invented game
# --------------------------------------------------------------------------

# Tolli, a small hooded lamplighter, holding a lantern on a short pole.
HERO = art([
    "......KKK...........",
    ".....KUUuK..........",
    "....KDUUUK..........",
    "....KDUUuUK.........",
    "...KDUUUUUUK........",
    "..KDUUUUUUUUK.......",
    "..KDUSSSSSSUK.......",
    "..KDSSWKSSWKK.......",
    "..KDSSWKSSWKK...KK..",
    "..KDSRSSSSSRK..KbK..",
    "...KSSSSbbSK..KbK...",
    "....KKRRRRKKKKbKKKK.",
    "...KRRRRRRRKSKbKYPK.",
    "..KDRKRRRRKUKbKOPWOK",
    "..KDUUKUUUUKK.KOPPOK",
    "..KDDUUUUUUDK..KYYK.",
    "...KDDUUUUDK....KK..",
    "....KbbKKbbK........",
    "...KbbbK.KbbbK......",
    "...KKKK...KKKK......",
])

# A slow snail-like creature with a spiral shell.
SNAIL = art([
    "......KKKKK.......",
    "....KKvvvvvKK.....",
    "...KvvppppvvvK....",
    "..KvpKKKKKppvvK...",
    "..KvpKvvvKKpvvK...",
    ".KvpKvKKKvKppvvK..",
    ".KvpKvKpKvKppvvK..",
    ".KvpKvvKKvKpvvK...",
    ".KvppKvvvKppvvK.KK",
    "..KvppKKKppvvK.KWK",
    "...KKvvvvvvKKSKKKK",
    "...KKKKKKKKKSSSSK.",
    ".KtssssssssssssSK.",
    "KtsssssssssssssK..",
    "KKKKKKKKKKKKKKK...",
])

LANTERN = art([
    "..KKKK..",
    "...KK...",
    ".KOOOOK.",
    "KOYPPYOK",
    "KOPWWPOK",
    "KOPWWPOK",
    "KOYPPYOK",
    ".KOOOOK.",
    "..KRRK..",
    "...KK...",
])

HEART = art([
    ".KK.KK.",
    "KRRKRRK",
    "KRWRRRK",
    "KRRRRRK",
    ".KRRRK.",
    "..KRK..",
    "...K...",
])

BAT = art([
    "K..............K",
    "KK....K..K....KK",
    "KpK...KKKK...KpK",
    "KppK.KpppppK.KppK",
    ".KppKpRppRpKppK.",
    ".KpppppppppppppK",
    "..KpKpKpppKpKpK.",
    "..K.K.KKKKK.K.K.",
])

TORCH = art([
    "..RR..",
    ".RORR.",
    ".ROYR.",
    "ROYPOR",
    "ROPWYR",
    ".RYPO.",
    "KKKKKK",
    "KtBBtK",
    ".KBBK.",
    ".KBbK.",
    ".KBbK.",
    ".KBbK.",
    "..Kb..",
])

CHEST = art([
    "..KKKKKKKKKKKK..",
    ".KtttttttttttK.",
    "KtBBBBBBBBBBBBtK",
    "KtBBBBBBBBBBBBtK",
    "KKKKKKKYYKKKKKKK",
    "KsBBBBKYYKBBBBsK",
    "KtBBBBBKKBBBBBtK",
    "KtBBBBBBBBBBBBtK",
    "KtbbbbbbbbbbbbtK",
    "KKKKKKKKKKKKKKKK",
])

FLOWER_R = art([".R.", "RYR", ".R.", ".g.", "gg."])
FLOWER_Y = art([".Y.", "YWY", ".Y.", ".g.", ".gg"])

GRASS_TILE = art([
    "lGGlGGGlGGlGGGlG",
    "GlGGGlGGGGGlGGGl",
    "GGGGGGGGGGGGGGGG",
    "gGGgGGGgGGgGGGgG",
    "gggggggggggggggg",
    "dgdggdgdgdggdgdg",
    "bdBdbBdbBdBbdBdb",
    "BBBbBBBBBtBBBbBB",
    "BBBBBBBBBBBBBBBB",
    "BtBBBBbBBBBBBtBB",
    "BBBBBtttBBBBBBBB",
    "BBBBtttttbBBBBBB",
    "BBBBbtttbbBBbBBB",
    "bBBBBbbbBBBBBBBB",
    "BBBBBBBBBBBtBBBB",
    "BBBBBBBBBBBBBBBb",
])

DIRT_TILE = art([
    "BBBBBBBbBBBBBBBB",
    "BtBBBBBBBBBBtBBB",
    "BBBBbBBBBBBBBBBB",
    "BBBtttBBBBBbBBBB",
    "BBtttttbBBBBBBBB",
    "BBbtttbbBBBBBBtB",
    "BBBbbbBBBBBBBBBB",
    "BBBBBBBBBBtBBBBB",
    "bBBBBBBBBttttBBB",
    "BBBBBtBBBtttttbB",
    "BBBBBBBBBbtttbbB",
    "BBtBBBBBBBbbbBBB",
    "BBBBBBBbBBBBBBBB",
    "BBBBBBBBBBBBBtBB",
    "BBBBbBBBBBBBBBBB",
    "bBBBBBBBBBbBBBBB",
])


def lantern_glow(c, cx, cy, r_inner, r_outer, mapping):
    """Brighten colours around a light source with two dithered rings."""
    c.remap(c.disc_mask(cx, cy, r_outer), mapping, level=6)
    c.remap(c.disc_mask(cx, cy, (r_inner + r_outer) // 2), mapping, level=8)
    c.remap(c.disc_mask(cx, cy, r_inner), mapping, level=16)


LIGHTER = {BLACK: NAVY, NAVY: DPURPLE, DPURPLE: PURPLE, PURPLE: LAVENDER,
           DGREY: GREY, GREY: LGREY, DBROWN: BROWN, BROWN: TAN, TAN: SAND,
           DTEAL: TEAL, TEAL: CYAN, DGREEN: GREEN, GREEN: BGREEN,
           DRED: RUST, RUST: ORANGE}


CRACK = ["..#...",
         "..#...",
         "...#..",
         "...##.",
         "..#..#",
         ".#...."]


def crack(c, x, y, dark, light, flip=False):
    """A small forked crack on a stone block, lit from the left."""
    rows = [r[::-1] for r in CRACK] if flip else CRACK
    for dy, row in enumerate(rows):
        for dx, ch in enumerate(row):
            if ch == '#':
                c.rect(x + dx, y + dy, 1, 1, dark)
                if dx + 1 >= len(row) or row[dx + 1] != '#':
                    c.rect(x + dx + 1, y + dy, 1, 1, light)


def cloud(c, x, y, scale=1.0):
    """A puffy cloud: white top, pale cyan belly, flat bottom."""
    puffs = [(0, 0, 10), (12, -6, 13), (26, -2, 11), (38, 2, 8), (-10, 3, 7)]
    m = np.zeros_like(c.px, dtype=bool)
    for dx, dy, r in puffs:
        m |= c.disc_mask(x + dx * scale, y + dy * scale, r * scale)
    m &= c.yy <= y + 8 * scale
    c.fill(outline_mask(m) & (c.yy <= y + 9 * scale), LBLUE)
    c.fill(m, PCYAN)
    hi = np.zeros_like(m)
    for dx, dy, r in puffs:
        hi |= c.disc_mask(x + dx * scale - 1, y + dy * scale - 2,
                          r * scale - 2)
    c.fill(m & hi & (c.yy <= y + 3 * scale), WHITE)


# --------------------------------------------------------------------------
# Scene 1: Mossbridge Meadow (outdoor level), 320x240
# --------------------------------------------------------------------------

def hud_number(n, digits):
    return str(n).rjust(digits, '0')


def scene_meadow():
    W, H = 320, 240
    c = Canvas(W, H)
    ground_y = 192

    # sky bands
    c.gradient_rows(17, 160, [DBLUE, BLUE, LBLUE, PCYAN])

    # sun with soft dithered halo
    c.disc(268, 52, 24, PYELLOW, level=4)
    c.disc(268, 52, 19, PYELLOW, level=8)
    c.disc(268, 52, 14, PYELLOW)
    c.disc(266, 50, 10, WHITE)

    cloud(c, 40, 50)
    cloud(c, 150, 38, 0.8)
    cloud(c, 205, 78, 0.6)

    # far mountains with snow caps
    x = np.arange(W)
    peaks = [(30, 92), (95, 104), (150, 86), (215, 100), (300, 90)]
    top = np.full(W, 200.0)
    for px_, py in peaks:
        top = np.minimum(top, py + np.abs(x - px_) * 0.9)
    mtn = c.yy >= top[None, :]
    c.fill(mtn, LAVENDER)
    # shade the right-hand slope of whichever peak is nearest
    peak_x = np.array([p for p, _ in peaks])
    nearest = peak_x[np.argmin(np.abs(x[:, None] - peak_x[None, :]), axis=1)]
    shade = x > nearest
    c.fill(mtn & shade[None, :], PURPLE)
    c.fill(mtn & (c.yy < top[None, :] + 9) & ~shade[None, :], WHITE)
    c.fill(mtn & (c.yy < top[None, :] + 7) & shade[None, :], LGREY)
    # haze at the foot of the mountains
    c.fill(mtn & (c.yy > 140), PCYAN, level=4)

    # rolling mid hills
    hill = (150 + 8 * np.sin(x / 23.0) + 5 * np.sin(x / 9.0 + 1.3)).astype(int)
    hm = c.yy >= hill[None, :]
    c.fill(hm, GREEN)
    c.fill(hm & (c.yy < hill[None, :] + 3), BGREEN)
    c.fill(hm & (c.yy > 170), DGREEN, level=8)
    c.fill(hm & (c.yy > 180), DGREEN)

    # background trees
    for tx, ty, r in [(22, 150, 14), (178, 152, 12), (300, 146, 16),
                      (120, 160, 9)]:
        c.rect(tx - 2, ty, 5, ground_y - ty, DBROWN)
        c.rect(tx - 2, ty, 2, ground_y - ty, BROWN)
        canopy = c.disc_mask(tx, ty - r + 4, r)
        c.fill(outline_mask(canopy), BLACK)
        c.fill(canopy, GREEN)
        c.fill(canopy & c.disc_mask(tx + 3, ty - r + 7, r - 2), DGREEN, 8)
        c.fill(canopy & c.disc_mask(tx - 4, ty - r, r - 5), BGREEN)
        c.fill(canopy & c.disc_mask(tx - 6, ty - r - 2, r - 9), LIME, 8)

    # ground tiles, with a pit of water
    pit = (192, 224)
    for tx in range(0, W, 16):
        if pit[0] <= tx < pit[1]:
            continue
        c.blit(tx, ground_y, GRASS_TILE)
        c.blit(tx, ground_y + 16, DIRT_TILE)
        c.blit(tx, ground_y + 32, DIRT_TILE)
    # pit walls and water
    c.rect(pit[0], ground_y + 6, pit[1] - pit[0], H - ground_y, DBROWN)
    c.rect(pit[0], ground_y + 14, pit[1] - pit[0], H, DBLUE)
    c.rect(pit[0], ground_y + 14, pit[1] - pit[0], 2, LBLUE)
    for wx in range(pit[0] + 2, pit[1] - 2, 8):
        c.rect(wx, ground_y + 14, 3, 1, WHITE)
        c.rect(wx + 4, ground_y + 20, 3, 1, BLUE)
    c.fill(c.box_mask(pit[0], ground_y + 24, 32, 24), NAVY, 8)
    c.rect(pit[0], ground_y, 1, H, BLACK)
    c.rect(pit[1] - 1, ground_y, 1, H, BLACK)

    # flowers
    for fx, kind in [(8, 0), (30, 1), (90, 0), (140, 1), (236, 0),
                     (300, 1), (312, 0)]:
        c.blit(fx, ground_y - 4, FLOWER_R if kind == 0 else FLOWER_Y)

    # wooden signpost pointing right
    c.rect(150, ground_y - 22, 3, 22, DBROWN)
    c.rect(150, ground_y - 22, 1, 22, BROWN)
    c.rect(136, ground_y - 30, 30, 12, BLACK)
    c.rect(137, ground_y - 29, 28, 10, TAN)
    c.rect(137, ground_y - 29, 28, 1, SAND)
    c.rect(137, ground_y - 20, 28, 1, BROWN)
    c.text(139, ground_y - 27, "1-1", DBROWN, font=FONT5X7)
    c.text(157, ground_y - 27, ">", DBROWN)

    # floating stone platform with lanterns above it
    for bx in range(88, 152, 16):
        c.block(bx, 120, 16, 16, LGREY, GREY, DGREY)
        if bx in (88, 136):
            crack(c, bx + 4, 124, DGREY, LGREY, flip=bx == 136)
    c.fill(c.box_mask(90, 136, 62, 3), BLACK, 6)   # shadow underside
    for i, lx in enumerate(range(94, 152, 16)):
        c.blit(lx, 100 - (i % 2) * 3, LANTERN)

    # small step platform on the right
    for bx in (240, 256):
        c.block(bx, 152, 16, 16, SAND, TAN, BROWN)
        c.rect(bx + 3, 157, 10, 1, BROWN)
        c.rect(bx + 3, 161, 10, 1, BROWN)
    c.blit(252, 134, LANTERN)

    # characters
    c.blit(48, ground_y - HERO.shape[0], HERO)
    c.blit(258, ground_y - SNAIL.shape[0], SNAIL, flip=True)

    # HUD
    c.rect(0, 0, W, 17, BLACK)
    c.rect(0, 16, W, 1, DGREY)
    c.text(6, 5, "SCORE", LGREY)
    c.text(42, 5, hud_number(4250, 6), WHITE)
    c.blit(90, 4, LANTERN[1:9, :])
    c.text(100, 5, "*07", YELLOW)
    for i in range(3):
        c.blit(132 + i * 9, 5, HEART)
    c.text(174, 5, "WORLD 1-1", CYAN)
    c.text(238, 5, "TIME", LGREY)
    c.text(266, 5, "312", WHITE)
    c.text(292, 5, "@", RED)
    c.text(300, 5, "2", WHITE)
    return c


# --------------------------------------------------------------------------
# Scene 2: Ember Caverns (underground level), 256x224
# --------------------------------------------------------------------------

def scene_caverns():
    W, H = 256, 224
    c = Canvas(W, H, BLACK)
    rng = np.random.default_rng(1991)
    play_h = 208

    # distant brick wall (parallax layer): dark and low contrast
    for by in range(0, play_h, 8):
        off = 8 if (by // 8) % 2 else 0
        for bx in range(-16, W, 16):
            c.rect(bx + off + 1, by + 1, 14, 6, NAVY)
            c.rect(bx + off + 1, by + 1, 14, 1, DPURPLE)
    # an arched window showing the night sky and a moon
    ax, ay, aw, ah = 96, 40, 64, 64
    arch = c.box_mask(ax, ay + aw // 2, aw, ah - aw // 2) | \
        c.disc_mask(ax + aw // 2 - 0.5, ay + aw // 2, aw // 2)
    c.fill(outline_mask(arch, 2), DGREY)
    c.fill(outline_mask(arch, 1), GREY)
    c.fill(arch, NAVY)
    c.fill(arch & (c.yy > ay + 36), DPURPLE, 8)
    c.fill(arch & (c.yy > ay + 50), DPURPLE)
    c.disc(ax + 44, ay + 20, 9, PYELLOW)
    c.disc(ax + 48, ay + 17, 8, NAVY)          # crescent
    for _ in range(14):
        sx = rng.integers(ax + 3, ax + aw - 3)
        sy = rng.integers(ay + 6, ay + 56)
        if arch[sy, sx] and c.px[sy, sx] in (NAVY, DPURPLE):
            c.px[sy, sx] = WHITE if rng.random() < 0.4 else LGREY
    # bars across the window
    for bx in range(ax + 15, ax + aw, 16):
        c.fill(arch & (c.xx >= bx) & (c.xx < bx + 2), DGREY)
        c.fill(arch & (c.xx == bx), GREY)

    # rocky ceiling with stalactites
    x = np.arange(W)
    ceil = (18 + 5 * np.sin(x / 11.0) + 3 * np.sin(x / 4.3 + 2)).astype(int)
    cm = c.yy < ceil[None, :]
    c.fill(cm, DGREY)
    c.fill(cm & (c.yy > ceil[None, :] - 3), GREY)
    c.fill(cm & (c.yy < 8), BLACK, 8)
    for sx, ln in [(14, 22), (44, 14), (70, 30), (178, 18), (206, 34),
                   (236, 16)]:
        base = ceil[sx] - 1
        for i in range(ln):
            half = max(0, int(4 * (1 - i / ln) + 0.5))
            c.rect(sx - half, base + i, 2 * half + 1, 1, DGREY)
            c.rect(sx - half, base + i, 1, 1, GREY)
        c.rect(sx, base + ln, 1, 2, PCYAN)      # drip

    # light from the lava, the torches and the hero's lantern falls on
    # the back wall only, so it is applied before the foreground is drawn
    ledge_l, ledge_r_y = 160, 144
    lava_top = 184
    warm = {BLACK: DBROWN, NAVY: DBROWN, DPURPLE: RUST, DGREY: RUST,
            GREY: TAN}
    c.remap(c.ellipse_mask(136, lava_top + 8, 62, 66), warm, level=4)
    c.remap(c.ellipse_mask(136, lava_top + 8, 54, 50), warm, level=8)
    c.remap(c.ellipse_mask(136, lava_top + 8, 46, 34), warm)
    torches = [(28, 92), (224, 76)]
    torch_map = {NAVY: DBROWN, DPURPLE: RUST, BLACK: DBROWN}
    for tx, ty in torches:
        lantern_glow(c, tx + 3, ty + 3, 9, 18, torch_map)
    hx, hy = 48, ledge_l - HERO.shape[0]
    lantern_glow(c, hx + 16, hy + 14, 16, 30, LIGHTER)

    # left ledge
    for bx in range(0, 96, 16):
        for by in range(ledge_l, play_h, 16):
            c.block(bx, by, 16, 16, GREY, DGREY, NAVY)
            if (bx // 16 * 7 + by // 16 * 3) % 5 == 0:
                crack(c, bx + 5, by + 5, BLACK, GREY, flip=bx % 32 == 0)
    c.rect(0, ledge_l, 96, 2, LGREY)
    for mx in range(2, 96, 7):
        c.rect(mx, ledge_l, 3, 1, GREEN)        # moss tufts
        c.rect(mx + 1, ledge_l - 1, 1, 1, BGREEN)

    # right ledge (higher)
    for bx in range(176, W, 16):
        for by in range(ledge_r_y, play_h, 16):
            c.block(bx, by, 16, 16, GREY, DGREY, NAVY)
            if (bx // 16 * 5 + by // 16 * 3) % 7 == 1:
                crack(c, bx + 6, by + 4, BLACK, GREY, flip=bx % 32 == 0)
    c.rect(176, ledge_r_y, 80, 2, LGREY)

    # lava pool between the ledges
    lx = np.arange(96, 176)
    surf = (lava_top + np.round(1.5 * np.sin(lx / 5.0))).astype(int)
    for i, xx in enumerate(lx):
        s = surf[i]
        c.rect(xx, s, 1, 1, PYELLOW)
        c.rect(xx, s + 1, 1, 2, YELLOW)
        c.rect(xx, s + 3, 1, 5, ORANGE)
        c.rect(xx, s + 8, 1, play_h - s - 8, RED)
    c.fill(c.box_mask(96, 196, 80, 12), DRED, 8)
    c.fill(c.box_mask(96, 202, 80, 6), DRED)
    for bx, by in [(108, 192), (140, 196), (160, 190)]:
        c.disc(bx, by, 2, YELLOW)
        c.rect(bx - 1, by - 1, 1, 1, WHITE)
    c.disc(124, lava_top - 6, 2, ORANGE)         # popping bubble
    c.rect(123, lava_top - 7, 1, 1, PYELLOW)

    # stepping stone over the lava
    c.block(120, 128, 32, 12, LGREY, GREY, DGREY)
    crack(c, 126, 131, DGREY, LGREY)
    c.fill(c.box_mask(122, 140, 28, 3), BLACK, 8)

    # crystals on the right ledge
    def crystal(cx, base, h, w, light, mid, dark):
        for i in range(h):
            half = int(w * min(1.0, (h - i) / (h * 0.35)))
            y = base - i
            c.rect(cx - half, y, half, 1, mid)
            c.rect(cx, y, half + 1, 1, dark)
            c.rect(cx - half, y, 1, 1, BLACK)
            c.rect(cx + half, y, 1, 1, BLACK)
        c.rect(cx - 1, base - h + 3, 1, h // 2, light)
        c.rect(cx - 1, base - h + 2, 1, 1, WHITE)
    crystal(196, ledge_r_y - 1, 18, 3, PCYAN, CYAN, TEAL)
    crystal(204, ledge_r_y - 1, 11, 2, PCYAN, CYAN, TEAL)
    crystal(188, ledge_r_y - 1, 9, 2, PCYAN, CYAN, TEAL)
    crystal(240, ledge_r_y - 1, 14, 3, LAVENDER, MAGENTA, PURPLE)
    crystal(248, ledge_r_y - 1, 8, 2, LAVENDER, MAGENTA, PURPLE)
    c.rect(196, 118, 1, 5, WHITE)
    c.rect(194, 120, 5, 1, WHITE)

    c.blit(212, ledge_r_y - CHEST.shape[0], CHEST)

    for tx, ty in torches:
        c.blit(tx, ty, TORCH)

    # bats
    c.blit(150, 58, BAT)
    c.blit(186, 84, BAT, flip=True)

    c.blit(hx, hy, HERO)

    # stage banner
    c.rect(64, 26, 128, 24, BLACK)
    c.frame(65, 27, 126, 22, GREY)
    c.frame(66, 28, 124, 20, DGREY)
    c.text_centered(128, 30, "STAGE 2-3", ORANGE)
    c.text_centered(128, 39, "EMBER CAVERNS", WHITE, shadow=DRED)

    # HUD at the bottom
    c.rect(0, play_h, W, H - play_h, BLACK)
    c.rect(0, play_h, W, 1, DGREY)
    c.text(4, play_h + 5, "1P", CYAN)
    c.text(20, play_h + 5, hud_number(18730, 6), WHITE)
    c.blit(64, play_h + 4, LANTERN[1:9, :])
    c.text(74, play_h + 5, "*12", YELLOW)
    for i in range(2):
        c.blit(102 + i * 9, play_h + 5, HEART)
    c.text(122, play_h + 5, "@", DGREY)
    c.text(140, play_h + 5, "KEY", LGREY)
    c.rect(160, play_h + 7, 6, 4, YELLOW)
    c.rect(166, play_h + 8, 6, 1, YELLOW)
    c.rect(170, play_h + 9, 1, 2, YELLOW)
    c.rect(162, play_h + 8, 2, 2, BLACK)
    c.text(200, play_h + 5, "T", LGREY)
    c.text(208, play_h + 5, "188", WHITE)
    c.text(232, play_h + 5, "2-3", ORANGE)
    return c


# --------------------------------------------------------------------------
# Scene 3: title screen, 640x480 (finer detail)
# --------------------------------------------------------------------------

def sky_lantern(c, x, y, s):
    """A floating paper lantern; s = 1 (far) .. 3 (near)."""
    if s == 1:
        c.rect(x, y, 2, 3, ORANGE)
        c.rect(x, y, 2, 1, YELLOW)
        return
    w, h = 3 * s, 4 * s
    c.disc(x + w // 2, y + h // 2, 2 * s + 1, RUST, level=4)
    c.rect(x, y, w, h, ORANGE)
    c.rect(x, y + h - s, w, s, RED)
    c.rect(x + s // 2, y + 1, w - s, h - s - 1, YELLOW)
    c.rect(x + w // 2, y + s, max(1, s // 2), h - 2 * s, PYELLOW)
    c.rect(x, y, w, 1, RED)


def scene_title():
    W, H = 640, 480
    c = Canvas(W, H)
    rng = np.random.default_rng(640480)

    c.gradient_rows(0, 330, [BLACK, NAVY, DPURPLE, PURPLE, MAGENTA], steps=4)

    # stars
    for _ in range(260):
        sx, sy = rng.integers(0, W), rng.integers(0, 250)
        col = [LGREY, PCYAN, WHITE, LAVENDER][rng.integers(0, 4)]
        c.px[sy, sx] = col
    for sx, sy in rng.integers([0, 0], [W, 200], size=(14, 2)):
        c.rect(sx - 2, sy, 5, 1, LGREY)
        c.rect(sx, sy - 2, 1, 5, LGREY)
        c.rect(sx, sy, 1, 1, WHITE)

    # moon with craters
    mx, my, mr = 560, 186, 34
    c.disc(mx, my, mr + 10, DPURPLE, level=4)
    c.disc(mx, my, mr + 5, PURPLE, level=4)
    c.disc(mx, my, mr, PYELLOW)
    c.fill(c.disc_mask(mx, my, mr) & ~c.disc_mask(mx - 6, my - 6, mr), SAND)
    c.fill(c.disc_mask(mx, my, mr) & ~c.disc_mask(mx - 3, my - 3, mr),
           SAND, level=8)
    for cx, cy, r in [(-14, -10, 7), (12, 8, 10), (-8, 20, 5), (20, -18, 4),
                      (-24, 6, 3)]:
        c.disc(mx + cx, my + cy, r, SAND)
        c.fill(c.disc_mask(mx + cx, my + cy, r) &
               ~c.disc_mask(mx + cx + 1, my + cy + 1, r), TAN)
    c.disc(mx - 18, my - 22, 4, WHITE)

    # thin clouds across the moon
    for cy, cx0, cw in [(196, 496, 140), (208, 520, 100), (300, 20, 180)]:
        c.rect(cx0, cy, cw, 2, LAVENDER)
        c.rect(cx0 + 10, cy + 2, cw - 30, 1, PURPLE)

    x = np.arange(W)
    # far mountains
    top = (260 + 26 * np.sin(x / 60.0 + 0.5) + 12 * np.sin(x / 17.0)
           + 6 * np.sin(x / 5.3)).astype(int)
    m = c.yy >= top[None, :]
    c.fill(m, DPURPLE)
    c.fill(m & (c.yy < top[None, :] + 2), PURPLE)
    # nearer hills
    top2 = (318 + 14 * np.sin(x / 40.0 + 2.0)
            + 6 * np.sin(x / 13.0)).astype(int)
    m2 = c.yy >= top2[None, :]
    c.fill(m2, DTEAL)
    c.fill(m2 & (c.yy < top2[None, :] + 2), TEAL)
    c.fill(m2 & (c.yy > 345), NAVY, level=8)

    # village silhouette with lit windows
    base = 372
    houses = [(30, 40, 30), (78, 34, 44), (120, 50, 26), (176, 30, 36),
              (400, 44, 32), (452, 36, 48), (496, 56, 28), (560, 40, 38),
              (604, 36, 30)]
    for hx, hw, hh in houses:
        y0 = base - hh
        c.rect(hx, y0, hw, hh, DGREY)
        c.rect(hx, y0, 2, hh, GREY)
        # pitched roof with a bright ridge line and a shadow under the eaves
        for i in range(hw + 8):
            h_ = min(i, hw + 8 - i) // 2
            c.rect(hx - 4 + i, y0 - h_, 1, h_ + 1, DRED)
            c.rect(hx - 4 + i, y0 - h_, 1, 1, RED)
        c.rect(hx, y0 + 1, hw, 2, BLACK)
        # windows
        for wx in range(hx + 6, hx + hw - 8, 12):
            for wy in range(y0 + 6, base - 10, 14):
                lit = rng.random() < 0.7
                c.rect(wx, wy, 6, 7, BLACK)
                c.rect(wx + 1, wy + 1, 4, 5, YELLOW if lit else NAVY)
                if lit:
                    c.rect(wx + 1, wy + 1, 2, 2, PYELLOW)
                    c.rect(wx + 3, wy + 1, 1, 5, ORANGE)
                    c.rect(wx + 1, wy + 3, 4, 1, ORANGE)
        c.rect(hx + hw // 2 - 3, base - 12, 7, 12, DBROWN)
    # clock tower
    tx = 300
    c.rect(tx, 250, 40, base - 250, DGREY)
    c.rect(tx, 250, 3, base - 250, GREY)
    c.rect(tx + 37, 250, 3, base - 250, BLACK)
    for i in range(24):
        c.rect(tx - 4 + i, 250 - i, 48 - 2 * i, 1, DRED if i % 3 else RED)
    c.rect(tx + 19, 214, 2, 14, DGREY)
    c.rect(tx + 17, 212, 6, 3, YELLOW)
    c.disc(tx + 20, 276, 11, BLACK)
    c.disc(tx + 20, 276, 10, PYELLOW)
    c.disc(tx + 20, 276, 8, SAND)
    c.rect(tx + 20, 268, 1, 8, BLACK)
    c.rect(tx + 20, 276, 6, 1, BLACK)
    c.rect(tx + 14, 300, 12, 18, BLACK)
    c.rect(tx + 15, 301, 10, 16, ORANGE)
    c.rect(tx + 16, 302, 4, 6, PYELLOW)

    # foreground meadow
    fg = (base + 2 + 4 * np.sin(x / 31.0) + 2 * np.sin(x / 7.0)).astype(int)
    f = c.yy >= fg[None, :]
    c.fill(f, DGREEN)
    c.fill(f & (c.yy < fg[None, :] + 2), GREEN)
    c.fill(f & (c.yy > 420), BLACK, level=8)
    c.fill(f & (c.yy > 440), BLACK)
    for gx in range(0, W, 5):
        gy = fg[gx]
        c.rect(gx, gy - 2, 1, 2, GREEN)
        c.rect(gx + 2, gy - 1, 1, 1, BGREEN)

    # sky lanterns drifting up from the village
    for _ in range(40):
        lx, ly = rng.integers(10, W - 10), rng.integers(150, 330)
        sky_lantern(c, int(lx), int(ly), 1)
    for lx, ly in [(60, 230), (150, 200), (250, 170), (420, 210), (470, 180),
                   (600, 230), (380, 150), (110, 140)]:
        sky_lantern(c, lx, ly, 2)
    for lx, ly in [(40, 170), (586, 170), (210, 228)]:
        sky_lantern(c, lx, ly, 3)

    # title logo
    tm = pad(logo_mask("TOLLIWAG", 6), 8)
    th, tw = tm.shape
    lx0, ly0 = (W - tw) // 2, 24
    shadow = np.zeros_like(tm)
    shadow[6:, 6:] = tm[:-6, :-6]
    ring = outline_mask(tm, 3)
    c.stamp(lx0, ly0, outline_mask(tm | shadow, 1) | shadow, BLACK)
    c.stamp(lx0, ly0, shadow & ~tm & ~ring, DPURPLE)
    c.stamp(lx0, ly0, ring, BLACK)
    # gradient fill by row
    rows = np.arange(th)[:, None]
    inner_top, inner_bot = 8, th - 8
    t = (rows - inner_top) / (inner_bot - inner_top)
    bands = [(0.0, PYELLOW), (0.12, YELLOW), (0.5, ORANGE), (0.8, RED)]
    for start, col in bands:
        c.stamp(lx0, ly0, tm & (t >= start), col)
    # dither the seams between colour bands
    yy, xx = np.mgrid[0:th, 0:tw]
    bay = BAYER4[(yy + ly0) % 4, (xx + lx0) % 4]
    for start, col in bands[1:]:
        seam = tm & (t >= start - 0.06) & (t < start) & (bay < 8)
        c.stamp(lx0, ly0, seam, col)
    # bright top edge and dark bottom edge of every stroke
    above = np.roll(tm, 1, 0)
    below = np.roll(tm, -1, 0)
    c.stamp(lx0, ly0, tm & ~above, WHITE)
    c.stamp(lx0, ly0, tm & ~np.roll(above, 1, 0) & above, PYELLOW)
    c.stamp(lx0, ly0, tm & ~below, DRED)
    c.stamp(lx0, ly0, tm & ~np.roll(below, -1, 0) & below, DRED)

    sub = "AND THE SKY LANTERNS"
    c.text_centered(W // 2 + 1, ly0 + th + 6, sub, BLACK, scale=3)
    c.text_centered(W // 2, ly0 + th + 4, sub, CYAN, scale=3, shadow=DTEAL)

    # the hero, large, on the hill to the left
    c.blit(64, 382 - HERO.shape[0] * 4 + 4, HERO, scale=4)

    # menu panel
    px0, py0, pw, ph = 212, 384, 216, 80
    c.rect(px0 + 4, py0 + 4, pw, ph, BLACK)
    c.rect(px0, py0, pw, ph, NAVY)
    c.frame(px0, py0, pw, ph, LGREY)
    c.frame(px0 + 1, py0 + 1, pw - 2, ph - 2, GREY)
    c.frame(px0 + 3, py0 + 3, pw - 6, ph - 6, DBLUE)
    items = ["NEW JOURNEY", "CONTINUE", "OPTIONS"]
    for i, item in enumerate(items):
        y = py0 + 12 + i * 20
        col = WHITE if i == 0 else LGREY
        c.text(px0 + 44, y, item, col, scale=2, shadow=BLACK)
    c.text(px0 + 18, py0 + 12, ">", YELLOW, scale=2, shadow=RUST)

    # bottom lines in the native 1x font
    c.text_centered(W // 2, 470, "HI-SCORE 052300     FERNLANDS EDITION "
                    "V1.02     1 PLAYER  2 PLAYERS", LGREY)
    c.text(524, 392, "PUSH", ORANGE, scale=2, shadow=DRED)
    c.text(524, 412, "START", ORANGE, scale=2, shadow=DRED)
    c.text(524, 432, "BUTTON", ORANGE, scale=2, shadow=DRED)
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
        ("TOLLIWAG AND THE SKY LANTERNS - FERNLANDS", white, big),
        ("THE QUICK BROWN FOX JUMPS OVER THE LAZY DOG 0123456789 +-=/*:.,!?()",
         white, small),
        ("SCORE 004250  LANTERNS 07  WORLD 1-1  TIME 312  LIVES 2",
         white, small),
        ("GREY TEXT: HALF BRIGHT LETTERS 128/255", (128, 128, 128), big),
        ("RED TEXT: THE LANTERN GLOWS IN THE DARK", (255, 40, 40), big),
        ("GREEN TEXT: MOSSBRIDGE MEADOW 1-1", (40, 255, 40), big),
        ("BLUE TEXT: DEEP WATER BELOW THE BRIDGE", (64, 96, 255), big),
        ("YELLOW TEXT: 12 LANTERNS FOUND", (255, 230, 40), big),
        ("CYAN TEXT: CRYSTAL CAVE 2-3", (40, 230, 255), big),
        ("MAGENTA TEXT: PRESS START", (255, 40, 220), big),
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


def main(argv):
    out_dir = argv[1] if len(argv) > 1 else os.path.dirname(
        os.path.abspath(__file__))
    os.makedirs(out_dir, exist_ok=True)
    jobs = [
        ("scene-320x240.png", lambda: scene_meadow().to_rgb()),
        ("scene-256x224.png", lambda: scene_caverns().to_rgb()),
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


if __name__ == "__main__":
    main(sys.argv)
