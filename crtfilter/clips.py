"""Clips: animated images (GIF, APNG, WebP) and video files, read and written frame by frame.

Animated images are read with Pillow, one frame at a time. Video is decoded, and
every clip is encoded, by the ffmpeg that the ``imageio-ffmpeg`` package ships,
in a process of its own that the frames reach through a pipe: memory holds a
few frames whatever the clip's length, and the encoder's work runs beside ours.
The encoder writes into a :class:`crtfilter.files.PendingFile`, so a clip that
is stopped, killed or fails leaves no file behind; the caller names it once it
has read the written file back.

A clip is seen as a sequence of frames at one constant rate: a video's own rate
(ffmpeg repeats or drops frames of a variable-rate file to keep it), and for an
animation the rate whose frame length divides every frame's display time, each
source frame held for as many frames as its time asks (:attr:`Clip.holds`).
"""

from __future__ import annotations

import math
import os
import re
import subprocess
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

import numpy as np

from .errors import InputError, SettingsError, check_choice
from .files import DEFAULT_MAX_PIXELS, PendingFile, SourceImage, _check_size, _from_pillow, open_regular

#: Video file endings read as clips (animated GIF, PNG and WebP are clips too, when they move).
VIDEO_SUFFIXES = frozenset({".mp4", ".mkv", ".mov", ".avi", ".webm"})

#: Motion output formats -> their file ending. APNG and WebP are lossless RGB;
#: MKV and MP4 hold H.264 as :data:`DELIVERIES` says.
MOTION_FORMATS = {"apng": ".png", "webp": ".webp", "mkv": ".mkv", "mp4": ".mp4"}

#: How a video is encoded: ``lossless`` (H.264 of the RGB codes themselves, exact),
#: ``444`` (H.264 of BT.709 full-range Y'CbCr at full colour resolution, near-lossless)
#: or ``420`` (colour at half resolution each way, for players that need it: it
#: blurs the mask's colour stripes, see README).
DELIVERIES = ("lossless", "444", "420")
DEFAULT_DELIVERY = "444"

#: x264's constant quantiser for ``444`` and ``420`` (lower is closer to the input). At 3,
#: every shipped SDR preset keeps its light and its mask contrast through a round trip
#: of a grey field (bench/chroma.py gives the figures); at 12, one lost 1.6 %.
QUALITY = {"444": 3, "420": 16}

#: Seconds from one keyframe to the next (closed groups: see :func:`encoder_settings`).
KEY_SECONDS = 2

#: x264's threads, fixed: the coded frames depend on the number (common practice, no
#: source; measured here), so a fixed one makes them the same on every machine.
ENCODER_THREADS = 3

#: Of the shipped presets, those whose light survives 4:2:0 within 1 % (bench/chroma.py:
#: the others lose 3 to 17 %, the colour stripes of their masks blurred together).
SURVIVE_420 = ("scanlines-only-within-1080p",)

#: x264's speed preset: the encoder is most of a clip's wall time.
SPEED = "veryfast"

#: Display times below this are shown as 100 ms, as web browsers do (common practice, no source).
_SHORTEST_MS = 20
#: The finest frame length an animation is held to, in milliseconds (GIF counts in 10 ms).
_FINEST_MS = 10

_TIMEOUT = 60  # seconds ffmpeg may take to look at a file's header


def ffmpeg() -> str:
    """The ffmpeg program of imageio-ffmpeg (or ``IMAGEIO_FFMPEG_EXE``)."""
    try:
        import imageio_ffmpeg
    except ImportError:
        raise SettingsError("clips need the imageio-ffmpeg package (pip install imageio-ffmpeg)") from None
    try:
        return imageio_ffmpeg.get_ffmpeg_exe()
    except RuntimeError as exc:
        raise SettingsError(f"no ffmpeg program for clips: {exc}") from None


