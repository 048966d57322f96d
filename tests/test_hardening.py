"""Batches that are killed or interrupted, random inputs and presets, paths that must not be
written, inputs that must not change, presets that extend others."""

from __future__ import annotations

import hashlib
import math
import os
import re
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import imagecodecs
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from PIL import Image
from typer.testing import CliRunner

from crtfilter import job
from crtfilter.cli import app
from crtfilter.color import DITHERS, TRANSFERS
from crtfilter.errors import InputError, SettingsError
from crtfilter.job import plan_outputs, render_batch, render_file
from crtfilter.masks import ORDERS, ORIENTATIONS, PHOSPHORS
from crtfilter.presets import (
    Preset,
    load_preset,
    load_preset_file,
    settings_dict,
    settings_from_dict,
)
from crtfilter.scale import KERNELS, plan_geometry
from crtfilter.tone import CURVES

BATCH_FILES = 12
BATCH_W, BATCH_H, BATCH_SCALE = 128, 96, 8  # about a quarter of a second per file: a batch of seconds
WAIT = 60.0  # seconds: only a hung process gets anywhere near this


def leftovers(folder: Path) -> list[str]:
    """Temporary files a write may have left: anything hidden or ending in .part."""
    return sorted(str(p) for p in folder.rglob("*") if p.name.startswith(".") or p.suffix == ".part")


def _hashes(root: Path) -> dict[str, str]:
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def inputs(tmp_path_factory) -> Path:
    """Every input this module renders: a batch of noise frames and a tree with sub-folders."""
    root = tmp_path_factory.mktemp("inputs")
    rng = np.random.default_rng(7)
    batch = root / "batch"
    batch.mkdir()
    for i in range(BATCH_FILES):
        pixels = rng.integers(0, 256, (BATCH_H, BATCH_W, 3), dtype=np.uint8)
        Image.fromarray(pixels).save(batch / f"frame{i:02d}.png")
    tree = root / "tree"
    for sub in ("a", "b", "a/deeper", "c d"):
        (tree / sub).mkdir(parents=True)
    for rel in ("a/title.png", "b/title.png", "a/deeper/title.png", "c d/end..png", "top.png"):
        Image.fromarray(rng.integers(0, 256, (12, 16, 3), dtype=np.uint8)).save(tree / rel)
    (tree / "a" / "readme.txt").write_text("not a picture")
    return root


@pytest.fixture(scope="module")
def input_hashes(inputs) -> dict[str, str]:
    return _hashes(inputs)


@pytest.fixture(autouse=True)
def inputs_never_change(inputs, input_hashes):
    """Whatever a test renders, every input file stays byte for byte as it was."""
    assert _hashes(inputs) == input_hashes
    yield
    assert _hashes(inputs) == input_hashes


def _start_batch(src: Path, out: Path, *extra, capture: bool = False) -> subprocess.Popen:
    pipe = subprocess.PIPE if capture else subprocess.DEVNULL
    return subprocess.Popen([sys.executable, "-m", "crtfilter", "render", str(src), "-o", str(out),
                             "--scale", str(BATCH_SCALE), "-q", *extra],
                            stdout=pipe, stderr=pipe, text=True, start_new_session=True)


