"""Rendering a clip: frames stream from the reader through the render into the encoder,
then the written file is read back and every frame measured and checked for flashes.

The mask is drawn in output pixels, the same for every frame (its phase is fixed
to the screen, not to the content, so it never crawls), and each frame's
scanlines follow that frame's source lines. Memory holds a few frames whatever
the clip's length: a bounded queue of source frames (decoded beside the render,
in a thread and in ffmpeg's process), the frame being rendered, and the
encoder's own look-ahead in its process.

The figures are claims about the file: light kept per frame is measured on the
frames the written file decodes to, as a player would show them, and so is the
flash check (:mod:`crtfilter.flashes`).
"""

from __future__ import annotations

import csv
import io
import json
import queue
import statistics
import threading
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

from . import clips, flashes
from .engine import render_codes
from .errors import InputError, SettingsError
from .files import PendingFile
from .presets import Preset

#: Source frames decoded ahead of the render.
AHEAD = 3


def check_motion_settings(settings, fmt: str) -> None:
    if settings.output_range == "hdr":
        raise SettingsError(f"{fmt.upper()} clips are written in standard range: HDR output is for stills "
                            "(choose an SDR preset or --output-range sdr)")
    if settings.output_depth != 8:
        raise SettingsError(f"{fmt.upper()} clips hold 8-bit samples (--depth 8)")
    if settings.decode.keep_alpha:
        raise SettingsError(f"{fmt.upper()} clips are written without transparency (--alpha over:COLOR)")


def _ahead(frames, stop_event: threading.Event):
    """Iterate ``frames`` in a thread, up to :data:`AHEAD` frames before the consumer."""
    q: queue.Queue = queue.Queue(maxsize=AHEAD)
    end = object()

    def run():
        try:
            for f in frames:
                while not stop_event.is_set():
                    try:
                        q.put(f, timeout=0.1)
                        break
                    except queue.Full:
                        continue
                if stop_event.is_set():
                    break
            q.put(end)
        except BaseException as exc:  # handed to the consumer
            q.put(exc)
        finally:
            close = getattr(frames, "close", None)
            if close is not None:
                close()

    thread = threading.Thread(target=run, name="crtfilter-clip-reader", daemon=True)
    thread.start()
    try:
        while True:
            item = q.get()
            if item is end:
                return
            if isinstance(item, BaseException):
                raise item
            yield item
    finally:
        stop_event.set()
        while thread.is_alive():
            try:
                q.get_nowait()
            except queue.Empty:
                thread.join(0.05)


def render_clip(clip: clips.Clip, dst: Path, chosen: Preset, *, fmt: str, writes, first: int = 0, stop: int | None = None,
                delivery: str = clips.DEFAULT_DELIVERY, asked: dict | None = None,
                on_frame: Callable[[str, int, int], None] | None = None,
                frames_csv: Path | None = None) -> dict:
    """Render ``clip`` frames [first, stop) to ``dst`` and return the clip's report.

    ``writes`` is the job's :class:`~crtfilter.writes.WritePlan` with ``dst``
    added (and ``frames_csv``, if given). ``asked["asked"]`` set (a first Ctrl-C) stops between
    frames; ``on_frame(phase, done, total)`` follows the work, ``phase``
    ``"rendering"`` or ``"measuring"``.
    """
    from .job import render_record

    s = chosen.settings
    check_motion_settings(s, fmt)
    total = max(1, (clip.frames if stop is None else min(stop, clip.frames) if clip.kind == "animation"
                    else stop) - first)
    stop_event = threading.Event()
    source = _ahead(clips.read_frames(clip, first, stop), stop_event)
    sources: list[tuple[float, float]] = []  # per frame: source luminance, plain multiply luminance
    record = None
    started = time.perf_counter()
    pending = PendingFile(dst, replace=writes.force)
    try:
        with pending:
            encoder = None
            try:
                for image in source:
                    if asked is not None and asked.get("asked"):
                        raise KeyboardInterrupt
                    render = render_codes(image.codes, s, alpha=image.alpha)
                    if encoder is None:
                        record = render_record(render, chosen)
                        g = render.geometry
                        audio = None
                        if clip.audio is not None:
                            audio = (clip.path, float(first / clip.rate),
                                     None if stop is None else float((stop - first) / clip.rate))
                        encoder = clips.Encoder(pending, fmt, g.out_w, g.out_h, clip.rate, delivery=delivery,
                                                audio=audio, record=json.dumps(record, separators=(",", ":")))
                        encoder.__enter__()
                        encoding, geometry, warnings = render.encoding, render.geometry, list(render.warnings)
                    encoder.write(render.codes)
                    sources.append((render.source_luminance, render.plain_multiply_luminance))
                    if on_frame:
                        on_frame("rendering", len(sources), max(total, len(sources)))
                if encoder is None:
                    raise InputError(f"{clip.path}: no frames in the range chosen (it has about "
                                     f"{clip.frames} at {clip.fps:g} per second)")
                encoder.finish()
            except BaseException as exc:
                if encoder is not None:
                    encoder.__exit__(type(exc), exc, None)
                raise
            else:
                encoder.__exit__(None, None, None)
            rendered = time.perf_counter() - started
            frames, check = _measure(pending, geometry, encoding, clip, first, sources, asked, on_frame)
            pending.publish()
    finally:
        stop_event.set()
        source.close()
    figures = _figures(frames)
    if delivery == "420" and fmt in ("mkv", "mp4"):
        warnings.append("--delivery 420 halves the colour resolution and blurs the mask's colour stripes: "
                        f"of the shipped presets only {', '.join(clips.SURVIVE_420)} keeps its light through "
                        "it (README); --delivery 444 keeps every one")
    report = {"input": str(clip.path), "output": str(dst), **record,
              "clip": {"kind": clip.kind, "format": fmt, "delivery": delivery if fmt in ("mkv", "mp4") else "lossless",
                       "fps": clip.fps, "rate": f"{clip.rate.numerator}/{clip.rate.denominator}",
                       "first_frame": first, "frames": len(frames), "seconds": round(len(frames) / clip.fps, 3),
                       "audio": ("copied" if clip.audio and fmt in ("mkv", "mp4")
                                 else "none" if not clip.audio else f"left out ({fmt} holds no sound)")},
              "luminance": figures, "flashes": check.figures(), "frames": frames,
              "warnings": warnings, "notes": [], "seconds_rendering": round(rendered, 3),
              "seconds": round(time.perf_counter() - started, 3)}
    if clip.audio and fmt not in ("mkv", "mp4"):
        report["notes"].append(f"the sound ({clip.audio}) is left out: {fmt.upper()} holds none")
    if frames_csv is not None:
        writes.write(frames_csv, frames_table(frames))
        report["frames_csv"] = str(frames_csv)
    return report


