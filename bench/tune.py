"""The tuning page's latency: a setting moved, to the visible region back, and to the figures.

A real ``crtfilter tune`` server (in this process, on 127.0.0.1) on the bundled
320x240 scene, asked over HTTP as the page asks: for each shipped preset, warm
(its kernels loaded, one change made first), ``--changes`` changes of a mask
setting in turn, each one

- a **view** of the region a 1280x800 viewport shows at 1x (at the picture's
  middle), back as pixels: target 250 ms for a 2880x2160 output;
- the whole frame's **figures** (light kept, mask contrast at 18 % and 90 % grey,
  local error p99, the mask cell and curves): target 1 s.

Beside them, in the same run, the time of a plain whole-frame render of the same
settings (``render_codes`` with its figures, no file) - what a view saves.

    python bench/tune.py [--changes 12] [--presets a,b]
"""

from __future__ import annotations

import argparse
import http.client
import json
import statistics
import sys
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
SCENE = ROOT / "samples" / "scene-320x240.png"
VIEWPORT = (1280, 800)


def _post(port: int, token: str, path: str, body: dict) -> tuple[int, bytes, dict]:
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=120)
    try:
        conn.request("POST", path, body=json.dumps(body).encode(),
                     headers={"Host": f"127.0.0.1:{port}", "X-Token": token, "Content-Type": "application/json"})
        r = conn.getresponse()
        return r.status, r.read(), dict(r.getheaders())
    finally:
        conn.close()


def _change(preset, k: int) -> dict:
    """The k-th change: a mask setting moved a little, within its range."""
    pitch = preset.settings.mask.triad_pitch
    return {"mask": {"phosphor_strength": round(0.55 + 0.03 * (k % 12), 3),
                     "triad_pitch": round(min(64.0, pitch + 0.25 * (k % 3)), 3)}}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--changes", type=int, default=12)
    ap.add_argument("--presets", default="", help="comma-separated (default: every shipped preset)")
    args = ap.parse_args(argv)

    from crtfilter.audit import output_size
    from crtfilter.engine import render_codes
    from crtfilter.fast import fast_plan, warm
    from crtfilter.live.controls import preset_from_values
    from crtfilter.live.server import TuneServer
    from crtfilter.live.session import Session
    from crtfilter.presets import load_preset, shipped_names

    warm(quiet=False)
    names = [n for n in args.presets.split(",") if n] or list(shipped_names())
    print(f"| preset (320x240 scene) | output | view of {VIEWPORT[0]}x{VIEWPORT[1]}, median / slowest "
          "(target 250 ms) | figures, median / slowest (target 1 s) | whole-frame render | view / whole |")
    print("|---|---|---|---|---|---|")
    for name in names:
        start = load_preset(name)
        srv = TuneServer(Session.open(SCENE, start))
        thread = threading.Thread(target=srv.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True)
        thread.start()
        try:
            session = srv.session
            views, figures, whole = [], [], []
            for k in range(args.changes + 1):
                values = _change(start, k)
                settings = preset_from_values(start, values).settings
                w, h = output_size(settings, session.codes.shape[1], session.codes.shape[0])
                top, left = max(0, (h - VIEWPORT[1]) // 2), max(0, (w - VIEWPORT[0]) // 2)
                box = {"top": top, "bottom": top + VIEWPORT[1], "left": left, "right": left + VIEWPORT[0]}
                body = {"client": "bench", "seq": 2 * k, "values": values, **box}
                # a new setting: the view first (its plan made within it), then the figures
                fast_plan.cache_clear()
                t = time.perf_counter()
                status, data, _ = _post(srv.port, srv.token, "/api/view", body)
                t_view = time.perf_counter() - t
                assert status == 200, data
                t = time.perf_counter()
                status, data, _ = _post(srv.port, srv.token, "/api/figures", {"client": "bench", "seq": 2 * k,
                                                                              "values": values})
                t_fig = time.perf_counter() - t
                assert status == 200, data
                fast_plan.cache_clear()
                t = time.perf_counter()
                render_codes(session.codes, settings)
                t_whole = time.perf_counter() - t
                if k:  # the first change warms what this preset needs
                    views.append(t_view)
                    figures.append(t_fig)
                    whole.append(t_whole)
            med = statistics.median
            print(f"| {name} | {w}x{h} | {1000 * med(views):.0f} / {1000 * max(views):.0f} ms | "
                  f"{1000 * med(figures):.0f} / {1000 * max(figures):.0f} ms | {1000 * med(whole):.0f} ms | "
                  f"{med(views) / med(whole):.2f} |")
            sys.stdout.flush()
        finally:
            srv.shutdown()
            srv.server_close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