@dataclass(frozen=True)
class Clip:
    """What a clip holds, as read: size, constant frame rate, length and sound.

    Attributes
    ----------
    kind : str
        ``"animation"`` or ``"video"``.
    rate : Fraction
        Frames per second of the sequence as read.
    frames : int
        Frames in the sequence (for a video estimated from its length; the read says).
    audio : str or None
        The video's audio codec, if it has sound.
    holds : tuple of int or None
        An animation's frames: how many frames of the sequence each is shown for.
    """

    path: Path
    kind: str
    width: int
    height: int
    rate: Fraction
    frames: int
    audio: str | None = None
    holds: tuple[int, ...] | None = None

    @property
    def fps(self) -> float:
        return float(self.rate)

    @property
    def seconds(self) -> float:
        return self.frames / self.fps


def is_video_name(path: str | os.PathLike) -> bool:
    return Path(path).suffix.lower() in VIDEO_SUFFIXES


def probe(path: str | os.PathLike, max_pixels: int | None = DEFAULT_MAX_PIXELS) -> Clip | None:
    """The clip in ``path``, or None when it is a still picture (one frame).

    Raises
    ------
    InputError
        For a file that cannot be read, has no video, or frames over ``max_pixels``.
    """
    path = Path(path)
    if is_video_name(path):
        return _probe_video(path, max_pixels)
    return _probe_animation(path, max_pixels)


def _probe_animation(path: Path, max_pixels: int | None) -> Clip | None:
    from PIL import Image

    try:
        fh, _st = open_regular(path, noun="an image")
        with fh, Image.open(fh) as im:
            n = getattr(im, "n_frames", 1)
            if n < 2 or im.format not in ("GIF", "PNG", "WEBP"):
                return None
            _check_size(path, im.width, im.height, max_pixels)
            times = []
            for k in range(n):
                im.seek(k)
                _check_size(path, im.width, im.height, max_pixels, f"frame {k}: ")
                ms = im.info.get("duration") or 0
                times.append(100 if ms < _SHORTEST_MS else int(round(ms)))
            size = im.size
    except InputError:
        raise
    except Exception:  # not a picture Pillow can read: reading it as a still says why
        return None
    step = max(_FINEST_MS, math.gcd(*times))
    holds = tuple(max(1, round(t / step)) for t in times)
    return Clip(path, "animation", size[0], size[1], Fraction(1000, step), sum(holds), None, holds)


_DURATION = re.compile(r"Duration: (\d+):(\d+):(\d+(?:\.\d+)?)")
_VIDEO = re.compile(r"Stream #\d+:\d+.*?: Video: (.*)")
_SIZE = re.compile(r"\b(\d{1,5})x(\d{1,5})\b")
_FPS = re.compile(r"(\d+(?:\.\d+)?) (?:fps|tbr)")
_AUDIO = re.compile(r"Stream #\d+:\d+.*?: Audio: (\w+)")


def _rate(text: str) -> Fraction:
    """A frame rate as ffmpeg prints it (29.97) as the exact rate meant (30000/1001)."""
    fps = float(text)
    ntsc = fps * 1.001
    if fps != round(fps) and abs(ntsc - round(ntsc)) < 0.01:
        return Fraction(round(ntsc) * 1000, 1001)
    return Fraction(text).limit_denominator(1000)


