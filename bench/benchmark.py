"""Speed and memory of crtfilter, measured side by side with baselines in one run.

    python bench/benchmark.py [--quick]

Every ratio compares two things measured in the same run, taken in turn, so
that a busy shared machine slows both alike; figures are medians. Prints
Markdown tables with the machine they ran on, and exits 1 when a target is
missed.

1. **Every preset, cold and warm**: the wall time of ``crtfilter render`` of one
   320x240 scene as a whole command, for every shipped preset and for
   ``--dither ordered``, ``--white 9300k`` and ``--scale 4.5``: cold (an empty
   numba cache: ``NUMBA_CACHE_DIR`` set to a fresh folder, so the first run
   compiles what it needs) and warm (the same command again, median of a few),
   each warm time against the default preset's warm time.
2. **Compute** at 2880x2160: ``crtfilter.engine.render_codes`` by the table
   route (default preset) and by the fused route with a cubic kernel and each
   mask (and once with plain rounding, for what holding each cell's light costs),
   against a memory floor, ``numpy.copy`` of the output.
3. **End to end**: ``crtfilter render`` of 16 scenes to PNG against a Pillow
   script (nearest resize and default save) and a libvips script (nearest
   resize, multiply by a tiled stripe-and-scanline mask, PNG save at
   compression 6), with the bytes each wrote. The libvips line needs
   ``pip install pyvips pyvips-binary`` (the ``bench`` extra); without it the
   line says so.
4. **Start-up, scaling, memory**: ``crtfilter --help``; images per second
   with ``--jobs 2`` against ``--jobs 1``; peak resident memory of one 4K
   render with the default and with a cubic preset.
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

PILLOW_SCRIPT = """
import sys
from pathlib import Path
from PIL import Image
src, out = Path(sys.argv[1]), Path(sys.argv[2])
out.mkdir(parents=True, exist_ok=True)
for f in sorted(src.glob("*.png")):
    with Image.open(f) as im:
        im.convert("RGB").resize((im.width * 9, im.height * 9), Image.Resampling.NEAREST).save(out / f.name)
"""

VIPS_SCRIPT = """
import sys
from pathlib import Path
import numpy as np
import pyvips
src, out = Path(sys.argv[1]), Path(sys.argv[2])
out.mkdir(parents=True, exist_ok=True)
# one 3 x 9 tile: red, green and blue stripes, and a dark scanline gap in every 9 rows
tile = np.zeros((9, 3, 3), np.float32)
for y in range(9):
    for x in range(3):
        tile[y, x, x] = 1.0 if 2 <= y <= 6 else 0.35
