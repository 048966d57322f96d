"""Render every shipped preset on every bundled sample and print the light figures.

    python bench/sample_figures.py [OUT_FOLDER]

Prints a Markdown table (one row per preset: the lowest and highest share of
the input's mean luminance kept over the samples, measured from the written
files, and what a plain multiply by the same mask would have kept) and writes
the full per-image figures to OUT_FOLDER/figures.json.
"""

from __future__ import annotations

import json
import sys
import tempfile
from pathlib import Path

from crtfilter.audit import preset_figures
from crtfilter.job import render_file
from crtfilter.presets import all_presets

ROOT = Path(__file__).resolve().parent.parent


def main() -> None:
    out = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(tempfile.mkdtemp(prefix="crtfilter-figures-"))
    samples = sorted((ROOT / "samples").glob("*.png"))
    rows, everything = [], []
    for preset in all_presets():
        ratios, multiply = [], []
        for sample in samples:
            dst = out / preset.name / sample.name
            dst.parent.mkdir(parents=True, exist_ok=True)
            report = render_file(sample, dst, preset=preset, force=True)
            everything.append(report)
            ratios.append(report["luminance"]["ratio"])
            multiply.append(report["luminance"]["plain_multiply_ratio"])
        contrast = preset_figures(preset.settings)["contrast"]
        rows.append((preset.name, min(ratios), max(ratios), sum(multiply) / len(multiply), contrast))
        print(f"{preset.name}: done", file=sys.stderr)
    print("| preset | light kept, lowest | light kept, highest | plain multiply keeps | "
          "mask contrast at 18 % grey |")
    print("|---|---|---|---|---|")
    for name, lo, hi, mul, contrast in rows:
        print(f"| `{name}` | {100 * lo:.2f} % | {100 * hi:.2f} % | {100 * mul:.2f} % | {contrast:.3f} |")
    (out / "figures.json").write_text(json.dumps(everything, indent=2))
    print(f"\n{len(samples)} samples x {len(rows)} presets; per-image figures in {out / 'figures.json'}",
          file=sys.stderr)


if __name__ == "__main__":
    main()