def _probe_video(path: Path, max_pixels: int | None) -> Clip:
    fh, _st = open_regular(path, noun="a video")
    fh.close()
    try:
        done = subprocess.run([ffmpeg(), "-hide_banner", "-nostdin", "-i", str(path)], capture_output=True,
                              timeout=_TIMEOUT, stdin=subprocess.DEVNULL, start_new_session=True)
    except subprocess.TimeoutExpired:
        raise InputError(f"{path}: ffmpeg took over {_TIMEOUT} s to read the header") from None
    text = done.stderr.decode("utf-8", "replace")
    video = _VIDEO.search(text)
    if video is None:
        last = _last_line(text.replace(str(path), "").replace(": ", "", 1)) or "no video stream"
        raise InputError(f"{path}: not a video ffmpeg can read ({last})")
    size, fps = _SIZE.search(video.group(1)), _FPS.search(video.group(1))
    if size is None or fps is None:
        raise InputError(f"{path}: ffmpeg gives no frame size or rate for its video")
    w, h = int(size.group(1)), int(size.group(2))
    _check_size(path, w, h, max_pixels)
    rate = _rate(fps.group(1))
    duration = _DURATION.search(text)
    seconds = 0.0 if duration is None else (int(duration.group(1)) * 3600 + int(duration.group(2)) * 60
                                            + float(duration.group(3)))
    audio = _AUDIO.search(text)
    return Clip(path, "video", w, h, rate, max(1, round(seconds * rate)), audio and audio.group(1))


def _last_line(text: str) -> str:
    lines = [ln.strip() for ln in text.splitlines() if ln.strip()]
    return lines[-1] if lines else ""


def parse_time(text: str, what: str = "--from") -> float:
    """Seconds from ``SS``, ``SS.s``, ``MM:SS.s`` or ``HH:MM:SS.s``."""
    parts = text.strip().split(":")
    try:
        if not 1 <= len(parts) <= 3 or any(p.strip() == "" for p in parts):
            raise ValueError
        values = [float(p) for p in parts]
    except ValueError:
        raise SettingsError(f"{what} must be a time as SS.s, MM:SS.s or HH:MM:SS.s (got {text!r})") from None
    if any(v < 0 or not math.isfinite(v) for v in values) or any(v >= 60 for v in values[1:]):
        raise SettingsError(f"{what} must be a time as SS.s, MM:SS.s or HH:MM:SS.s (got {text!r})")
    seconds = 0.0
    for v in values:
        seconds = seconds * 60 + v
    return seconds


def select(clip: Clip, frames: str | None = None, start: str | None = None,
           end: str | None = None) -> tuple[int, int | None]:
    """The frames to render, (first, stop) with ``stop`` excluded (None: to the end).

    ``frames`` is ``A:B`` (frames A to B-1, either side may be left out);
    ``start`` and ``end`` are times (:func:`parse_time`): the frames that begin in [start, end).
    """
    if frames is not None and (start is not None or end is not None):
        raise SettingsError("give --frames or --from/--to, not both")
    first, stop = 0, None
    if frames is not None:
        m = re.fullmatch(r"\s*(\d*)\s*:\s*(\d*)\s*", frames)
        if m is None:
            raise SettingsError(f"--frames must be A:B, frames A to B-1 from 0 (got {frames!r})")
        first = int(m.group(1)) if m.group(1) else 0
        stop = int(m.group(2)) if m.group(2) else None
    else:
        if start is not None:
            first = math.ceil(parse_time(start, "--from") * clip.rate - Fraction(1, 1000))
        if end is not None:
            stop = math.ceil(parse_time(end, "--to") * clip.rate - Fraction(1, 1000))
    if stop is not None and stop <= first:
        raise SettingsError(f"the frames chosen are empty (from frame {first} to before {stop})")
    if clip.kind == "animation" and first >= clip.frames:
        raise SettingsError(f"{clip.path}: has {clip.frames} frames at {clip.fps:g} per second; "
                            f"the first chosen is {first}")
    return first, stop


def read_frames(clip: Clip, first: int = 0, stop: int | None = None) -> Iterator[SourceImage]:
    """The clip's frames ``first`` to ``stop`` - 1 at its constant rate, one at a time."""
    if clip.kind == "animation":
        yield from _animation_frames(clip, first, stop)
    else:
        yield from _video_frames(clip, first, stop)


