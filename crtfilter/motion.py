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
import os
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
    started = time.perf_counter()
    pending = PendingFile(dst, replace=writes.force)
    with pending:
        made = _encode(clip, pending, chosen, fmt=fmt, first=first, stop=stop, delivery=delivery, asked=asked,
                       on_frame=on_frame, audio=True)
        rendered = time.perf_counter() - started
        check = flashes.FlashCheck(clip.fps)
        frames = _measure(pending, made["geometry"], made["encoding"], clip, first, made["sources"], asked,
                          on_frame, check=check)
        pending.publish()
    return clip_report(clip, dst, made["record"], fmt=fmt, delivery=delivery, first=first, frames=frames,
                       check=check, warnings=made["warnings"], rendered=rendered, started=started, writes=writes,
                       frames_csv=frames_csv)


def _encode(clip: clips.Clip, pending: PendingFile, chosen: Preset, *, fmt: str, first: int, stop: int | None,
            delivery: str, asked, on_frame, audio: bool, allow_empty: bool = False) -> dict:
    """Render frames [first, stop) into an encoder writing ``pending``: the sources' light,
    the record, geometry, encoding and warnings of the first frame's render."""
    from .job import render_record

    s = chosen.settings
    check_motion_settings(s, fmt)
    total = max(1, (clip.frames if stop is None else min(stop, clip.frames) if clip.kind == "animation"
                    else stop) - first)
    stop_event = threading.Event()
    source = _ahead(clips.read_frames(clip, first, stop), stop_event)
    sources: list[tuple[float, float]] = []  # per frame: source luminance, plain multiply luminance
    made: dict = {"sources": sources, "record": None, "geometry": None, "encoding": None, "warnings": []}
    try:
        encoder = None
        try:
            for image in source:
                if asked is not None and asked.get("asked"):
                    raise KeyboardInterrupt
                render = render_codes(image.codes, s, alpha=image.alpha)
                if encoder is None:
                    made["record"] = record = render_record(render, chosen)
                    g = render.geometry
                    sound = None
                    if audio and clip.audio is not None:
                        sound = (clip.path, float(first / clip.rate),
                                 None if stop is None else float((stop - first) / clip.rate))
                    encoder = clips.Encoder(pending, fmt, g.out_w, g.out_h, clip.rate, delivery=delivery,
                                            audio=sound, record=json.dumps(record, separators=(",", ":")))
                    encoder.__enter__()
                    made.update(encoding=render.encoding, geometry=render.geometry, warnings=list(render.warnings))
                encoder.write(render.codes)
                sources.append((render.source_luminance, render.plain_multiply_luminance))
                if on_frame:
                    on_frame("rendering", len(sources), max(total, len(sources)))
            if encoder is None:
                if allow_empty:
                    return made
                raise InputError(f"{clip.path}: no frames in the range chosen (it has about "
                                 f"{clip.frames} at {clip.fps:g} per second)")
            encoder.finish()
        except BaseException as exc:
            if encoder is not None:
                encoder.__exit__(type(exc), exc, None)
            raise
        else:
            encoder.__exit__(None, None, None)
    finally:
        stop_event.set()
        source.close()
    return made


def clip_report(clip: clips.Clip, dst: Path, record: dict, *, fmt: str, delivery: str, first: int,
                frames: list[dict], check: flashes.FlashCheck, warnings: list[str], rendered: float,
                started: float, writes, frames_csv: Path | None) -> dict:
    """A written clip's report (and its frame table, when asked for)."""
    figures = _figures(frames)
    warnings = list(warnings)
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


