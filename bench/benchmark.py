"""Speed and memory of crtfilter, measured side by side with baselines in one run.

    python bench/benchmark.py [--quick]

Every figure is the median of several runs, and each ratio compares two
things measured in the same run, interleaved, so that a busy shared machine
slows both alike. Prints a Markdown table with the machine it ran on.

- compute: ``crtfilter.render`` of a 320x240 scene to 2880x2160 with the
  default preset, against (a) a memory floor, ``numpy.copy`` of an array the
  size of the output, and (b) the plain NumPy way: Pillow nearest resize,
  float multiply by the same mask, cast to uint8.
- end to end: ``crtfilter render`` of a folder of 16 such scenes to PNGs,
  against a script that only does Pillow's nearest resize and Pillow's
  default save of the same files.
- startup: ``crtfilter --help``.
- scaling: images per second with ``--jobs 2`` against ``--jobs 1``, from the
  extra time a larger batch takes (so process start-up cancels out).
- memory: peak resident memory of one 4K render (``crtfilter render``).
"""

from __future__ import annotations

import os
import platform
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from PIL import Image

ROOT = Path(__file__).resolve().parent.parent
SCENE = ROOT / "samples" / "scene-320x240.png"
CLI = [sys.executable, "-m", "crtfilter"]

BASELINE_SCRIPT = """
import sys
from pathlib import Path
from PIL import Image
src, out = Path(sys.argv[1]), Path(sys.argv[2])
out.mkdir(parents=True, exist_ok=True)
for f in sorted(src.glob("*.png")):
    with Image.open(f) as im:
        im.convert("RGB").resize((im.width * 9, im.height * 9), Image.Resampling.NEAREST).save(out / f.name)
"""


def machine() -> str:
    model = "unknown CPU"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    import numba

    return (f"{cores} cores, {model}; Python {platform.python_version()}, NumPy {np.__version__}, "
            f"numba {numba.__version__}")


def timed(fn) -> float:
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def interleaved(functions: dict, runs: int) -> dict:
    """Median seconds of each function, runs taken in turn."""
    times = {name: [] for name in functions}
    for _ in range(runs):
        for name, fn in functions.items():
            times[name].append(timed(fn))
    return {name: statistics.median(values) for name, values in times.items()}


def bench_compute(runs: int) -> dict:
    import crtfilter
    from crtfilter.masks import build_mask
    from crtfilter.presets import load_preset
    from crtfilter.scale import plan_geometry

    with Image.open(SCENE) as im:
        pixels = np.asarray(im.convert("RGB"))
    preset = load_preset()
    geometry = plan_geometry(320, 240, preset.settings.geometry)
    mask = build_mask(geometry, preset.settings.mask).pixels()          # the same mask, float32
    out_like = np.zeros((geometry.out_h, geometry.out_w, 3), np.uint8)
    source = Image.fromarray(pixels)

    def plain_numpy():
        big = np.asarray(source.resize((geometry.out_w, geometry.out_h), Image.Resampling.NEAREST))
        return (big.astype(np.float32) * mask).astype(np.uint8)

    crtfilter.render(pixels)  # compile or load the fast path, and fill the plan cache
    plain_numpy()
    medians = interleaved({
        "render": lambda: crtfilter.render(pixels),
        "floor": lambda: np.copy(out_like),
        "numpy": plain_numpy,
    }, runs)
    return medians


def make_scenes(folder: Path, n: int) -> None:
    """n different 320x240 frames: the bundled scene, shifted."""
    folder.mkdir(parents=True, exist_ok=True)
    with Image.open(SCENE) as im:
        base = np.asarray(im.convert("RGB"))
    for i in range(n):
        Image.fromarray(np.roll(base, (i * 7, i * 13), axis=(0, 1))).save(folder / f"scene-{i:02d}.png")


def run(cmd: list[str]) -> float:
    t = time.perf_counter()
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t