def _animation_frames(clip: Clip, first: int, stop: int | None) -> Iterator[SourceImage]:
    from PIL import Image

    stop = clip.frames if stop is None else min(stop, clip.frames)
    position = 0
    fh, _st = open_regular(clip.path, noun="an image")
    with fh, Image.open(fh) as im:
        for k, hold in enumerate(clip.holds):
            if position >= stop:
                break
            if position + hold > first:
                try:
                    im.seek(k)
                    image = _from_pillow(clip.path, im, [])
                except (OSError, ValueError, EOFError, SyntaxError) as exc:
                    raise InputError(f"{clip.path}: frame {k}: damaged ({exc})") from None
                for _ in range(max(position, first), min(position + hold, stop)):
                    yield image
            position += hold


def _video_frames(clip: Clip, first: int, stop: int | None) -> Iterator[SourceImage]:
    cmd = [ffmpeg(), "-hide_banner", "-nostdin", "-loglevel", "error", "-noautorotate"]
    if first:
        cmd += ["-ss", _seconds(first / clip.rate)]
    cmd += ["-i", str(clip.path)]
    if stop is not None:
        cmd += ["-frames:v", str(stop - first)]
    for image in decode(cmd, clip.width, clip.height, clip.rate, clip.path):
        yield SourceImage(image)


def _seconds(t) -> str:
    return f"{float(t):.6f}"


def decode(head: list[str], width: int, height: int, rate: Fraction | None, name,
           pass_fds: tuple[int, ...] = ()) -> Iterator[np.ndarray]:
    """Frames (height, width, 3) uint8 RGB that ffmpeg decodes with the input part ``head``
    of its command (the output part is added: the first video, raw RGB, at ``rate``)."""
    cmd = [*head, "-map", "0:v:0", "-an", "-sn", "-dn"]
    # at a rate, frames are repeated or dropped to hold it; without, each coded frame is one frame
    cmd += ["-fps_mode", "passthrough"] if rate is None else ["-r", f"{rate.numerator}/{rate.denominator}"]
    cmd += ["-sws_flags", "accurate_rnd+full_chroma_int+bitexact", "-f", "rawvideo", "-pix_fmt", "rgb24", "pipe:1"]
    size = width * height * 3
    with tempfile.TemporaryFile() as log:
        proc = subprocess.Popen(cmd, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=log,
                                pass_fds=pass_fds, start_new_session=True, bufsize=0)
        try:
            while True:
                buf = bytearray(size)
                view, got = memoryview(buf), 0
                while got < size:
                    n = proc.stdout.readinto(view[got:])
                    if not n:
                        break
                    got += n
                if got < size:
                    break
                yield np.frombuffer(buf, np.uint8).reshape(height, width, 3)
        finally:
            proc.stdout.close()
            if proc.poll() is None:
                proc.kill()
            code = proc.wait()
        if code != 0 or got:
            log.seek(0)
            why = _last_line(log.read().decode("utf-8", "replace")) or f"ffmpeg exit status {code}"
            raise InputError(f"{name}: cannot decode ({why})")


