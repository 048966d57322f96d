"""A Dask cluster against ``--jobs``: images per second, and the client's memory as a batch grows.

1. **Throughput**: 64 scenes (the bundled 320x240 scene, each shifted so no two are
   alike) rendered to 2880x2160 PNGs with the default preset, as whole commands
   taken in turn: ``--jobs 2`` and ``--cluster local:2`` (two worker processes, the
   cluster's start included), and ``--cluster ADDRESS`` of a cluster already running
   (the rendering alone); with the default preset (a table look-up, about 20 ms a
   file) and with a compiled one. Medians of ``--repeat`` runs; the ratio is images per second
   on the cluster over ``--jobs 2``, for the whole command and once running: the
   rate at which the 64 more images of a 128-scene batch come (the start of the
   command, importing the scheduler's client and meeting the workers, cancels out).
2. **The client's memory**: 1,000 and 10,000 small inputs (16x12, rendered to 64x48)
   on a running local cluster of two workers; the peak resident size of the client
   process alone (``wait4``'s figure for that child), which must not grow with the
   batch: tasks are fed as workers free up.

    python bench/cluster.py [--repeat 3] [--small 1000,10000]
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
from PIL import Image

ROOT = Path(__file__).resolve().parent.parent
CLI = [sys.executable, "-m", "crtfilter", "render", "-q"]


def _scenes(folder: Path, n: int) -> Path:
    folder.mkdir()
    with Image.open(ROOT / "samples" / "scene-320x240.png") as im:
        base = np.asarray(im.convert("RGB"))
    for k in range(n):
        shifted = np.roll(np.roll(base, 5 * (k % 64), axis=1), 3 * (k // 64), axis=0)
        Image.fromarray(shifted).save(folder / f"scene-{k:03d}.png")
    return folder


def _small(folder: Path, n: int) -> Path:
    folder.mkdir()
    rng = np.random.default_rng(7)
    for k in range(n):
        Image.fromarray((rng.random((12, 16, 3)) * 255).astype(np.uint8)).save(folder / f"s{k:05d}.png")
    return folder


def _timed(cmd: list[str]) -> tuple[float, int]:
    """Wall seconds and the peak resident bytes of the command's own process."""
    started = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _pid, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - started
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode:
        raise SystemExit(f"failed: {' '.join(cmd)}\n{proc.stderr.read().decode()}")
    return wall, usage.ru_maxrss * 1024


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--small", default="1000,10000", help="batch sizes of small inputs for the memory figure")
    ap.add_argument("--memory-only", action="store_true", help="leave out the 64 scenes")
    args = ap.parse_args(argv)
    import distributed

    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        scenes = _scenes(tmp / "scenes", 64)
        more = _scenes(tmp / "scenes-128", 128)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                               host="127.0.0.1", dashboard_address=None, silence_logs=50)
        try:
            for preset in ("default", "aperture-soft-within-4k"):  # the compiled kernels cached
                which = [] if preset == "default" else ["--preset", preset]
                subprocess.run([*CLI, str(scenes / "scene-000.png"), "-o", str(tmp / f"warm-{preset}.png"), *which],
                               check=True)
            print("| 64 scenes to 2880x2160 PNG | whole command (median) | images/s | against --jobs 2 | "
                  "images/s once running | against --jobs 2 (target 0.8x) |")
            print("|---|---|---|---|---|---|")
            for preset in () if args.memory_only else ("default", "aperture-soft-within-4k"):
                which = [] if preset == "default" else ["--preset", preset]
                modes = (("jobs", ["--jobs", "2"]), ("local", ["--cluster", "local:2"]),
                         ("running", ["--cluster", cluster.scheduler_address]))
                times: dict[tuple[str, int], list[float]] = {(n, m): [] for n, _ in modes for m in (64, 128)}
                for k in range(args.repeat):
                    for name, extra in modes:
                        for m, src in ((64, scenes), (128, more)):
                            out = tmp / f"out-{preset}-{name}-{m}-{k}"
                            times[name, m].append(_timed([*CLI, str(src), "-o", str(out), *which, *extra])[0])
                wall = {key: statistics.median(v) for key, v in times.items()}
                # the 64 images more of the 128-scene batch: the start of the command cancels out
                rate = {n: 64 / max(wall[n, 128] - wall[n, 64], 1e-9) for n, _ in modes}
                labels = {"jobs": "--jobs 2", "local": "--cluster local:2 (its start included)",
                          "running": "--cluster ADDRESS (2 workers already running)"}
                for name, _ in modes:
                    print(f"| {preset}, {labels[name]} | {wall[name, 64]:.1f} s | {64 / wall[name, 64]:.1f} | "
                          f"{wall['jobs', 64] / wall[name, 64]:.2f}x | {rate[name]:.1f} | "
                          f"{rate[name] / rate['jobs']:.2f}x |")
            print()
            print("| small inputs (16x12 to 64x48) | how | wall | files/s | peak memory |")
            print("|---|---|---|---|---|")
            for n in (int(x) for x in args.small.split(",") if x.strip()):
                folder = _small(tmp / f"small-{n}", n)
                for how, extra in (("--cluster ADDRESS (the client alone)", ["--cluster", cluster.scheduler_address]),
                                   ("--jobs 2 (the largest of its processes)", ["--jobs", "2"])):
                    out = tmp / f"small-out-{n}-{extra[0]}"
                    wall, peak = _timed([*CLI, str(folder), "-o", str(out), "--size", "64x48", *extra])
                    print(f"| {n} | {how} | {wall:.1f} s | {n / wall:.0f} | {peak / 2**20:.0f} MiB |")
        finally:
            cluster.close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