def _live_in_session(sid: int) -> list[int]:
    """Processes of session ``sid`` that still run (a zombie only waits to be reaped), from /proc."""
    found = []
    for name in filter(str.isdigit, os.listdir("/proc")):
        try:
            fields = Path(f"/proc/{name}/stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if fields[0] not in "ZX" and int(fields[3]) == sid:
            found.append(int(name))
    return found


def _session_gone(sid: int, within: float) -> list[int]:
    deadline = time.monotonic() + within
    while (left := _live_in_session(sid)) and time.monotonic() < deadline:
        time.sleep(0.02)
    return left


def _end_session(proc: subprocess.Popen) -> None:
    """Kill whatever is left of a batch started by _start_batch, workers included."""
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except ProcessLookupError:
        pass
    proc.wait(timeout=WAIT)
    assert _session_gone(proc.pid, WAIT) == []


def _wait_for_first_output(proc: subprocess.Popen, out: Path) -> None:
    deadline = time.monotonic() + WAIT
    while not (out.is_dir() and any(out.glob("*.png"))):
        assert proc.poll() is None, "the batch ended before writing anything"
        assert time.monotonic() < deadline, "no output appeared"
        time.sleep(0.005)


def _assert_complete_outputs(out: Path) -> list[Path]:
    found = sorted(out.glob("*.png"))
    for png in found:
        # reference library: imagecodecs (libpng) decodes the whole file, checking every CRC
        decoded = imagecodecs.png_decode(png.read_bytes())
        assert decoded.shape == (BATCH_H * BATCH_SCALE, BATCH_W * BATCH_SCALE, 3)
        # reference library: Pillow, a second, independent decoder
        with Image.open(png) as im:
            im.load()
            assert im.size == (BATCH_W * BATCH_SCALE, BATCH_H * BATCH_SCALE)
    return found


def test_killed_batch_leaves_only_complete_outputs_and_runs_again(inputs, tmp_path):
    out = tmp_path / "out"
    proc = _start_batch(inputs / "batch", out)
    try:
        _wait_for_first_output(proc, out)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=WAIT)
        # its workers die with it: none goes on writing (or runs into the second run)
        assert _session_gone(proc.pid, 5.0) == [], "a worker outlived the killed batch"
    finally:
        _end_session(proc)
    assert proc.returncode == -signal.SIGKILL  # it was killed mid-batch, not finished
    found = _assert_complete_outputs(out)
    assert 1 <= len(found) < BATCH_FILES
    assert leftovers(out) == []
    again = _start_batch(inputs / "batch", out, "--force", capture=True)
    stdout, stderr = again.communicate(timeout=WAIT)
    assert again.returncode == 0, stderr
    assert f"{BATCH_FILES} rendered, 0 failed" in stdout
    assert len(_assert_complete_outputs(out)) == BATCH_FILES
    assert leftovers(out) == []


def test_ctrl_c_stops_the_batch_with_a_summary_and_status_130(inputs, tmp_path):
    out = tmp_path / "out"
    proc = _start_batch(inputs / "batch", out, capture=True)
    try:
        _wait_for_first_output(proc, out)
        proc.send_signal(signal.SIGINT)
        stdout, stderr = proc.communicate(timeout=WAIT)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 130, stderr
    assert "Traceback" not in stderr
    lines = [ln for ln in stdout.splitlines() if ln.startswith("interrupted:")]
    assert len(lines) == 1, stdout
    counts = re.fullmatch(r"interrupted: (\d+) rendered, (\d+) failed, (\d+) not started", lines[0])
    assert counts, lines[0]
    rendered, failed, not_started = map(int, counts.groups())
    assert failed == 0 and not_started >= 1
    assert rendered + failed + not_started == BATCH_FILES
    found = _assert_complete_outputs(out)
    # every file counted as rendered is there; see the next test for one that is there uncounted
    assert len(found) >= rendered
    assert leftovers(out) == []


def test_ctrl_c_during_the_read_back_leaves_no_uncounted_output(inputs, tmp_path, monkeypatch):
    def interrupted(path):
        raise KeyboardInterrupt("ctrl-c")  # as if Ctrl-C arrived just after the file was written

    monkeypatch.setattr(job, "check_written", lambda path, data: interrupted(path))
    out = tmp_path / "out"
    result = render_batch(plan_outputs([inputs / "batch"], out), scale=1)
    assert result.interrupted
    assert len(sorted(out.glob("*.png"))) == len(result.reports)


# --------------------------------------------------------------------------
# Random inputs and presets

_FLOAT = {"allow_nan": False, "allow_infinity": False}

