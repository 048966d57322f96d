"""How near each mask cell is to a filtered kernel's own upscale, on the bundled samples.

    python bench/kernel_light.py [--preset NAME]

For the cubic and Lanczos-3 kernels, renders every bundled sample with one preset
and compares each whole mask cell of the written file's light with the same cell of
Pillow's unclipped mode 'F' upscale of the source (per channel, limited to what a
cell can show: [0, cell area]), over the cells lit above 1 % of white. Prints, as
Markdown: the worst and 99th-percentile cell error, the share of the upscale's light
no cell can show (ringing below black, overshoot above white), and the light kept
against the source. Light is decoded by the sRGB formulas, luminance by BT.709.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
from PIL import Image

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from crtfilter import color  # noqa: E402
from crtfilter.engine import render_codes  # noqa: E402
from crtfilter.errors import CrtfilterError  # noqa: E402
from crtfilter.presets import load_preset  # noqa: E402
from crtfilter.scale import whole_cell_sums  # noqa: E402

METHODS = {"cubic": Image.Resampling.BICUBIC, "lanczos3": Image.Resampling.LANCZOS}


def figures(codes: np.ndarray, settings, kernel: str) -> tuple[float, float, float, float]:
    render = render_codes(codes, settings)
    g, cell, enc = render.geometry, render.tile, render.encoding
    src = enc.decode(codes).astype(np.float32)
    out = enc.decode(render.codes[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w, :3])
    up = np.stack([np.asarray(Image.fromarray(src[..., c], "F").resize((g.pic_w, g.pic_h), METHODS[kernel]))
                   for c in range(3)], axis=-1)
    area = float(np.prod(cell))
    unclipped = np.stack([whole_cell_sums(up[..., c], cell) for c in range(3)], axis=-1)
    shown = np.clip(unclipped, 0, area)
    have = np.stack([whole_cell_sums(out[..., c], cell) for c in range(3)], axis=-1) @ enc.luma
    want = shown @ enc.luma
    lit = want > 0.01 * area
    error = np.abs(have[lit] / want[lit] - 1)
    unshowable = np.abs(unclipped - shown).sum() / shown.sum()
    kept = float(color.luminance(out, enc.luma).mean() / color.luminance(src, enc.luma).mean())
    return float(error.max()), float(np.percentile(error, 99)), float(unshowable), kept


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--preset", default="aperture-soft-within-4k")
    args = parser.parse_args()
    try:
        preset = load_preset(args.preset)
    except CrtfilterError as exc:
        sys.exit(f"kernel_light: {exc}")
    print(f"preset {preset.name}; cells lit above 1 % of white, against Pillow's upscale as cells can show it\n")
    print("| sample | kernel | worst cell | p99 cell | light no cell can show | light kept |")
    print("|---|---|---|---|---|---|")
    for path in sorted((ROOT / "samples").glob("*.png")):
        codes = np.asarray(Image.open(path).convert("RGB"))
        for kernel in METHODS:
            worst, p99, unshowable, kept = figures(codes, preset.with_options(kernel=kernel).settings, kernel)
            print(f"| {path.stem} | {kernel} | {worst:.2%} | {p99:.2%} | {unshowable:.2%} | {kept:.3%} |")


if __name__ == "__main__":
    main()
