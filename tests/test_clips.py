"""Clips end to end: animated images and video through the render, written by a real ffmpeg
(imageio-ffmpeg's), read back, measured and checked for flashes; and what a stopped clip leaves.

The clips are drawn here from a bundled scene (panned, so every frame differs); the flashing one
exists only in this test (never in the shipped samples).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from conftest import SCENE, TOL_ENERGY_FILE, run

from crtfilter import clips
from crtfilter.engine import render_codes
from crtfilter.job import render_file
from crtfilter.presets import load_preset

PRESET = "aperture-soft-within-4k"
SMALL = {"size": "384x288"}  # the same mask and curves, a small picture: quick clips


def _scene(w: int = 96, h: int = 72) -> np.ndarray:
    with Image.open(SCENE) as im:
        return np.asarray(im.convert("RGB").crop((100, 80, 100 + w, 80 + h)))


def _panned(n: int, w: int = 96, h: int = 72) -> list[np.ndarray]:
    base = _scene(w, h)
    return [np.roll(base, 3 * k, axis=1) for k in range(n)]


def _write_video(path: Path, frames: list[np.ndarray], fps: int, *, audio: bool = False, lossless: bool = True):
    """A video of raw RGB frames by ffmpeg itself (the encoder under test is not used)."""
    h, w = frames[0].shape[:2]
    cmd = [clips.ffmpeg(), "-hide_banner", "-loglevel", "error", "-f", "rawvideo", "-pix_fmt", "rgb24",
           "-s", f"{w}x{h}", "-r", str(fps), "-i", "pipe:0"]
    if audio:
        cmd += ["-f", "lavfi", "-i", f"sine=frequency=440:duration={len(frames) / fps}", "-c:a", "aac"]
    cmd += (["-c:v", "libx264rgb", "-qp", "0"] if lossless else ["-c:v", "libx264", "-pix_fmt", "yuv420p"])
    cmd += ["-shortest", str(path)] if audio else [str(path)]
    subprocess.run(cmd, input=b"".join(np.ascontiguousarray(f).tobytes() for f in frames), check=True)
    return path


def _decoded(path: Path) -> list[np.ndarray]:
    info = clips.probe(path)
    return [f.codes for f in clips.read_frames(info)] if info.kind == "animation" else list(
        clips.decode([clips.ffmpeg(), "-hide_banner", "-nostdin", "-loglevel", "error", "-i", str(path)],
                     info.width, info.height, None, path))


def _streams(path: Path) -> str:
    done = subprocess.run([clips.ffmpeg(), "-hide_banner", "-i", str(path)], capture_output=True)
    return done.stderr.decode()


@pytest.fixture(scope="module")
def video(tmp_path_factory) -> Path:
    return _write_video(tmp_path_factory.mktemp("clip") / "walk.mkv", _panned(12), 12, audio=True)


# --------------------------------------------------------------------------
# Reading

def test_gif_display_times_become_a_constant_rate(tmp_path):
    # GIF counts display time in hundredths of a second (GIF89a, from memory); Pillow writes it
    frames = [Image.fromarray(f) for f in _panned(3)]
    path = tmp_path / "a.gif"
    frames[0].save(path, save_all=True, append_images=frames[1:], duration=[100, 50, 150], loop=0)
    clip = clips.probe(path)
    assert clip.rate == 20 and clip.holds == (2, 1, 3) and clip.frames == 6


def test_a_still_is_no_clip(tmp_path):
    assert clips.probe(SCENE) is None


@pytest.mark.parametrize("text, seconds", [("4", 4.0), ("1.5", 1.5), ("00:01.5", 1.5), ("1:02:03.25", 3723.25)])
def test_times(text, seconds):
    assert clips.parse_time(text) == pytest.approx(seconds)


@pytest.mark.parametrize("text", ["", "1:", "a", "1:75", "-2", "1:2:3:4"])
def test_bad_times_are_refused(text):
    from crtfilter.errors import SettingsError

    with pytest.raises(SettingsError):
        clips.parse_time(text)


def test_ntsc_rate_is_exact():
    # 29.97 is 30000/1001 frames per second (SMPTE ST 12-1 drop-frame rate, from memory)
    assert clips._rate("29.97") == clips.Fraction(30000, 1001)
    assert clips._rate("60") == 60


# --------------------------------------------------------------------------
# Every output format: rendered, read back, light held per frame

def _expected(frames: list[np.ndarray]) -> list[np.ndarray]:
    s = load_preset(PRESET).with_options(**SMALL).settings
    return [render_codes(f, s).codes for f in frames]


@pytest.mark.parametrize("ending, delivery", [(".mkv", "lossless"), (".mp4", "lossless"), (".png", None),
                                              (".webp", None)])
def test_lossless_clips_hold_exactly_what_was_rendered(tmp_path, video, ending, delivery):
    out = tmp_path / f"out{ending}"
    rep = render_file(video, out, preset=PRESET, delivery=delivery or "444", **SMALL)
    got = _decoded(out)
    want = _expected(_panned(12))
    assert len(got) == len(want) == rep["clip"]["frames"] == len(rep["frames"])
    for g, w in zip(got, want, strict=True):
        assert np.array_equal(g, w)
    for f in rep["frames"]:
        assert abs(f["ratio"] - 1) < TOL_ENERGY_FILE
        assert f["plain_multiply_ratio"] < 0.9 * f["ratio"]  # a plain multiply darkens


def test_444_keeps_light_and_mask_near_lossless(tmp_path, video):
    out = tmp_path / "out.mkv"
    rep = render_file(video, out, preset=PRESET, **SMALL)
    assert rep["clip"]["delivery"] == "444"
    want = _expected(_panned(12))
    for g, w in zip(_decoded(out), want, strict=True):
        # near-lossless: 99 % of codes within 4 steps on this detailed crop (measured, at x264's
        # quality 3: bench/chroma.py chose it for light kept within 0.3 % on every preset)
        assert np.percentile(np.abs(g.astype(int) - w), 99) <= 4
    assert abs(rep["luminance"]["ratio_min"] - 1) < TOL_ENERGY_FILE
    assert abs(rep["luminance"]["ratio_max"] - 1) < TOL_ENERGY_FILE


def test_frames_measured_from_the_file_match_an_independent_measure(tmp_path, video, colour):
    out = tmp_path / "out.mkv"
    rep = render_file(video, out, preset=PRESET, **SMALL)
    for f, codes in zip(rep["frames"], _decoded(out), strict=True):
        # sRGB decoding by colour-science (IEC 61966-2-1), BT.709 luminance weights
        lin = colour.models.eotf_sRGB(codes / 255.0)
        y = float((lin @ np.array([0.2126, 0.7152, 0.0722])).mean())
        assert f["output"] == pytest.approx(y, rel=1e-4)


def test_animated_gif_to_apng_keeps_its_timing(tmp_path):
    frames = [Image.fromarray(f) for f in _panned(3)]
    src = tmp_path / "a.gif"
    frames[0].save(src, save_all=True, append_images=frames[1:], duration=[100, 50, 150], loop=0)
    out = tmp_path / "a.png"
    rep = render_file(src, out, preset=PRESET, **SMALL)
    with Image.open(out) as im:  # Pillow reads APNG as the reference
        assert im.n_frames == 6 == rep["clip"]["frames"]
        assert im.info["duration"] == pytest.approx(50)


def test_sound_is_copied(tmp_path, video):
    out = tmp_path / "out.mkv"
    rep = render_file(video, out, preset=PRESET, **SMALL)
    assert rep["clip"]["audio"] == "copied"
    assert "Audio: aac" in _streams(out)


def test_frame_ranges_and_times(tmp_path, video):
    a = render_file(video, tmp_path / "a.mkv", preset=PRESET, frames="3:7", **SMALL)
    assert [f["frame"] for f in a["frames"]] == [3, 4, 5, 6]
    b = render_file(video, tmp_path / "b.mkv", preset=PRESET, start="0.5", end="00:00.75", **SMALL)
    assert [f["frame"] for f in b["frames"]] == [6, 7, 8]  # 12 per second: frames that begin in [0.5, 0.75)
    want = _expected(_panned(12)[3:7])
    for g, w in zip(_decoded(tmp_path / "a.mkv"), want, strict=True):
        assert np.percentile(np.abs(g.astype(int) - w), 99) <= 4


def test_one_frame_of_a_video_is_a_picture(tmp_path, video):
    out = tmp_path / "f.png"
    render_file(video, out, preset=PRESET, frame=5, **SMALL)
    with Image.open(out) as im:
        assert np.array_equal(np.asarray(im.convert("RGB")), _expected([_panned(12)[5]])[0])


def test_the_mask_holds_still_while_the_content_moves():
    # a sprite moves over a flat field: in the bands of source lines away from it (light is
    # held per band of 8 lines) every frame is the same output, so the mask is fixed to the
    # screen and does not follow the content
    s = load_preset(PRESET).with_options(**SMALL).settings
    field = np.full((72, 96, 3), 120, np.uint8)
    outs = []
    for x in (10, 30):
        frame = field.copy()
        frame[30:40, x:x + 8] = 250
        outs.append(render_codes(frame, s).codes.astype(int))
    a, b = outs
    assert np.array_equal(a[:96], b[:96])      # source lines 0-23 (4 output rows per line)
    assert np.array_equal(a[192:], b[192:])    # source lines 48 on
    assert len(np.unique(a[:96], axis=0)) > 1  # there is a mask to hold still
    assert not np.array_equal(a, b)


# --------------------------------------------------------------------------
# Flash check on the written clip

def _flashing(fps: int = 30, seconds: int = 6) -> list[np.ndarray]:
    """Full-field flashing at 5 per second from 2 s to 4 s; still before and after."""
    base = _scene(64, 48)
    out = []
    for k in range(fps * seconds):
        t = k / fps
        on = 2 <= t < 4 and int(t * 10) % 2 == 0
        out.append(np.full_like(base, 250) if on else base // 4)
    return out


def test_flash_check_finds_the_fixtures_flashes_at_the_right_seconds(tmp_path):
    src = _write_video(tmp_path / "flash.mkv", _flashing(), 30)
    rep = render_file(src, tmp_path / "out.mkv", preset=PRESET, size="256x192")
    (span,) = rep["flashes"]["failing_seconds"]
    assert span[0] == pytest.approx(2.0, abs=0.05) and span[1] == pytest.approx(4.0, abs=0.1)
    assert rep["flashes"]["general"]


def test_flash_check_finds_none_in_a_still_clip(tmp_path, video):
    rep = render_file(video, tmp_path / "out.mkv", preset=PRESET, **SMALL)
    assert rep["flashes"]["failing_seconds"] == []


def test_cli_cautions_and_strict_exits_1(tmp_path):
    src = _write_video(tmp_path / "flash.mkv", _flashing(seconds=5), 30)
    res = run("render", src, "-o", tmp_path / "out.mkv", "--size", "256x192", "--preset", PRESET, "--strict")
    assert res.exit_code == 1
    assert "caution: flashes above the WCAG 2.3.1 thresholds at 2.00-" in res.output
    assert (tmp_path / "out.mkv").exists()  # written; the caution is for the person publishing it


# --------------------------------------------------------------------------
# Mistakes, and what a stopped clip leaves

def test_mistakes_get_one_line(tmp_path, video):
    bad = tmp_path / "bad.mp4"
    bad.write_bytes(b"not a video at all" * 100)
    res = run("render", bad, "-o", tmp_path / "o.mkv")
    assert res.exit_code == 2 and "not a video ffmpeg can read" in res.output
    res = run("render", SCENE, "-o", tmp_path / "s.mkv")
    assert res.exit_code == 2 and "a still picture" in res.output
    res = run("render", video, "-o", tmp_path / "o.jpg")
    assert res.exit_code == 2 and "a clip: write it as" in res.output
    res = run("render", video, "-o", tmp_path / "o.mkv", "--frames", "50:60", "--size", "256x192")
    assert res.exit_code == 2 and "no frames in the range chosen" in res.output
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.mp4"]


def _long_clip(tmp_path) -> Path:
    return _write_video(tmp_path / "long.mkv", _panned(240), 24)


def _leftovers(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name != "long.mkv")


def _start(tmp_path) -> subprocess.Popen:
    proc = subprocess.Popen([sys.executable, "-m", "crtfilter", "render", str(tmp_path / "long.mkv"), "-o",
                             str(tmp_path / "out.mkv"), "--preset", PRESET], start_new_session=True,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:  # until its encoder runs: the clip is part-way
        if any(_is_ffmpeg_encoder(pid, proc.pid) for pid in os.listdir("/proc") if pid.isdigit()):
            time.sleep(1.0)
            return proc
        time.sleep(0.1)
    proc.kill()
    pytest.fail("the encoder never started")


def _is_ffmpeg_encoder(pid: str, parent: int) -> bool:
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
        cmd = Path(f"/proc/{pid}/cmdline").read_bytes()
    except OSError:
        return False
    return int(stat.rsplit(")", 1)[1].split()[1]) == parent and b"pipe:0" in cmd


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc, Linux only")
@pytest.mark.parametrize("how", [signal.SIGINT, signal.SIGKILL])
def test_a_stopped_clip_leaves_no_file(tmp_path, how):
    _long_clip(tmp_path)
    proc = _start(tmp_path)
    os.kill(proc.pid, how)
    _out, err = proc.communicate(timeout=60)
    if how == signal.SIGINT:
        assert proc.returncode == 130, err.decode()
        assert b"interrupted" in _out + err
    else:
        assert proc.returncode == -signal.SIGKILL
    time.sleep(0.5)  # an orphaned encoder sees its input end and finishes into the unnamed file
    assert _leftovers(tmp_path) == []


def test_report_and_csv_hold_every_frame(tmp_path, video):
    res = run("render", video, "-o", tmp_path / "o.mkv", "--size", "384x288", "--preset", PRESET,
              "--report", tmp_path / "r.json", "--frames-csv", tmp_path / "f.csv")
    assert res.exit_code == 0, res.output
    assert "12 frames at 12/s (mkv, 444)" in res.output and "min " in res.output
    (rep,) = json.loads((tmp_path / "r.json").read_text())
    rows = (tmp_path / "f.csv").read_text().splitlines()
    assert len(rows) == 1 + 12 == 1 + len(rep["frames"])


def test_check_accepts_a_clip(tmp_path, video):
    res = run("check", PRESET, "--images", video, "--json", tmp_path / "c.json")
    assert res.exit_code == 0, res.output
    cases = json.loads((tmp_path / "c.json").read_text())["cases"]
    (light,) = [c for c in cases if c["image"] == "walk.mkv"]
    assert light["passed"] and abs(light["value"] - 1) < TOL_ENERGY_FILE