VALID_TABLES = {
    "source": {
        "transfer": st.sampled_from(sorted(TRANSFERS)),
        "alpha": st.sampled_from(["keep", "over:black", "over:white", "over:#202830", "over:grey"]),
        "pixel_aspect": st.builds(lambda a, b: f"{a}:{b}", st.integers(1, 8), st.integers(1, 8)),
    },
    "output": {
        "fit": st.builds(lambda w, h: f"{w}x{h}", st.integers(1, 640), st.integers(1, 480)),
        "whole_scale": st.booleans(),
        "kernel": st.sampled_from(sorted(KERNELS)),
        "depth": st.sampled_from([8, 16]),
        "dither": st.sampled_from(sorted(DITHERS)),
    },
    "mask": {
        "phosphor": st.sampled_from(sorted(PHOSPHORS)),
        "triad_pitch": st.floats(1.5, 64.0, **_FLOAT),
        "order": st.sampled_from(sorted(ORDERS)),
        "phosphor_fill": st.floats(0.2, 1.0, **_FLOAT),
        "slot_height": st.floats(2.0, 256.0, **_FLOAT),
        "slot_gap": st.floats(0.0, 0.9, **_FLOAT),
        "dot_row_height": st.floats(1.0, 128.0, **_FLOAT),
        "phosphor_strength": st.floats(0.0, 1.0, **_FLOAT),
        "scanlines": st.booleans(),
        "beam_width": st.floats(0.2, 2.0, **_FLOAT),
        "scanline_strength": st.floats(0.0, 1.0, **_FLOAT),
        "orientation": st.sampled_from(list(ORIENTATIONS)),
    },
    "tone": {
        "curve": st.sampled_from(sorted(CURVES)),
        "softness": st.floats(0.0, 1.0, **_FLOAT),
        "slope": st.floats(1.0, 64.0, **_FLOAT),
        "balance_tiles": st.booleans(),
    },
}

# [output] fit is always given, so that outputs stay small (at most 640x480) and quick
valid_presets = st.fixed_dictionaries(
    {"description": st.just("random"),
     "output": st.fixed_dictionaries(
         {"fit": VALID_TABLES["output"]["fit"]},
         optional={k: v for k, v in VALID_TABLES["output"].items() if k != "fit"})},
    optional={table: st.fixed_dictionaries({}, optional=keys) for table, keys in VALID_TABLES.items()
              if table != "output"},
)


@st.composite
def source_pictures(draw):
    """(width, height, channels, bits, fill, seed): what _write_source draws."""
    return (draw(st.integers(1, 700)), draw(st.integers(1, 500)), draw(st.integers(1, 4)),
            draw(st.sampled_from([8, 16])), draw(st.sampled_from(["noise", "black", "white", "clear"])),
            draw(st.integers(0, 2**32 - 1)))


def _write_source(path: Path, w: int, h: int, channels: int, bits: int, fill: str, seed: int) -> None:
    top = 2**bits - 1
    dtype = np.uint8 if bits == 8 else np.uint16
    pixels = np.random.default_rng(seed).integers(0, top + 1, (h, w, channels), dtype=dtype)
    if fill in ("black", "white"):
        pixels[..., :3 if channels >= 3 else 1] = 0 if fill == "black" else top
    if fill == "clear" and channels in (2, 4):
        pixels[..., -1] = 0  # fully transparent
    if bits == 16 and channels > 1:
        path.write_bytes(imagecodecs.png_encode(pixels))
        return
    mode = {1: "L", 2: "LA", 3: "RGB", 4: "RGBA"}[channels]
    im = Image.fromarray(pixels[..., 0] if channels == 1 else pixels, None if bits == 16 else mode)
    assert im.mode == ("I;16" if bits == 16 else mode)
    im.save(path)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(picture=source_pictures(), data=valid_presets)
def test_random_pictures_and_valid_presets_always_render(picture, data):
    description, chosen = settings_from_dict(data, "x.toml: ")
    preset = Preset("random", description, chosen)
    with tempfile.TemporaryDirectory() as folder:
        src, dst = Path(folder) / "in.png", Path(folder) / "out.png"
        _write_source(src, *picture)
        try:
            report = render_file(src, dst, preset=preset)
        except SettingsError as exc:
            message = str(exc)
            if message.startswith("mask mean must be in (0, 1] (got 0.0)"):
                # the known failure of a picture narrower than one triad: see
                # test_picture_narrower_than_a_triad_renders; any other picture must render
                assert _narrower_than_a_triad(picture[0], picture[1], chosen), message
                return
            # a slope steeper than 1 / (mask mean) is refused, with the reason in numbers
            assert "slope" in data.get("tone", {}), message
            assert re.match(r"slope \S+ needs mask mean <= \S+; this mask's mean is \S+", message), message
            return
        assert dst.is_file()
    lum = report["luminance"]
    assert math.isfinite(lum["input"]) and lum["input"] >= 0
    if lum["input"] == 0:
        assert lum["ratio"] is None
    else:
        assert math.isfinite(lum["ratio"]) and lum["ratio"] >= 0
    out_w, out_h = report["geometry"]["output"]
    assert 1 <= out_w <= 640 and 1 <= out_h <= 480


