"""What lossy output does to the held light and to the mask: PNG against JPEG, WebP, AVIF.

    python bench/lossy_figures.py [--preset NAME]

Renders the bundled 320x240 scene and a uniform 18 % grey field with one preset,
encodes each result as PNG, JPEG at quality 95 with 4:4:4 and with 4:2:0 chroma
subsampling, WebP and AVIF at quality 95, decodes every file again, and prints,
per format: the bytes, the light kept (decoded output over input mean luminance)
and the mask contrast on the grey field (Michelson, 1st to 99th percentile, of
linear luminance), as Markdown.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
from PIL import Image

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from crtfilter import color, formats  # noqa: E402
from crtfilter.audit import GREY_CODE, measure_codes, michelson  # noqa: E402
from crtfilter.engine import render_codes  # noqa: E402
from crtfilter.files import encode_png, read_png_codes  # noqa: E402
from crtfilter.presets import load_preset  # noqa: E402

CASES = [("PNG", "png", {}), ("JPEG q95 4:4:4", "jpeg", {"subsampling": "4:4:4"}),
         ("JPEG q95 4:2:0", "jpeg", {"subsampling": "4:2:0"}), ("WebP q95", "webp", {}),
         ("AVIF q95", "avif", {})]


def _decoded(codes: np.ndarray, name: str, options: dict) -> tuple[np.ndarray, int]:
    if name == "png":
        import tempfile

        data = encode_png(codes)
        with tempfile.NamedTemporaryFile(suffix=".png") as f:
            f.write(data)
            f.flush()
            return read_png_codes(f.name), len(data)
    data, _notes = formats.encode_lossy(codes, name, None, quality=95, **options)
    return formats.decode_lossy(data), len(data)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--preset", default="aperture-fine-within-4k")
    args = parser.parse_args()
    settings = load_preset(args.preset).settings
    with Image.open(ROOT / "samples" / "scene-320x240.png") as im:
        scene = np.asarray(im.convert("RGB"))
    render = render_codes(scene, settings)
    grey = render_codes(np.full((240, 320, 3), GREY_CODE, np.uint8), settings)
    g = render.geometry
    print(f"Preset {args.preset}, scene-320x240.png -> {g.out_w}x{g.out_h}\n")
    print("| format | bytes | light kept, scene | mask contrast, 18 % grey |")
    print("|---|---|---|---|")
    available = formats.available()
    for label, name, options in CASES:
        if name not in available:
            print(f"| {label} | not available in this Pillow | | |")
            continue
        codes, size = _decoded(render.codes, name, options)
        kept = measure_codes(codes, g).luminance / render.source_luminance
        grey_codes, _ = _decoded(grey.codes, name, options)
        gg = grey.geometry
        pic = grey_codes[gg.pic_y:gg.pic_y + gg.pic_h, gg.pic_x:gg.pic_x + gg.pic_w, :3]
        contrast = michelson(color.luminance(color.decode_table("srgb", 8)[pic]))
        print(f"| {label} | {size / 1024:.0f} KB | {100 * kept:.2f} % | {contrast:.3f} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