tile = pyvips.Image.new_from_array(tile)
mask = None
for f in sorted(src.glob("*.png")):
    big = pyvips.Image.new_from_file(str(f), access="sequential")[:3].resize(9, kernel="nearest")
    if mask is None:
        mask = tile.replicate(big.width // 3 + 1, big.height // 9 + 1).crop(0, 0, big.width, big.height)
    (big * mask).cast("uchar").write_to_file(str(out / f.name), compression=6)
"""

#: Target bounds, named as in the tables.
TARGETS = {
    "warm_vs_default": 1.5,
    "cold_seconds": 20.0,
    "fused_vs_floor": 25.0,
    "table_vs_floor": 4.0,
    "vs_pillow": 0.6,
    "vs_vips": 1.0,
    "bytes_vs_vips": 1.0,
    "startup": 0.4,
    "jobs_scaling": 1.7,
    "memory_cubic": 250.0,
}


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


def run(cmd: list[str], env: dict | None = None) -> float:
    # Python's byte-code cache on, as after any ``pip install`` (a development shell that
    # sets PYTHONDONTWRITEBYTECODE would make every run compile crtfilter's modules again)
    env = {k: v for k, v in (os.environ if env is None else env).items() if k != "PYTHONDONTWRITEBYTECODE"}
    t = time.perf_counter()
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
    return time.perf_counter() - t


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


def shipped_presets() -> list[str]:
    from crtfilter.presets import all_presets

    return [p.name for p in all_presets()]


def bench_cold_warm(work: Path, warm_runs: int) -> list[dict]:
    """Cold and warm wall time of one render per case, with the default's warm time beside each."""
    out = work / "one.png"
    base = CLI + ["render", str(SCENE), "-o", str(out), "--force", "-q"]
    cases = [(name, ["-p", name]) for name in shipped_presets()]
    cases += [(f"default, {' '.join(o)}", o) for o in (["--dither", "ordered"], ["--white", "9300k"],
                                                       ["--scale", "4.5"])]
    rows = []
    for n, (name, options) in enumerate(cases):
        env = {**os.environ, "NUMBA_CACHE_DIR": str(work / f"cache-{n}")}
        cold = run(base + options, env)
        warm, default = [], []
        for _ in range(warm_runs):
            warm.append(run(base + options, env))
            default.append(run(base, env))
        rows.append({"case": name, "cold": cold, "warm": statistics.median(warm),
                     "default": statistics.median(default)})
    return rows


def bench_compute(runs: int) -> list[dict]:
    from crtfilter.engine import render_codes
    from crtfilter.masks import MaskSettings
    from crtfilter.plan import Settings
    from crtfilter.presets import load_preset
    from crtfilter.scale import GeometrySettings

    with Image.open(SCENE) as im:
        pixels = np.asarray(im.convert("RGB")).copy()
    cases = [("table route: default preset", load_preset().settings)]
    for phosphor in ("aperture", "slot", "dots", "none"):
        cases.append((f"fused route: cubic, {phosphor} mask",
                      Settings(kernel="cubic", geometry=GeometrySettings(scale=9),
                               mask=MaskSettings(phosphor=phosphor, triad_pitch=3.0, slot_height=9.0))))
    # what holding each cell's light to the last code costs there, beside plain rounding
    cases.append(("fused route: cubic, aperture mask, --rounding nearest",
                  Settings(kernel="cubic", geometry=GeometrySettings(scale=9), rounding="nearest",
                           mask=MaskSettings(phosphor="aperture", triad_pitch=3.0, slot_height=9.0))))
    rows = []
    for name, settings in cases:
        first = render_codes(pixels, settings)  # compile or load, and fill the plan cache
        like = np.zeros_like(first.codes)
        m = interleaved({"render": lambda s=settings: render_codes(pixels, s), "floor": lambda: np.copy(like)},
                        runs)
        rows.append({"case": name, "route": first.route, "render": m["render"], "floor": m["floor"],
                     "size": first.codes.shape})
    return rows


def make_scenes(folder: Path, n: int) -> None:
    """n different 320x240 frames: the bundled scene, shifted."""
    folder.mkdir(parents=True, exist_ok=True)
    with Image.open(SCENE) as im:
        base = np.asarray(im.convert("RGB"))
    for i in range(n):
        Image.fromarray(np.roll(base, (i * 7, i * 13), axis=(0, 1))).save(folder / f"scene-{i:02d}.png")


def folder_bytes(folder: Path) -> int:
    return sum(p.stat().st_size for p in folder.rglob("*.png"))


def bench_end_to_end(work: Path, runs: int) -> dict:
    scenes = work / "scenes16"
    make_scenes(scenes, 16)
    pillow, vips = work / "pillow.py", work / "vips.py"
    pillow.write_text(PILLOW_SCRIPT)
    vips.write_text(VIPS_SCRIPT)
    try:
        import pyvips  # noqa: F401
        commands = {"vips": [sys.executable, str(vips)]}
    except (ImportError, OSError):
        commands = {}
    commands = {"crtfilter": CLI + ["render", str(scenes), "-q", "-o"], "pillow": [sys.executable, str(pillow)],
                **commands}
    times = {k: [] for k in commands}
    sizes = {}
    for i in range(runs):
        for name, cmd in commands.items():
            target = work / f"{name}{i}"
            if name == "crtfilter":
                times[name].append(run(cmd + [str(target)]))
            else:
                times[name].append(run(cmd + [str(scenes), str(target)]))
            sizes[name] = folder_bytes(target)
            shutil.rmtree(target)
    return {name: {"seconds": statistics.median(v), "bytes": sizes[name]} for name, v in times.items()}


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


def peak_memory(args: list[str]) -> float:
    """Peak resident memory of one command, in MB (measured by a small wrapper process)."""
    probe = ("import resource, subprocess, sys\n"
             "subprocess.run(sys.argv[1:], check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)\n"
             "print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)")
    done = subprocess.run([sys.executable, "-c", probe, *args], check=True, capture_output=True, text=True)
    return int(done.stdout.strip()) / 1024


def main() -> int:
    quick = "--quick" in sys.argv
    runs = 3 if quick else 9
    checks = []

    def check(ok: bool) -> str:
        checks.append(ok)
        return "met" if ok else "MISSED"

    print(f"Machine: {machine()}\n")
    with tempfile.TemporaryDirectory(prefix="crtfilter-bench-") as tmp:
        work = Path(tmp)
        subprocess.run(CLI + ["compile"], check=True, capture_output=True)
        print("### One 320x240 still as a whole command, cold and warm\n")
        print("| case | cold (empty cache) | warm | default, warm | warm / default |")
        print("|---|---|---|---|---|")
        for r in bench_cold_warm(work, 2 if quick else 3):
            ratio = r["warm"] / r["default"]
            print(f"| {r['case']} | {r['cold']:.2f} s {check(r['cold'] <= TARGETS['cold_seconds'])} | "
                  f"{r['warm']:.2f} s | {r['default']:.2f} s | "
                  f"{ratio:.2f} {check(ratio <= TARGETS['warm_vs_default'])} |")
        print(f"\nTargets: cold <= {TARGETS['cold_seconds']:.0f} s; warm <= {TARGETS['warm_vs_default']}x "
              "the default's warm time.\n")

        print("### Compute, 320x240 -> 2880x2160, against the memory floor (numpy.copy of the output)\n")
        print("| case | route | render | floor | render / floor |")
        print("|---|---|---|---|---|")
        for r in bench_compute(runs * 2):
            ratio = r["render"] / r["floor"]
            bound = TARGETS["table_vs_floor"] if r["route"] == "table" else TARGETS["fused_vs_floor"]
            print(f"| {r['case']} | {r['route']} | {1000 * r['render']:.1f} ms | {1000 * r['floor']:.2f} ms | "
                  f"{ratio:.1f}x {check(ratio <= bound)} (target <= {bound:g}x) |")

        print("\n### End to end: 16 scenes to 2880x2160 PNGs\n")
        e = bench_end_to_end(work, 3 if quick else 5)
        print("| command | wall | bytes written | crtfilter / this |")
        print("|---|---|---|---|")
        crt = e["crtfilter"]
        print(f"| crtfilter render (default preset) | {crt['seconds']:.2f} s | {crt['bytes'] / 1e6:.2f} MB | |")
        p = e["pillow"]
        ratio = crt["seconds"] / p["seconds"]
        print(f"| Pillow: nearest resize + default save | {p['seconds']:.2f} s | {p['bytes'] / 1e6:.2f} MB | "
              f"time {ratio:.2f} {check(ratio <= TARGETS['vs_pillow'])} (target <= {TARGETS['vs_pillow']}) |")
        if "vips" in e:
            v = e["vips"]
            ratio, size = crt["seconds"] / v["seconds"], crt["bytes"] / v["bytes"]
            print(f"| libvips: nearest resize, multiply by a tiled mask, PNG at compression 6 | "
                  f"{v['seconds']:.2f} s | {v['bytes'] / 1e6:.2f} MB | time {ratio:.2f} "
                  f"{check(ratio <= TARGETS['vs_vips'])} (target <= 1), bytes {size:.2f} "
                  f"{check(size <= TARGETS['bytes_vs_vips'])} (target <= 1) |")
        else:
            print("| libvips | not installed (pip install pyvips pyvips-binary) | | |")

        print("\n### Start-up, scaling, memory\n")
        startup = bench_startup(runs)
        s = bench_scaling(work, 2 if quick else 3)
        memory = peak_memory(CLI + ["render", str(SCENE), "-o", str(work / "m.png"), "--force", "-j", "1"])
        memory_cubic = peak_memory(CLI + ["render", str(SCENE), "-o", str(work / "m.png"), "--force", "-j", "1",
                                          "-p", "aperture-soft-within-4k"])
        print("| measurement | figure | target |")
        print("|---|---|---|")
        print(f"| crtfilter --help | {1000 * startup:.0f} ms | < {1000 * TARGETS['startup']:.0f} ms "
              f"{check(startup < TARGETS['startup'])} |")
        scaling = s[2] / s[1]
        print(f"| --jobs 1 / --jobs 2, images per second | {s[1]:.2f} / {s[2]:.2f} | 2 jobs / 1 job = "
              f"{scaling:.2f}x, >= {TARGETS['jobs_scaling']}x {check(scaling >= TARGETS['jobs_scaling'])} |")
        print(f"| peak resident memory, one 4K render, default preset | {memory:.0f} MB | |")
        print(f"| peak resident memory, one 4K render, cubic (aperture-soft-within-4k) | {memory_cubic:.0f} MB | "
              f"<= {TARGETS['memory_cubic']:.0f} MB {check(memory_cubic <= TARGETS['memory_cubic'])} |")
    met = all(checks)
    print(f"\nall targets met: {'yes' if met else 'no'} ({sum(checks)} of {len(checks)})")
    return 0 if met else 1


if __name__ == "__main__":
    sys.exit(main())
