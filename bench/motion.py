"""Clips: crtfilter's own share of a clip's wall time, against ffmpeg alone as the floor, and
peak memory for a short and a long clip, side by side in one run.

A clip of the bundled 320x240 scene, panned, is drawn at 60 frames per second and rendered
with the default preset to 2880x2160 MKV (the default delivery). The floor is the same
ffmpeg, with the same encoder settings, encoding the same frames upscaled by nearest
neighbour (ffmpeg's own scaler): what any tool that writes this video must wait for.
crtfilter's own work is the difference: decoding, rendering, and reading the file back
to measure every frame and check it for flashes. Memory is the peak resident size of
crtfilter's process and its encoder together, sampled every 50 ms.

    python bench/motion.py [--seconds 10] [--long 60]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from fractions import Fraction
from pathlib import Path

import numpy as np
from PIL import Image

from crtfilter import clips

ROOT = Path(__file__).resolve().parent.parent
FPS = 60


def _clip(path: Path, seconds: float) -> Path:
    with Image.open(ROOT / "samples" / "scene-320x240.png") as im:
        base = np.asarray(im.convert("RGB"))
    cmd = [clips.ffmpeg(), "-hide_banner", "-loglevel", "error", "-f", "rawvideo", "-pix_fmt", "rgb24",
           "-s", "320x240", "-r", str(FPS), "-i", "pipe:0", "-c:v", "libx264rgb", "-qp", "0", str(path)]
    proc = subprocess.Popen(cmd, stdin=subprocess.PIPE)
    for k in range(round(seconds * FPS)):
        proc.stdin.write(np.roll(base, k, axis=1).tobytes())
    proc.stdin.close()
    if proc.wait():
        raise SystemExit("ffmpeg could not write the test clip")
    return path


def _tree_rss(root: int) -> int:
    """Resident bytes of a process and all its descendants, from /proc."""
    children: dict[int, list[int]] = {}
    rss: dict[int, int] = {}
    for name in os.listdir("/proc"):
        if not name.isdigit():
            continue
        try:
            stat = Path(f"/proc/{name}/stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        children.setdefault(int(stat[1]), []).append(int(name))
        rss[int(name)] = int(stat[21]) * os.sysconf("SC_PAGE_SIZE")
    total, todo = 0, [root]
    while todo:
        pid = todo.pop()
        total += rss.get(pid, 0)
        todo += children.get(pid, [])
    return total


def _run(cmd: list[str]) -> tuple[float, int]:
    """Wall seconds and peak resident bytes of the process tree."""
    started = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    peak = 0
    while proc.poll() is None:
        peak = max(peak, _tree_rss(proc.pid))
        time.sleep(0.05)
    wall = time.perf_counter() - started
    if proc.returncode:
        raise SystemExit(f"failed: {' '.join(cmd)}\n{proc.stderr.read().decode()}")
    return wall, peak


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=10.0, help="the clip timed against the floor")
    ap.add_argument("--long", type=float, default=60.0, help="the longer clip whose memory is compared")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        short = _clip(tmp / "short.mkv", args.seconds)
        ours, ours_peak = _run([sys.executable, "-m", "crtfilter", "render", str(short), "-o", str(tmp / "a.mkv"),
                                "--report", str(tmp / "a.json")])
        report = json.loads((tmp / "a.json").read_text())[0]
        settings = clips.encoder_settings("mkv", rate=Fraction(FPS))
        at = settings.index("-vf") + 1  # the nearest upscale first, then the encoder's own conversion
        settings[at] = "scale=2880:2160:flags=neighbor," + settings[at]
        floor, floor_peak = _run([clips.ffmpeg(), "-hide_banner", "-loglevel", "error", "-i", str(short),
                                  *settings, "-y", str(tmp / "floor.mkv")])
        long_clip = _clip(tmp / "long.mkv", args.long)
        _long_wall, long_peak = _run([sys.executable, "-m", "crtfilter", "render", str(long_clip), "-o",
                                      str(tmp / "b.mkv")])
    frames = report["clip"]["frames"]
    print(f"clip: {args.seconds:g} s of 320x240 at {FPS}/s ({frames} frames) -> 2880x2160 MKV "
          f"({report['clip']['delivery']})")
    print(f"  crtfilter render: {ours:.1f} s wall ({frames / ours:.1f} frames/s); of it, rendering and "
          f"encoding {report['seconds_rendering']:.1f} s, reading back and measuring "
          f"{report['seconds'] - report['seconds_rendering']:.1f} s")
    print(f"  ffmpeg alone (nearest upscale, same encoder settings): {floor:.1f} s wall")
    print(f"  crtfilter's own share of the wall time: {100 * (ours - floor) / ours:.0f} % "
          f"(ratio to the floor {ours / floor:.2f}x)")
    print(f"peak memory (crtfilter and its encoder): {args.seconds:g} s clip {ours_peak / 2**20:.0f} MiB, "
          f"{args.long:g} s clip {long_peak / 2**20:.0f} MiB (ratio {long_peak / ours_peak:.2f}); "
          f"ffmpeg alone {floor_peak / 2**20:.0f} MiB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