def render_segment(clip: clips.Clip, chosen: Preset, scratch: Path, *, fmt: str, first: int, stop: int | None,
                   delivery: str) -> dict:
    """Frames [first, stop) of ``clip`` encoded alone, as a part of a video that
    :func:`join_segments` puts together (the frames are those the whole video codes them
    to: see :func:`crtfilter.clips.encoder_settings`), read back and measured.

    Returns ``data`` (the part's bytes, or None for a range past the clip's end),
    ``frames`` (each frame's figures), ``blocks`` (each frame's block light, for the flash
    check), ``record``, ``warnings`` and ``seconds_rendering``.
    """
    started = time.perf_counter()
    with PendingFile(scratch / "segment.mkv", replace=True) as pending:
        made = _encode(clip, pending, chosen, fmt="mkv", first=first, stop=stop, delivery=delivery, asked=None,
                       on_frame=None, audio=False, allow_empty=True)
        if not made["sources"]:
            return {"data": None, "frames": [], "blocks": [], "record": None, "warnings": [],
                    "seconds_rendering": 0.0}
        rendered = time.perf_counter() - started
        blocks: list[np.ndarray] = []
        frames = _measure(pending, made["geometry"], made["encoding"], clip, first, made["sources"], None, None,
                          blocks=blocks)
        fd = pending.open_for_reading()
        try:
            with open(fd, "rb", closefd=False) as f:
                data = f.read()
        finally:
            os.close(fd)
        pending.discard()
    del fmt  # the part is MKV whatever the output: the join copies its frames into the output's container
    return {"data": data, "frames": frames, "blocks": blocks, "record": made["record"],
            "warnings": made["warnings"], "seconds_rendering": rendered}


def join_segments(clip: clips.Clip, dst: Path, parts: list[dict], *, fmt: str, delivery: str, first: int,
                  stop: int | None, writes, frames_csv: Path | None = None, started: float | None = None) -> dict:
    """Put the parts :func:`render_segment` made (in order; each with its ``data``, or
    the ``path`` of a file holding it) together into ``dst``, with the
    sound and the record, check that the file holds exactly the parts' coded frames, and
    return the clip's report, as :func:`render_clip` would."""
    import tempfile

    started = time.perf_counter() if started is None else started
    parts = [p for p in parts if p.get("data") is not None or p.get("path") is not None]
    if not parts:
        raise InputError(f"{clip.path}: no frames in the range chosen (it has about "
                         f"{clip.frames} at {clip.fps:g} per second)")
    record = parts[0]["record"]
    frames = [f for p in parts for f in p["frames"]]
    check = flashes.FlashCheck(clip.fps)
    for p in parts:
        for b in p["blocks"]:
            check.add_blocks(b)
    with tempfile.TemporaryDirectory(prefix="crtfilter-join-") as tmp:
        names = []
        for k, p in enumerate(parts):
            if p.get("path") is not None:  # already on disk
                names.append(Path(p["path"]))
                continue
            path = Path(tmp) / f"part-{k:05d}.mkv"
            path.write_bytes(p["data"])
            names.append(path)
        expected = [c for path in names for c in clips.packet_sums(path)]
        audio = None
        if clip.audio is not None and fmt in ("mkv", "mp4"):
            audio = (clip.path, float(first / clip.rate), None if stop is None else float((stop - first) / clip.rate))
        with PendingFile(dst, replace=writes.force) as pending:
            clips.concat(pending, fmt, names, Path(tmp) / "parts.txt", audio=audio,
                         record=json.dumps(record, separators=(",", ":")))
            fd = pending.open_for_reading()
            try:
                got = clips.packet_sums(pending.path, fd=fd)
            finally:
                os.close(fd)
            if got != expected:
                raise InputError(f"{dst}: the joined video does not hold its parts' frames as they were coded")
            pending.publish()
    rendered = sum(p["seconds_rendering"] for p in parts)
    return clip_report(clip, dst, record, fmt=fmt, delivery=delivery, first=first, frames=frames, check=check,
                       warnings=parts[0]["warnings"], rendered=rendered, started=started, writes=writes,
                       frames_csv=frames_csv)


def _measure(pending: PendingFile, geometry, encoding, clip: clips.Clip, first: int,
             sources: list[tuple[float, float]], asked, on_frame, *, check: flashes.FlashCheck | None = None,
             blocks: list | None = None) -> list[dict]:
    """Read the written file back: each frame's light, from its decoded pixels; each frame's
    block light goes to the flash ``check`` and, if given, onto ``blocks``."""
    from .fast import block_light_sums, code_histograms

    g = geometry
    table = encoding.table(8)
    rows, cols = flashes.grid_starts(g.out_h, g.out_w)
    counts = (np.diff(np.append(rows, g.out_h))[:, None] * np.diff(np.append(cols, g.out_w))[None, :])[..., None]
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
        light = block_light_sums(decoded, table, rows, cols) / counts
        if check is not None:
            check.add_blocks(light)
        if blocks is not None:
            blocks.append(light)
        if on_frame:
            on_frame("measuring", k + 1, len(sources))
    if len(frames) != len(sources):
        raise InputError(f"{pending.path}: decodes to {len(frames)} frames, {len(sources)} were written")
    return frames


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