def bench_end_to_end(work: Path, runs: int) -> dict:
    scenes = work / "scenes16"
    make_scenes(scenes, 16)
    script = work / "baseline.py"
    script.write_text(BASELINE_SCRIPT)
    times = {"crtfilter": [], "baseline": []}
    for i in range(runs):
        times["crtfilter"].append(run(CLI + ["render", str(scenes), "-o", str(work / f"crt{i}"), "-q"]))
        times["baseline"].append(run([sys.executable, str(script), str(scenes), str(work / f"base{i}")]))
        shutil.rmtree(work / f"crt{i}")
        shutil.rmtree(work / f"base{i}")
    return {k: statistics.median(v) for k, v in times.items()}


def bench_startup(runs: int) -> float:
    exe = shutil.which("crtfilter")
    cmd = [exe, "--help"] if exe else CLI + ["--help"]
    run(cmd)
    return statistics.median(run(cmd) for _ in range(runs))


def bench_scaling(work: Path, runs: int, small: int = 8, large: int = 40) -> dict:
    for n in (small, large):
        make_scenes(work / f"scenes{n}", n)
    marginal = {}
    for jobs in (1, 2):
        extra = []
        for i in range(runs):
            t_small = run(CLI + ["render", str(work / f"scenes{small}"), "-o", str(work / f"s{jobs}{i}"), "-q",
                                 "-j", str(jobs)])
            t_large = run(CLI + ["render", str(work / f"scenes{large}"), "-o", str(work / f"l{jobs}{i}"), "-q",
                                 "-j", str(jobs)])
            extra.append(t_large - t_small)
            shutil.rmtree(work / f"s{jobs}{i}")
            shutil.rmtree(work / f"l{jobs}{i}")
        marginal[jobs] = (large - small) / statistics.median(extra)  # images per second
    return marginal


def bench_memory(work: Path) -> float:
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    run(CLI + ["render", str(SCENE), "-o", str(work / "memory.png"), "--force", "-j", "1"])
    after = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return max(before, after) / 1024  # kB -> MB (the largest child so far: this one is the largest)


def main() -> int:
    quick = "--quick" in sys.argv
    runs = 3 if quick else 9
    rows = []
    with tempfile.TemporaryDirectory(prefix="crtfilter-bench-") as tmp:
        work = Path(tmp)
        memory = bench_memory(work)
        c = bench_compute(runs * 3)
        e = bench_end_to_end(work, 3 if quick else 5)
        startup = bench_startup(runs)
        s = bench_scaling(work, 2 if quick else 3)
    floor_ratio = c["render"] / c["floor"]
    speedup = c["numpy"] / c["render"]
    e2e = e["crtfilter"] / e["baseline"]
    scaling = s[2] / s[1]
    rows = [
        ("compute: render 320x240 -> 2880x2160, default preset", f"{1000 * c['render']:.1f} ms", ""),
        ("  memory floor: numpy.copy of the output", f"{1000 * c['floor']:.1f} ms",
         f"render / floor = {floor_ratio:.1f}x (target <= 12x, aim 6x)"),
        ("  plain NumPy: nearest resize, float multiply, cast", f"{1000 * c['numpy']:.1f} ms",
         f"plain / render = {speedup:.1f}x faster (target >= 4x, aim 8x)"),
        ("end to end: crtfilter render, 16 scenes to PNG", f"{e['crtfilter']:.2f} s", ""),
        ("  baseline: Pillow nearest resize + default save", f"{e['baseline']:.2f} s",
         f"crtfilter / baseline = {e2e:.2f} (target <= 0.8)"),
        ("startup: crtfilter --help", f"{1000 * startup:.0f} ms", "target < 400 ms"),
        ("scaling: --jobs 1, images per second", f"{s[1]:.2f}", ""),
        ("  --jobs 2, images per second", f"{s[2]:.2f}", f"2 jobs / 1 job = {scaling:.2f}x (target >= 1.7x)"),
        ("memory: peak resident, one 4K render", f"{memory:.0f} MB", "target <= 350 MB"),
    ]
    print(f"Machine: {machine()}\n")
    print("| measurement | median | ratio and target |")
    print("|---|---|---|")
    for name, value, note in rows:
        print(f"| {name} | {value} | {note} |")
    met = (floor_ratio <= 12 and speedup >= 4 and e2e <= 0.8 and startup < 0.4 and scaling >= 1.7
           and memory <= 350)
    print(f"\nall targets met: {'yes' if met else 'no'}")
    return 0 if met else 1


if __name__ == "__main__":
    sys.exit(main())
