"""What video encoding does to the mask: each shipped preset's mask contrast and light kept
after a round trip through each ``--delivery`` (H.264 by the ffmpeg of imageio-ffmpeg).

A flat 18 % grey source (in linear light) is rendered, encoded as a short clip, decoded as a
player would, and measured: mask contrast is Michelson contrast (1st and 99th percentile) of
the linear luminance, and of the red channel alone (the colour stripes that chroma
subsampling blurs), as a share of the rendered file's own; light kept is the decoded mean
luminance over the rendered one.

    python bench/chroma.py [--frames 4]
"""

from __future__ import annotations

import argparse
import sys
from fractions import Fraction

import numpy as np

from crtfilter import clips
from crtfilter.audit import REFERENCE_SOURCE, michelson
from crtfilter.color import LUMA_BT709
from crtfilter.engine import render_codes
from crtfilter.errors import CrtfilterError
from crtfilter.files import PendingFile
from crtfilter.presets import load_preset, shipped_names


def _round_trip(codes: np.ndarray, delivery: str, frames: int, where: str) -> np.ndarray:
    h, w = codes.shape[:2]
    with PendingFile(f"{where}/.chroma-bench.mkv") as target:
        with clips.Encoder(target, "mkv", w, h, Fraction(30), delivery=delivery) as enc:
            for _ in range(frames):
                enc.write(codes)
            enc.finish()
        decoded = list(clips.decode_pending(target, w, h))
    return decoded[-1]


def figures(codes: np.ndarray, table: np.ndarray, g) -> tuple[float, float, float]:
    pic = codes[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w]
    lin = table[pic]
    y = lin @ LUMA_BT709
    return float(y.mean()), michelson(y), michelson(lin[..., 0])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--frames", type=int, default=4)
    ap.add_argument("--where", default=".", help="folder for the unnamed trial files")
    args = ap.parse_args(argv)
    # 18 % grey in linear light is sRGB code 118 (IEC 61966-2-1 decoding, rounded)
    src = np.full((REFERENCE_SOURCE[1], REFERENCE_SOURCE[0], 3), 118, np.uint8)
    print("| preset | delivery | light kept | mask contrast kept | red stripe contrast kept |")
    print("|---|---|---|---|---|")
    for name in shipped_names():
        s = load_preset(name).settings
        if s.output_range == "hdr":
            continue  # clips are written in standard range
        render = render_codes(src, s)
        table = render.encoding.table(8)
        y0, c0, r0 = figures(render.codes, table, render.geometry)
        for delivery in clips.DELIVERIES:
            try:
                back = _round_trip(render.codes, delivery, args.frames, args.where)
            except CrtfilterError as exc:
                print(f"crtfilter: {exc}", file=sys.stderr)
                return 1
            y, c, r = figures(back, table, render.geometry)
            print(f"| {name} | {delivery} | {100 * y / y0:.2f} % | {100 * c / c0:.0f} % | "
                  f"{100 * r / r0 if r0 else 100:.0f} % |", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