def _measure(pending: PendingFile, geometry, encoding, clip: clips.Clip, first: int,
             sources: list[tuple[float, float]], asked, on_frame) -> tuple[list[dict], flashes.FlashCheck]:
    """Read the written file back: each frame's light and the flash check, from its decoded pixels."""
    from .fast import block_light_sums, code_histograms

    g = geometry
    table = encoding.table(8)
    rows, cols = flashes.grid_starts(g.out_h, g.out_w)
    counts = (np.diff(np.append(rows, g.out_h))[:, None] * np.diff(np.append(cols, g.out_w))[None, :])[..., None]
    check = flashes.FlashCheck(clip.fps)
    n = g.pic_w * g.pic_h
    frames: list[dict] = []
    for k, decoded in enumerate(clips.decode_pending(pending, g.out_w, g.out_h)):
        if asked is not None and asked.get("asked"):
            raise KeyboardInterrupt
        if k >= len(sources):
            raise InputError(f"{pending.path}: decodes to more frames than were written ({len(sources)})")
        picture = decoded[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w]
        channels = code_histograms(picture) @ table / n
        out = float(channels @ encoding.luma)
        lin, plain = sources[k]
        frames.append({"frame": first + k, "time": round((first + k) / clip.fps, 4), "input": lin, "output": out,
                       "ratio": out / lin if lin > 0 else None,
                       "plain_multiply_ratio": plain / lin if lin > 0 else None})
        check.add_blocks(block_light_sums(decoded, table, rows, cols) / counts)
        if on_frame:
            on_frame("measuring", k + 1, len(sources))
    if len(frames) != len(sources):
        raise InputError(f"{pending.path}: decodes to {len(frames)} frames, {len(sources)} were written")
    return frames, check


def _figures(frames: list[dict]) -> dict:
    """The clip's ``luminance``: the whole clip's light kept, and the spread over its frames."""
    lit = [f for f in frames if f["ratio"] is not None]
    inp = sum(f["input"] for f in frames)
    out = sum(f["output"] for f in frames)
    ratios = [f["ratio"] for f in lit]
    plain = [f["plain_multiply_ratio"] for f in lit]
    return {"input": inp / len(frames), "output": out / len(frames),
            "ratio": out / inp if inp > 0 else None, "target": 1.0,
            "ratio_min": min(ratios, default=None), "ratio_median": statistics.median(ratios) if ratios else None,
            "ratio_max": max(ratios, default=None),
            "plain_multiply_ratio": (sum(f["plain_multiply_ratio"] * f["input"] for f in lit) / inp
                                     if inp > 0 else None),
            "plain_multiply_median": statistics.median(plain) if plain else None}


def frames_table(frames: list[dict]) -> bytes:
    """Every frame's figures as CSV (a header row, then one row per frame)."""
    text = io.StringIO()
    out = csv.writer(text, lineterminator="\n")
    keys = ("frame", "time", "input", "output", "ratio", "plain_multiply_ratio")
    out.writerow(["frame", "seconds", "input_luminance", "output_luminance", "light_kept", "plain_multiply_kept"])
    for f in frames:
        out.writerow(["" if f[k] is None else (f"{f[k]:.6g}" if isinstance(f[k], float) else f[k]) for k in keys])
    return text.getvalue().encode()


def caution(report: dict) -> str | None:
    """The flash caution line for a clip's report, or None."""
    return flashes.caution_line([tuple(s) for s in report["flashes"]["failing_seconds"]])

