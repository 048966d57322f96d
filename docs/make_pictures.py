"""Draw the README's comparison picture from a bundled sample.

    python docs/make_pictures.py

Writes docs/comparison.png: the same 1:1 crop of a 4K render three ways -
a plain nearest upscale, a plain multiply by the default preset's mask (the
darkening crtfilter avoids), and crtfilter's default preset - each captioned
with the mean luminance it keeps.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from PIL import Image, ImageDraw, ImageFont

from crtfilter import color
from crtfilter.engine import render_codes
from crtfilter.presets import load_preset
from crtfilter.scale import upscale

HERE = Path(__file__).resolve().parent
SAMPLE = HERE.parent / "samples" / "scene-320x240.png"
CROP = (2250, 576, 420, 330)  # x, y, w, h in output pixels of the 2880x2160 render


def main() -> None:
    with Image.open(SAMPLE) as im:
        codes = np.asarray(im.convert("RGB"))
    preset = load_preset()
    render = render_codes(codes, preset.settings)
    g = render.geometry
    src = color.decode(codes)
    up = upscale(src, g.pic_w, g.pic_h, "nearest")
    multiplied = up * render.mask.pixels()
    source_y = render.source_luminance
    panels = [
        ("nearest upscale", color.encode_srgb(up), 1.0),
        ("plain multiply by the mask", color.encode_srgb(multiplied),
         color.mean_luminance(multiplied) / source_y),
        (f"crtfilter, {preset.name}", render.codes,
         color.mean_luminance(color.decode(render.codes)) / source_y),
    ]
    x, y, w, h = CROP
    font = ImageFont.load_default(size=20)
    caption = 56
    sheet = Image.new("RGB", (3 * w + 4 * 12, h + caption + 24), (24, 24, 28))
    draw = ImageDraw.Draw(sheet)
    for i, (name, pixels, kept) in enumerate(panels):
        left = 12 + i * (w + 12)
        sheet.paste(Image.fromarray(np.ascontiguousarray(pixels[y:y + h, x:x + w])), (left, 12))
        draw.text((left, h + 20), name, fill=(235, 235, 235), font=font)
        draw.text((left, h + 44), f"whole frame keeps {100 * kept:.1f} % of the light",
                  fill=(190, 190, 190), font=font)
    sheet.save(HERE / "comparison.png", optimize=True)
    print(HERE / "comparison.png")


if __name__ == "__main__":
    main()
