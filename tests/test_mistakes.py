"""A table of mistakes a user can make, walked through every command.

Each must end in exactly one line on stderr, ``crtfilter: error: ...``, the documented
exit status (2: bad usage or bad input), no traceback, and no file written.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from PIL import Image

from conftest import SCENE, run

QUICK = "scanlines-only-within-1080p"


@pytest.fixture(scope="module")
def place(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("mistakes")
    with Image.open(SCENE) as im:
        im.convert("RGB").crop((0, 0, 48, 32)).save(root / "frame.png")
    (root / "images").mkdir()
    with Image.open(SCENE) as im:
        im.convert("RGB").crop((0, 0, 48, 32)).save(root / "images" / "frame.png")
    (root / "empty").mkdir()
    (root / "not-an-image.png").write_bytes(b"plain text, not a PNG")
    (root / "a-file").write_text("x")
    (root / "bad.toml").write_text("[mask\ntriad_pitch = 3\n")
    (root / "wrong.toml").write_text('[mask]\ntriad_pitch = "wide"\n')
    (root / "nested.toml").write_text("x = " + "[" * 5000 + "]" * 5000 + "\n")
    (root / "plain.txt").write_text("not a rendered picture")
    os.mkfifo(root / "fifo.png")
    os.mkfifo(root / "fifo.jpg")
    return root


def _mistakes(root: Path) -> list[tuple[str, list[str], str]]:
    """(what, arguments, a word the line must hold)."""
    out = str(root / "written" / "out.png")
    frame = str(root / "frame.png")
    return [
        # render
        ("render: missing input", ["render", str(root / "nope.png"), "-o", out], "no such file"),
        ("render: not an image", ["render", str(root / "not-an-image.png"), "-o", out], "not-an-image.png"),
        ("render: a pipe as input", ["render", str(root / "fifo.png"), "-o", out], "fifo.png"),
        ("render: unknown preset", ["render", frame, "-o", out, "--preset", "aperture-fin-within-4k"], "did you mean"),
        ("render: broken preset file", ["render", frame, "-o", out, "--preset", str(root / "bad.toml")], "bad.toml"),
        ("render: preset value of the wrong kind", ["render", frame, "-o", out, "--preset", str(root / "wrong.toml")],
         "triad_pitch"),
        ("render: deeply nested preset", ["render", frame, "-o", out, "--preset", str(root / "nested.toml")],
         "nested.toml"),
        ("render: bad size", ["render", frame, "-o", out, "--size", "big"], "size"),
        ("render: scale too large for size", ["render", frame, "-o", out, "--scale", "30", "--size", "640x480"],
         "larger than size"),
        ("render: crop past the frame", ["render", frame, "-o", out, "--crop", "0,0,9999,10"], "reaches past"),
        ("render: crop not numbers", ["render", frame, "-o", out, "--crop", "a,b"], "X,Y,W,H"),
        ("render: overscan too much", ["render", frame, "-o", out, "--overscan", "80"], "overscan"),
        ("render: unknown kernel", ["render", frame, "-o", out, "--kernel", "cubc"], "did you mean 'cubic'"),
        ("render: triad pitch too small", ["render", frame, "-o", out, "--triad-pitch", "0.5"], "triad_pitch"),
        ("render: old preset name", ["render", frame, "-o", out, "--preset", "aperture-fine-4k"],
         "renamed 'aperture-fine-within-4k'"),
        ("render: bad depth", ["render", frame, "-o", out, "--depth", "10"], "depth"),
        ("render: bad dither", ["render", frame, "-o", out, "--dither", "random"], "dither"),
        ("render: output over its input", ["render", frame, "-o", frame], "overwrite the input"),
        ("render: output folder is a file", ["render", str(root / "images"), "-o", str(root / "a-file")], "folder"),
        ("render: output below a file", ["render", frame, "-o", str(root / "a-file" / "o.png")], "not a folder"),
        ("render: a frame that is not there", ["render", frame, "-o", out, "--frame", "5"], "frame"),
        ("render: a picture over the pixel limit", ["render", frame, "-o", out, "--max-pixels", "100"], "pixels"),
        ("render: folder without images", ["render", str(root / "empty"), "-o", str(root / "written")], "no images"),
        # compare
        ("compare: missing picture", ["compare", str(root / "nope.png"), "--presets", QUICK, "-o", out], "nope.png"),
        ("compare: no presets", ["compare", frame, "--presets", ",", "-o", out], "one to twelve"),
        ("compare: unknown preset", ["compare", frame, "--presets", "slot-medum-within-4k", "-o", out], "did you mean"),
        ("compare: bad crop", ["compare", frame, "--presets", QUICK, "--crop", "1,2", "-o", out], "crop"),
        ("compare: sheet over its input", ["compare", frame, "--presets", QUICK, "-o", frame, "--force"],
         "overwrite the input"),
        # mask and curves
        ("mask: unknown preset", ["mask", "dots-fin-within-4k", "-o", out], "did you mean"),
        ("mask: output below a file", ["mask", QUICK, "-o", str(root / "a-file" / "m.png")], "not a folder"),
        ("curves: preset and mean", ["curves", QUICK, "--mean", "0.3", "-o", out], "not both"),
        ("curves: impossible mean", ["curves", "--mean", "1.5", "-o", out], "mean"),
        ("curves: output over the preset file", ["curves", str(root / "wrong.toml"), "-o", str(root / "wrong.toml"),
                                                 "--force"], "wrong.toml"),
        # report
        ("report: missing folder", ["report", QUICK, "--images", str(root / "nope"), "-o", str(root / "rep")],
         "no such file or folder"),
        ("report: folder without images", ["report", QUICK, "--images", str(root / "empty"), "-o",
                                           str(root / "rep")], "no images"),
        ("report: unknown preset", ["report", "slot-medum-within-4k", "--images", str(root / "images"), "-o",
                                    str(root / "rep")], "did you mean"),
        ("report: into a file", ["report", QUICK, "--images", str(root / "images"), "-o", str(root / "a-file")],
         "a-file"),
        # check
        ("check: unknown preset", ["check", "slot-medum-within-4k"], "did you mean"),
        ("check: missing images", ["check", QUICK, "--images", str(root / "nope")], "no such file or folder"),
        ("check: report below a file", ["check", QUICK, "--images", str(root / "images"), "--json",
                                        str(root / "a-file" / "c.json")], "not a folder"),
        ("check: maps over an image", ["check", QUICK, "--images", str(root / "images"), "--junit",
                                       str(root / "images" / "frame.png"), "--force"], "overwrite the input"),
        # inspect
        ("inspect: missing file", ["inspect", str(root / "nope.png")], "nope.png"),
        ("inspect: not a PNG", ["inspect", str(root / "plain.txt")], "plain.txt"),
        ("inspect: a PNG crtfilter did not write", ["inspect", frame], "frame.png"),
        ("inspect: a pipe", ["inspect", str(root / "fifo.png")], "fifo.png"),
        ("inspect: a pipe named as a JPEG", ["inspect", str(root / "fifo.jpg")], "fifo.jpg"),
        # presets
        ("presets show: unknown", ["presets", "show", "aperture-fin-within-4k"], "did you mean"),
        ("presets show: broken file", ["presets", "show", str(root / "bad.toml")], "bad.toml"),
        ("presets diff: unknown", ["presets", "diff", QUICK, "nope-4k"], "nope-4k"),
    ]


def pytest_generate_tests(metafunc):
    if "mistake" in metafunc.fixturenames:
        cases = _mistakes(Path("/ROOT"))
        metafunc.parametrize("mistake", range(len(cases)), ids=[c[0] for c in cases])


def test_every_mistake_gives_one_line_and_status_2_and_writes_nothing(place, mistake, monkeypatch):
    what, args, word = _mistakes(place)[mistake]
    monkeypatch.chdir(place)
    before = sorted(str(p) for p in place.rglob("*"))
    result = run(*args)  # in-process: an exception that escapes shows up here, not as a line
    assert result.exception is None or isinstance(result.exception, SystemExit), (what, repr(result.exception))
    lines = [ln for ln in result.stderr.splitlines() if ln.strip() and not ln.startswith("crtfilter: compiled")]
    assert result.exit_code == 2, (what, result.exit_code, result.stderr)
    assert len(lines) == 1, (what, result.stderr)
    assert lines[0].startswith("crtfilter: error: "), (what, lines)
    assert word.lower() in lines[0].lower(), (what, lines[0])
    assert sorted(str(p) for p in place.rglob("*")) == before, what


def test_a_mistake_in_the_installed_command_prints_no_traceback(place):
    # the same promise through a real process, for the one class a test runner could hide
    done = subprocess.run([sys.executable, "-m", "crtfilter", "render", str(place / "fifo.png"), "-o",
                           str(place / "written" / "o.png")], capture_output=True, text=True, timeout=60)
    assert done.returncode == 2 and "Traceback" not in done.stderr
    assert done.stderr.count("\n") == 1 and done.stderr.startswith("crtfilter: error: ")