class Encoder:
    """ffmpeg encoding raw RGB frames, given in order with :meth:`write`, into a pending file.

    A context manager: leaving it without :meth:`finish` (an error, Ctrl-C) stops
    the encoder at once; the pending file is the caller's to discard.
    """

    def __init__(self, target: PendingFile, fmt: str, width: int, height: int, rate: Fraction, *,
                 delivery: str = DEFAULT_DELIVERY, audio: tuple[Path, float, float | None] | None = None,
                 title: str | None = None, record: str | None = None):
        check_choice("motion format", fmt, tuple(MOTION_FORMATS))
        check_choice("--delivery", delivery, DELIVERIES)
        if fmt in ("mkv", "mp4") and delivery == "420" and (width % 2 or height % 2):
            raise SettingsError(f"--delivery 420 needs an even width and height (the output is {width}x{height})")
        self.width, self.height, self.frames = width, height, 0
        cmd = [ffmpeg(), "-hide_banner", "-nostdin", "-loglevel", "error", "-f", "rawvideo", "-pix_fmt", "rgb24",
               "-s", f"{width}x{height}", "-framerate", f"{rate.numerator}/{rate.denominator}", "-i", "pipe:0"]
        if audio is not None and fmt in ("mkv", "mp4"):
            src, start, length = audio
            cmd += ["-ss", _seconds(start)] + ([] if length is None else ["-t", _seconds(length)])
            cmd += ["-i", str(src), "-map", "0:v:0", "-map", "1:a?", "-c:a", "copy"]
        cmd += encoder_settings(fmt, delivery, rate)
        if record is not None and fmt in ("mkv", "mp4"):
            cmd += ["-metadata", f"crtfilter={record}"]
        if title:
            cmd += ["-metadata", f"title={title}"]
        cmd += ["-fd", str(target.fd), "-f", {"apng": "apng", "webp": "webp", "mkv": "matroska", "mp4": "mp4"}[fmt],
                "fd:"]
        self._log = tempfile.TemporaryFile()
        self._proc = subprocess.Popen(cmd, stdin=subprocess.PIPE, stdout=subprocess.DEVNULL, stderr=self._log,
                                      pass_fds=(target.fd,), start_new_session=True, bufsize=0)
        self._name = target.path

    def write(self, codes: np.ndarray) -> None:
        if codes.shape != (self.height, self.width, 3) or codes.dtype != np.uint8:
            raise ValueError(f"frame {codes.shape} {codes.dtype} is not ({self.height}, {self.width}, 3) uint8")
        try:
            self._proc.stdin.write(np.ascontiguousarray(codes).data)
        except BrokenPipeError:
            self._proc.wait()
            raise InputError(f"{self._name}: the encoder stopped ({self._why()})") from None
        self.frames += 1

    def finish(self) -> None:
        """Close the input and wait for the encoder; raises when it failed."""
        try:
            self._proc.stdin.close()
        except BrokenPipeError:
            pass
        if self._proc.wait() != 0:
            raise InputError(f"{self._name}: the encoder failed ({self._why()})")

    def _why(self) -> str:
        self._log.seek(0)
        return _last_line(self._log.read().decode("utf-8", "replace")) or f"ffmpeg exit status {self._proc.returncode}"

    def __enter__(self) -> Encoder:
        return self

    def __exit__(self, kind, exc, tb) -> bool:
        if self._proc.poll() is None:
            if kind is not None:
                self._proc.kill()
            else:
                self.finish()
        self._proc.wait()
        if self._proc.stdin and not self._proc.stdin.closed:
            try:
                self._proc.stdin.close()
            except BrokenPipeError:
                pass
        self._log.close()
        return False


def keyframe_interval(rate: Fraction) -> int:
    """Frames from one keyframe to the next in a video we write: :data:`KEY_SECONDS` worth."""
    return max(1, round(float(rate) * KEY_SECONDS))


def encoder_settings(fmt: str, delivery: str = DEFAULT_DELIVERY, rate: Fraction = Fraction(60)) -> list[str]:
    """ffmpeg's output options for a motion format and, for video, a delivery (at ``rate``).

    Video is coded in closed groups of :func:`keyframe_interval` frames at a constant
    quantiser, on a fixed number of encoder threads: each group then codes to the same
    frames whether the clip is encoded whole or group by group (a cluster's segments),
    on any machine.
    """
    if fmt == "apng":
        return ["-c:v", "apng", "-pix_fmt", "rgb24", "-plays", "0"]
    if fmt == "webp":  # lossless WebP holds 8-bit RGB exactly
        return ["-c:v", "libwebp_anim", "-lossless", "1", "-compression_level", "1", "-loop", "0",
                "-pix_fmt", "bgra"]
    mp4 = ["-movflags", "+use_metadata_tags"] if fmt == "mp4" else []  # no faststart: its second pass cannot read an fd
    gop = keyframe_interval(rate)
    groups = ["-g", str(gop), "-keyint_min", str(gop), "-sc_threshold", "0", "-x264-params", "open-gop=0",
              "-threads", str(ENCODER_THREADS)]
    if delivery == "lossless":
        return ["-c:v", "libx264rgb", "-qp", "0", "-preset", SPEED, "-pix_fmt", "rgb24", *groups, *mp4]
    full = delivery == "444"
    matrix = f"scale=out_color_matrix=bt709:out_range={'pc' if full else 'tv'}:flags=accurate_rnd+full_chroma_int"
    return ["-vf", matrix, "-c:v", "libx264", "-pix_fmt", "yuv444p" if full else "yuv420p",
            "-qp", str(QUALITY[delivery]), "-preset", SPEED, *groups,
            "-colorspace", "bt709", "-color_primaries", "bt709", "-color_trc", "iec61966-2-1",
            "-color_range", "pc" if full else "tv", *mp4]