def _narrower_than_a_triad(src_w: int, src_h: int, chosen) -> bool:
    g = plan_geometry(src_w, src_h, chosen.geometry)
    across = g.pic_w if chosen.mask.orientation == "horizontal" else g.pic_h
    return chosen.mask.phosphor != "none" and across < chosen.mask.triad_pitch


def test_picture_narrower_than_a_triad_renders(tmp_path):
    # a 1-pixel-wide strip (a palette column, say) under the default preset: fit 3840x2160
    # gives a whole scale of 1, so the picture is 1 px wide and the triad 3 px
    src = tmp_path / "strip.png"
    Image.fromarray(np.full((1500, 1, 3), 128, np.uint8)).save(src)
    report = render_file(src, tmp_path / "out.png")
    assert report["geometry"]["picture"][2] == 1
    assert math.isfinite(report["luminance"]["ratio"])


# Invalid values: each strategy gives (table, key, value) for one bad entry.
_RANGES = {("mask", "triad_pitch"): (1.5, 64.0), ("mask", "phosphor_fill"): (0.2, 1.0),
           ("mask", "slot_height"): (2.0, 256.0), ("mask", "slot_gap"): (0.0, 0.9),
           ("mask", "dot_row_height"): (1.0, 128.0), ("mask", "phosphor_strength"): (0.0, 1.0),
           ("mask", "beam_width"): (0.2, 2.0), ("mask", "scanline_strength"): (0.0, 1.0),
           ("tone", "softness"): (0.0, 1.0), ("tone", "slope"): (1.0, 64.0), ("output", "scale"): (0.0, 64.0)}
_CHOICES = {("mask", "phosphor"): PHOSPHORS, ("mask", "order"): ORDERS, ("mask", "orientation"): ORIENTATIONS,
            ("tone", "curve"): CURVES, ("output", "kernel"): KERNELS, ("output", "dither"): DITHERS,
            ("source", "transfer"): TRANSFERS}
_KINDS = {"number": [*_RANGES, ("output", "depth")],
          "bool": [("mask", "scanlines"), ("tone", "balance_tiles"), ("output", "whole_scale")],
          "text": [*_CHOICES, ("output", "fit"), ("output", "size"), ("source", "alpha"),
                   ("source", "pixel_aspect"), ("source", "display_aspect")]}


def _out_of_range(where):
    lo, hi = _RANGES[where]
    below = st.floats(max_value=lo, exclude_max=True)
    above = st.floats(min_value=hi, exclude_min=True)
    if where == ("output", "scale"):
        below = st.floats(max_value=lo)  # scale is in (0, 64]: 0 itself is out
    return st.one_of(below, above, st.integers(max_value=math.floor(lo) - 1),
                     st.integers(min_value=math.floor(hi) + 1), st.just(float("nan"))).map(lambda v: (*where, v))


out_of_range = st.sampled_from(sorted(_RANGES)).flatmap(_out_of_range)
bad_depth = st.one_of(st.integers(), st.floats()).filter(lambda v: v not in (8, 16)).map(
    lambda v: ("output", "depth", v))
unknown_choice = st.sampled_from(sorted(_CHOICES)).flatmap(
    lambda where: st.text(max_size=12).filter(lambda v: v not in _CHOICES[where]).map(lambda v: (*where, v)))
bad_alpha = st.one_of(
    st.text(max_size=12).filter(lambda v: v != "keep" and not v.startswith("over:")),
    st.sampled_from(["over:#12345", "over:#gggggg", "over:not-a-colour", "under:black", "keep:"]),
).map(lambda v: ("source", "alpha", v))
bad_size = st.sampled_from(["0x5", "5x0", "40000x10", "axb", "", "10", "10x10x10", "-3x4", "3.5x4"]).map(
    lambda v: ("output", "size", v))
bad_ratio = st.tuples(st.sampled_from(["pixel_aspect", "display_aspect"]),
                      st.sampled_from(["0:1", "9:1", "1:9", "1:0", "a:b", "", "100", "1:2:3"])).map(
    lambda kv: ("source", *kv))
_WRONG_TYPE = {"number": st.one_of(st.text(max_size=5), st.booleans(), st.lists(st.integers(), max_size=2)),
               "bool": st.one_of(st.integers(), st.floats(), st.text(max_size=5)),
               "text": st.one_of(st.integers(), st.floats(), st.booleans(), st.lists(st.text(), max_size=2))}
wrong_type = st.sampled_from(sorted(_KINDS)).flatmap(
    lambda kind: st.tuples(st.sampled_from(_KINDS[kind]), _WRONG_TYPE[kind]).map(lambda p: (*p[0], p[1])))
unknown_key = st.tuples(st.sampled_from(["source", "output", "mask", "tone"]),
                        st.text(min_size=1, max_size=12), st.integers()).filter(
    lambda t: t[1] not in VALID_TABLES[t[0]] and t[1] not in ("scale", "size", "display_aspect"))
unknown_table = st.text(min_size=1, max_size=12).filter(
    lambda name: name not in ("source", "output", "mask", "tone", "description")).map(lambda n: (n, None, 1))


@settings(max_examples=150, deadline=None)
@given(base=valid_presets,
       bad=st.one_of(out_of_range, bad_depth, unknown_choice, bad_alpha, bad_size, bad_ratio, wrong_type,
                     unknown_key, unknown_table))
def test_invalid_preset_values_give_a_settings_error_naming_the_key(base, bad):
    table, key, value = bad
    data = {t: dict(v) for t, v in base.items() if isinstance(v, dict)}
    data.pop("tone", None)  # a valid slope may be refused for the mask; that is not this test's error
    if key is None:  # an unknown table, named as written (quoted)
        data[table] = {"anything": value}
        named = repr(table)
    else:
        data.setdefault(table, {})[key] = value
        known = key in VALID_TABLES[table] or key in ("scale", "size", "display_aspect")
        named = key if known else repr(key)
    with pytest.raises(SettingsError, match=r"^x\.toml: ") as caught:
        settings_from_dict(data, "x.toml: ")
    message = str(caught.value)
    # a key may be named as written or in plain words ("pixel aspect" for pixel_aspect)
    assert named in message or named.replace("_", " ") in message, message


def test_bad_fit_is_named_as_fit():
    with pytest.raises(SettingsError, match=r"fit") as caught:
        settings_from_dict({"output": {"fit": "big"}}, "x.toml: ")
    assert "size" not in str(caught.value)


# --------------------------------------------------------------------------
# Paths


def test_every_planned_output_lands_inside_the_output_folder(inputs, tmp_path):
    out = tmp_path / "out"
    plan = plan_outputs([inputs / "tree"], out)
    assert len(plan.pairs) == 5
    for _src, dst in plan.pairs:
        assert dst.resolve().is_relative_to(out.resolve())
    assert [p.name for p in plan.skipped] == ["readme.txt"]


def test_same_name_in_two_folders_lands_in_two_places(inputs, tmp_path):
    out = tmp_path / "out"
    plan = plan_outputs([inputs / "tree"], out)
    pairs = {src.relative_to(inputs / "tree").as_posix(): dst for src, dst in plan.pairs}
    assert pairs["a/title.png"] == out / "a" / "title.png"
    assert pairs["b/title.png"] == out / "b" / "title.png"
    assert pairs["a/deeper/title.png"] == out / "a" / "deeper" / "title.png"
    result = render_batch(plan, scale=2)
    assert not result.failures and len(result.reports) == 5
    for rel in ("a/title.png", "b/title.png", "a/deeper/title.png", "c d/end..png", "top.png"):
        assert (out / rel).is_file()


def test_two_input_folders_that_would_write_one_file_are_refused(inputs, tmp_path):
    with pytest.raises(InputError, match=r"title\.png: both .* would be written here"):
        plan_outputs([inputs / "tree" / "a", inputs / "tree" / "b"], tmp_path / "out")