def decode_pending(target: PendingFile, width: int, height: int) -> Iterator[np.ndarray]:
    """The frames of a finished pending file, as a player decodes them."""
    fd = target.open_for_reading()
    try:
        yield from decode([ffmpeg(), "-hide_banner", "-nostdin", "-loglevel", "error", "-fd", str(fd), "-i", "fd:"],
                          width, height, None, target.path, pass_fds=(fd,))
    finally:
        os.close(fd)


def packet_sums(path: str | os.PathLike, fd: int | None = None) -> list[str]:
    """The MD5 of each coded video frame of a file, as stored (no decoding): two files whose
    lists match hold the same coded frames in the same order. ``fd`` reads an open file."""
    source = ["-fd", str(fd), "-i", "fd:"] if fd is not None else ["-i", str(path)]
    done = subprocess.run([ffmpeg(), "-hide_banner", "-nostdin", "-loglevel", "error", *source, "-map", "0:v:0",
                           "-c", "copy", "-f", "framemd5", "-"], capture_output=True,
                          pass_fds=() if fd is None else (fd,))
    if done.returncode:
        raise InputError(f"{path}: cannot be read back ({_last_line(done.stderr.decode('utf-8', 'replace'))})")
    return [line.rsplit(",", 1)[1].strip() for line in done.stdout.decode().splitlines()
            if line and not line.startswith("#")]


def concat(target: PendingFile, fmt: str, parts: list[Path], listing: Path, *,
           audio: tuple[Path, float, float | None] | None = None, record: str | None = None) -> None:
    """Join video ``parts`` (in order, coded alike) into ``target`` as ``fmt`` (mkv or mp4)
    by copying their coded frames, with the sound of ``audio`` (source, start, length) and
    the record; ``listing`` is where the list of parts is written for ffmpeg."""
    listing.write_text("".join(f"file '{p}'\n" for p in parts))
    cmd = [ffmpeg(), "-hide_banner", "-nostdin", "-loglevel", "error", "-f", "concat", "-safe", "0", "-auto_convert", "0",
           "-i", str(listing)]
    if audio is not None:
        src, start, length = audio
        cmd += ["-ss", _seconds(start)] + ([] if length is None else ["-t", _seconds(length)])
        cmd += ["-i", str(src), "-map", "0:v:0", "-map", "1:a?", "-c:a", "copy"]
    cmd += ["-c:v", "copy"]
    if fmt == "mp4":
        cmd += ["-movflags", "+use_metadata_tags"]
    if record is not None:
        cmd += ["-metadata", f"crtfilter={record}"]
    cmd += ["-fd", str(target.fd), "-f", {"mkv": "matroska", "mp4": "mp4"}[fmt], "fd:"]
    done = subprocess.run(cmd, capture_output=True, pass_fds=(target.fd,), start_new_session=True)
    if done.returncode:
        raise InputError(f"{target.path}: the parts could not be joined "
                         f"({_last_line(done.stderr.decode('utf-8', 'replace'))})")