def test_output_folder_that_is_the_input_folder_writes_nothing(inputs, tmp_path):
    tree = inputs / "tree"
    result = CliRunner().invoke(app, ["render", str(tree), "-o", str(tree), "--scale", "2"])
    assert result.exit_code == 2
    assert result.stderr.startswith("crtfilter: error:") and result.stderr.count("\n") == 1
    assert leftovers(tree) == []


def test_output_folder_that_is_the_input_folder_is_refused_as_overwriting(inputs):
    with pytest.raises(InputError, match="output would overwrite the input"):
        plan_outputs([inputs / "tree"], inputs / "tree")


def test_single_output_that_is_the_input_is_refused(inputs):
    src = inputs / "tree" / "top.png"
    with pytest.raises(InputError, match="output would overwrite the input"):
        plan_outputs([src], src)
    with pytest.raises(InputError, match="output would overwrite the input"):
        render_file(src, src, scale=2, force=True)


@pytest.mark.parametrize("force", [False, True])
def test_output_symlink_to_an_input_is_refused(inputs, tmp_path, force):
    src = inputs / "tree" / "a" / "title.png"
    out = tmp_path / "out"
    out.mkdir()
    link = out / "title.png"
    link.symlink_to(src)
    with pytest.raises(InputError, match="output would overwrite the input"):
        render_file(src, link, scale=2, force=force)
    with pytest.raises(InputError, match="output would overwrite the input"):
        plan_outputs([inputs / "tree" / "a"], out)
    assert link.is_symlink() and os.readlink(link) == str(src)


def test_output_folder_symlinked_into_the_inputs_is_refused(inputs, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "a").symlink_to(inputs / "tree" / "a", target_is_directory=True)
    with pytest.raises(InputError, match="output would overwrite the input"):
        plan_outputs([inputs / "tree"], out)


def test_forced_output_over_a_symlink_replaces_the_link_not_its_target(inputs, tmp_path):
    keep = tmp_path / "keep.png"
    keep.write_bytes(b"someone else's file")
    link = tmp_path / "out.png"
    link.symlink_to(keep)
    render_file(inputs / "tree" / "top.png", link, scale=2, force=True)
    assert keep.read_bytes() == b"someone else's file"
    assert not link.is_symlink() and link.is_file()


# --------------------------------------------------------------------------
# Presets that extend others


def test_extending_a_shipped_preset_overrides_only_its_own_keys(tmp_path):
    mine = tmp_path / "mine.toml"
    mine.write_text('extends = "slot-medium-within-4k"\n[mask]\ntriad_pitch = 6.0\n[tone]\nsoftness = 0.25\n')
    base, derived = load_preset("slot-medium-within-4k"), load_preset_file(mine)
    a, b = settings_dict(base.settings), settings_dict(derived.settings)
    changed = {(t, k) for t in a for k in a[t] if a[t][k] != b[t][k]}
    assert changed == {("mask", "triad_pitch"), ("tone", "softness")}
    assert b["mask"]["triad_pitch"] == 6.0 and b["tone"]["softness"] == 0.25
    assert derived.description == base.description  # not given, so inherited


def test_extends_in_a_circle_is_refused(tmp_path):
    (tmp_path / "a.toml").write_text('extends = "b"\n[mask]\ntriad_pitch = 4.0\n')
    (tmp_path / "b.toml").write_text('extends = "a.toml"\n')
    with pytest.raises(SettingsError, match=r"circle: a\.toml -> b\.toml -> a\.toml"):
        load_preset_file(tmp_path / "a.toml")
    (tmp_path / "self.toml").write_text('extends = "self"\n')
    with pytest.raises(SettingsError, match="circle"):
        load_preset_file(tmp_path / "self.toml")


def test_extending_an_unknown_preset_suggests_a_close_name(tmp_path):
    mine = tmp_path / "mine.toml"
    mine.write_text('extends = "slot-medium-4"\n')
    with pytest.raises(SettingsError,
                       match=r"extends unknown preset 'slot-medium-4'; did you mean 'slot-medium-within-4k'\?"):
        load_preset_file(mine)
