"""Every path a command writes: planned before any work, never an input, whole or absent,
refused when it exists (unless --force) even against a racing run, and printed safely.

Each class of write is walked through every command that has it, not only one example.
"""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
import threading
from pathlib import Path

import pytest
from PIL import Image

from conftest import SCENE, run
from crtfilter.errors import InputError, printable
from crtfilter.files import write_atomic
from crtfilter.job import plan_outputs
from crtfilter.writes import WritePlan, unique_stems

QUICK = "scanlines-only-within-1080p"


def _hashes(root: Path) -> dict[str, str]:
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file() and not p.is_symlink()}


def _error_line(result) -> str:
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("crtfilter: error: ")
    return lines[0]


@pytest.fixture
def shots(tmp_path) -> Path:
    """A folder of two small frames and a sub-folder with one more."""
    folder = tmp_path / "shots"
    (folder / "sub").mkdir(parents=True)
    with Image.open(SCENE) as im:
        frame = im.convert("RGB")
        frame.crop((0, 0, 48, 32)).save(folder / "a.png")
        frame.crop((60, 60, 108, 92)).save(folder / "b.png")
        frame.crop((100, 100, 148, 132)).save(folder / "sub" / "c.png")
    return folder


# --------------------------------------------------------------------------
# Side outputs are checked like the main one, for every command that writes one


def _aliases(target: Path, tmp_path: Path, how: str) -> Path:
    """Another path to ``target``: itself, a symlink, a hard link, or a detour through ``..``."""
    if how == "same name":
        return target
    if how == "symlink":
        (tmp_path / "link.png").symlink_to(target)
        return tmp_path / "link.png"
    if how == "hard link":
        os.link(target, tmp_path / "hard.png")
        return tmp_path / "hard.png"
    return target.parent / "sub" / ".." / target.name


HOW = ["same name", "symlink", "hard link", "dot-dot"]


@pytest.mark.parametrize("how", HOW)
def test_a_report_never_replaces_an_input_of_the_batch(shots, tmp_path, how):
    path = _aliases(shots / "a.png", tmp_path, how)
    before = _hashes(shots)
    result = run("render", shots, "-o", tmp_path / "out", "--scale", "2", "--report", path, "--force")
    assert result.exit_code == 2
    assert "would overwrite the input" in _error_line(result)
    assert _hashes(shots) == before and not (tmp_path / "out").exists()


@pytest.mark.parametrize("how", HOW)
def test_an_energy_map_never_replaces_the_input(shots, tmp_path, how):
    path = _aliases(shots / "a.png", tmp_path, how)
    before = _hashes(shots)
    result = run("render", shots / "a.png", "-o", tmp_path / "out.png", "--scale", "2", "--energy-map", path,
                 "--force")
    assert result.exit_code == 2
    assert "would overwrite the input" in _error_line(result)
    assert _hashes(shots) == before and not (tmp_path / "out.png").exists()


def test_an_existing_device_or_pipe_is_never_written_over(shots, tmp_path):
    fifo = tmp_path / "pipe.png"
    os.mkfifo(fifo)
    for option in ("-o", "--report", "--energy-map"):
        args = ["-o", tmp_path / "o.png"] if option != "-o" else []
        result = run("render", shots / "a.png", *args, option, fifo, "--scale", "2", "--force")
        assert result.exit_code == 2 and "not a regular file" in _error_line(result)
    assert fifo.exists() and not fifo.is_file()
    result = run("mask", QUICK, "-o", "/dev/null", "--force")
    assert result.exit_code == 2 and "not a regular file" in _error_line(result)


def test_energy_map_on_the_render_itself_is_refused_before_any_work(shots, tmp_path):
    out = tmp_path / "out.png"
    result = run("render", shots / "a.png", "-o", out, "--scale", "2", "--energy-map", out)
    assert result.exit_code == 2
    assert "would be written here" in _error_line(result)
    assert not out.exists()


def test_report_on_the_render_is_refused(shots, tmp_path):
    out = tmp_path / "out.png"
    result = run("render", shots / "a.png", "-o", out, "--scale", "2", "--report", out)
    assert result.exit_code == 2 and "would be written here" in _error_line(result)
    assert not out.exists()


@pytest.mark.parametrize("command", ["compare", "mask", "curves"])
def test_picture_commands_refuse_an_existing_file_without_force(shots, tmp_path, command):
    out = tmp_path / "picture.png"
    out.write_bytes(b"someone's picture")
    args = {"compare": ["compare", shots / "a.png", "--presets", QUICK],
            "mask": ["mask", QUICK, "--zoom", "2"],
            "curves": ["curves", QUICK]}[command]
    result = run(*args, "-o", out)
    assert result.exit_code == 2 and "use --force" in _error_line(result)
    assert out.read_bytes() == b"someone's picture"
    forced = run(*args, "-o", out, "--force")
    assert forced.exit_code == 0, forced.stderr
    with Image.open(out) as im:
        im.load()  # a whole PNG now


def test_compare_never_replaces_its_own_input_even_with_force(shots):
    before = _hashes(shots)
    result = run("compare", shots / "a.png", "--presets", QUICK, "-o", shots / "a.png", "--force")
    assert result.exit_code == 2 and "would overwrite the input" in _error_line(result)
    assert _hashes(shots) == before


@pytest.mark.parametrize("command", ["compare", "mask", "curves"])
def test_picture_commands_replace_a_symlink_never_its_target(shots, tmp_path, command):
    keep = tmp_path / "keep.txt"
    keep.write_text("not a picture")
    link = tmp_path / "picture.png"
    link.symlink_to(keep)
    args = {"compare": ["compare", shots / "a.png", "--presets", QUICK],
            "mask": ["mask", QUICK, "--zoom", "2"],
            "curves": ["curves", QUICK]}[command]
    assert run(*args, "-o", link, "--force").exit_code == 0
    assert keep.read_text() == "not a picture"
    assert not link.is_symlink() and link.is_file()


@pytest.mark.parametrize("command", ["compare", "mask", "curves"])
def test_picture_commands_into_a_missing_or_read_only_folder_give_one_line(shots, tmp_path, command):
    args = {"compare": ["compare", shots / "a.png", "--presets", QUICK],
            "mask": ["mask", QUICK, "--zoom", "2"],
            "curves": ["curves", QUICK]}[command]
    blocked = tmp_path / "a-file"
    blocked.write_text("x")
    result = run(*args, "-o", blocked / "picture.png")      # a file where a folder should be
    assert result.exit_code == 2 and "not a folder" in _error_line(result)
    made = run(*args, "-o", tmp_path / "new" / "deeper" / "picture.png")  # missing folders are made
    assert made.exit_code == 0 and (tmp_path / "new" / "deeper" / "picture.png").is_file()
    if os.geteuid() != 0:  # root writes anywhere
        ro = tmp_path / "ro"
        ro.mkdir()
        ro.chmod(0o500)
        try:
            result = run(*args, "-o", ro / "picture.png")
            assert result.exit_code == 2 and "cannot write" in _error_line(result)
        finally:
            ro.chmod(0o700)


@pytest.mark.parametrize("command", ["render", "compare", "mask", "curves"])
def test_a_full_disk_gives_one_line_and_leaves_nothing(shots, tmp_path, command):
    # A file-size limit (RLIMIT_FSIZE) makes every write past it fail as a full disk would
    # (EFBIG rather than ENOSPC; common practice, no source): the command must say so in
    # one line and leave no file, named or hidden.
    import resource
    import signal

    out = tmp_path / "out"
    out.mkdir()
    args = {"render": ["render", str(shots / "a.png"), "--scale", "2"],
            "compare": ["compare", str(shots / "a.png"), "--presets", QUICK],
            "mask": ["mask", QUICK, "--zoom", "2"],
            "curves": ["curves", QUICK]}[command]

    def limit():
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (2000, 2000))

    # an empty kernel cache: the compiled code cannot be saved either, and the render goes on
    env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp_path / "kernel-cache"))
    done = subprocess.run([sys.executable, "-m", "crtfilter", *args, "-o", str(out / "x.png")],
                          capture_output=True, text=True, timeout=300, preexec_fn=limit, env=env)
    lines = [ln for ln in done.stderr.splitlines() if ln.strip() and not ln.startswith("crtfilter: compiled")]
    assert done.returncode == 2, done.stderr
    assert len(lines) == 1 and lines[0].startswith("crtfilter: error: ") and "cannot write" in lines[0], lines
    assert list(out.iterdir()) == []


# --------------------------------------------------------------------------
# Inputs inside the output folder


def test_inputs_inside_the_output_folder_are_inputs_and_never_replaced(shots):
    # an original lives in shots/sub; rendering shots into shots/sub must not replace it
    original = shots / "sub" / "a.png"
    (shots / "a.png").replace(original)
    (shots / "sub" / "c.png").replace(shots / "a.png")
    before = _hashes(shots)
    result = run("render", shots, "-o", shots / "sub", "--scale", "2", "--force")
    assert result.exit_code == 2 and "would overwrite the input" in _error_line(result)
    assert _hashes(shots) == before


def test_earlier_renders_inside_the_output_folder_are_not_inputs_again(shots):
    first = run("render", shots, "-o", shots / "crt", "--scale", "2")
    assert first.exit_code == 0, first.stderr
    rendered = sorted(p.relative_to(shots) for p in (shots / "crt").rglob("*.png"))
    again = run("render", shots, "-o", shots / "crt", "--scale", "2", "--force")
    assert again.exit_code == 0, again.stderr
    assert "3 rendered" in again.stdout
    assert sorted(p.relative_to(shots) for p in (shots / "crt").rglob("*.png")) == rendered


def test_an_original_inside_the_output_folder_is_rendered_and_kept(shots):
    (shots / "crt").mkdir()
    with Image.open(SCENE) as im:
        im.convert("RGB").crop((0, 0, 40, 30)).save(shots / "crt" / "kept.png")
    before = _hashes(shots / "crt")
    plan = plan_outputs([shots], shots / "crt")
    sources = {src for src, _dst in plan.pairs}
    assert shots / "crt" / "kept.png" in sources
    assert all(dst != shots / "crt" / "kept.png" for _src, dst in plan.pairs)
    assert _hashes(shots / "crt") == before


# --------------------------------------------------------------------------
# Refusing an existing file holds against a racing run


def test_publishing_without_force_never_replaces_a_file_that_appeared_meanwhile(tmp_path):
    target = tmp_path / "out.png"
    target.write_bytes(b"the other run's file")
    with pytest.raises(InputError, match="exists"):
        write_atomic(target, b"ours", replace=False)
    assert target.read_bytes() == b"the other run's file"
    assert [p.name for p in tmp_path.iterdir()] == ["out.png"]  # no temporary left


def test_many_writers_racing_for_one_name_leave_exactly_one_whole_file(tmp_path):
    target = tmp_path / "out.bin"
    outcomes: list[str] = []
    barrier = threading.Barrier(8)

    def writer(n: int) -> None:
        barrier.wait()
        try:
            write_atomic(target, bytes([n]) * 200_000, replace=False)
            outcomes.append("won")
        except InputError:
            outcomes.append("refused")

    threads = [threading.Thread(target=writer, args=(n,)) for n in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert outcomes.count("won") == 1 and outcomes.count("refused") == 7
    data = target.read_bytes()
    assert len(data) == 200_000 and len(set(data)) == 1
    assert [p.name for p in tmp_path.iterdir()] == ["out.bin"]


def test_two_commands_racing_into_one_folder_do_not_both_write(shots, tmp_path):
    out = tmp_path / "crt"
    cmd = [sys.executable, "-m", "crtfilter", "render", str(shots), "-o", str(out), "--scale", "4", "--jobs", "1",
           "--report"]
    procs = [subprocess.Popen(cmd + [str(tmp_path / f"r{n}.json")], stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, text=True) for n in range(2)]
    results = [p.communicate(timeout=120) + (p.returncode,) for p in procs]
    reports = [json.loads((tmp_path / f"r{n}.json").read_text()) for n in range(2)
               if (tmp_path / f"r{n}.json").exists()]
    written = [entry["output"] for rep in reports for entry in rep]
    # every output was written by exactly one run, and its report is that run's
    assert sorted(written) == sorted({str(p) for p in out.rglob("*.png")}), results
    assert len(written) == len(set(written)) == 3
    for rep in reports:
        for entry in rep:
            from crtfilter.files import read_render_record
            assert read_render_record(entry["output"])["input"] == str(Path(entry["input"]).resolve())


# --------------------------------------------------------------------------
# Names that would collide


def test_two_presets_of_one_name_get_their_own_report_folders(shots, tmp_path):
    for n, pitch in ((1, 3.0), (2, 4.0)):
        folder = tmp_path / f"looks{n}"
        folder.mkdir()
        (folder / "look.toml").write_text(f'extends = "{QUICK}"\n[mask]\nphosphor = "aperture"\ntriad_pitch = {pitch}\n')
    images = tmp_path / "imgs"
    images.mkdir()
    (shots / "a.png").replace(images / "a.png")
    out = tmp_path / "report"
    result = run("report", tmp_path / "looks1" / "look.toml", tmp_path / "looks2" / "look.toml",
                 "--images", images, "-o", out)
    assert result.exit_code == 0, result.stderr
    renders = sorted(p.parent.name for p in (out / "renders").rglob("*.png"))
    assert renders == ["look", "look-2"]
    a, b = (Image.open(out / "renders" / f / "a.png") for f in ("look", "look-2"))
    assert a.tobytes() != b.tobytes()  # two looks, two pictures


def test_report_refuses_a_folder_of_other_files_and_its_own_without_force(shots, tmp_path):
    images = tmp_path / "imgs"
    images.mkdir()
    (shots / "a.png").replace(images / "a.png")
    other = tmp_path / "busy"
    other.mkdir()
    (other / "notes.txt").write_text("mine")
    result = run("report", QUICK, "--images", images, "-o", other, "--force")
    assert result.exit_code == 2 and "not a crtfilter report" in _error_line(result)
    assert (other / "notes.txt").read_text() == "mine"
    out = images / "report"                      # a report inside the images folder
    assert run("report", QUICK, "--images", images, "-o", out).exit_code == 0
    again = run("report", QUICK, "--images", images, "-o", out)
    assert again.exit_code == 2 and "use --force" in _error_line(again)
    forced = run("report", QUICK, "--images", images, "-o", out, "--force")
    assert forced.exit_code == 0, forced.stderr
    assert "on 1 image" in forced.stdout       # its own pictures were not taken as images


def test_check_maps_of_same_stem_images_do_not_overwrite_each_other(shots, tmp_path):
    images = tmp_path / "imgs"
    (images / "x").mkdir(parents=True)
    (images / "y").mkdir()
    with Image.open(SCENE) as im:
        frame = im.convert("RGB")
        frame.crop((0, 0, 48, 32)).save(images / "a.png")
        frame.crop((60, 60, 108, 92)).save(images / "a.bmp")
        frame.crop((100, 100, 148, 132)).save(images / "x" / "a.png")
        frame.crop((10, 150, 58, 182)).save(images / "y" / "a.png")
    maps = images / "maps"                        # inside the images: must not be read back
    result = run("check", QUICK, "--images", images, "--maps", maps, "--min-ratio", "0.5")
    assert result.exit_code == 0, result.stdout + result.stderr
    drawn = sorted(maps.rglob("*.png"))
    assert len(drawn) == 4 and len({p.read_bytes() for p in drawn}) == 4
    again = run("check", QUICK, "--images", images, "--maps", maps, "--min-ratio", "0.5", "--force")
    assert again.exit_code == 0 and len(sorted(maps.rglob("*.png"))) == 4


def test_unique_stems_tell_apart_endings_and_folders(tmp_path):
    paths = [tmp_path / "a.png", tmp_path / "a.jpg", tmp_path / "x" / "a.png", tmp_path / "x-a.png"]
    stems = unique_stems(paths)
    assert len(set(stems)) == 4


# --------------------------------------------------------------------------
# The sweep of stale temporary files


def test_a_render_sweeps_only_its_own_folder_and_names(shots, tmp_path):
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    out = tmp_path / "out"
    (out / "deep").mkdir(parents=True)
    mine = out / f".a.png.crtfilter-{dead.pid}-0badc0de.part"
    foreign = out / f".someone.png.crtfilter-{dead.pid}-0badc0de.part"
    deep = out / "deep" / f".a.png.crtfilter-{dead.pid}-0badc0de.part"
    for p in (mine, foreign, deep):
        p.write_bytes(b"half")
    assert run("render", shots / "a.png", shots / "b.png", "-o", out, "--scale", "2").exit_code == 0
    assert not mine.exists()
    assert foreign.exists() and deep.exists()


# --------------------------------------------------------------------------
# The terminal


def test_control_characters_in_file_names_are_escaped_in_every_line(tmp_path):
    folder = tmp_path / "in"
    folder.mkdir()
    name = "evil\x1b[2J\x07\u202e.png"
    with Image.open(SCENE) as im:
        im.convert("RGB").crop((0, 0, 32, 24)).save(folder / name)
    (folder / "broken\x1b]0;x\x07.png").write_bytes(b"not a png")
    cmd = [sys.executable, "-m", "crtfilter", "render", str(folder), "-o", str(tmp_path / "out"), "--scale", "2"]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert done.returncode == 1
    for stream in (done.stdout, done.stderr):
        assert "\x1b" not in stream and "\x07" not in stream and "\u202e" not in stream
    assert "\\x1b[2J" in done.stdout and "\\u202e" in done.stdout
    assert "broken\\x1b]0;x\\x07.png" in done.stderr


def test_printable_keeps_ordinary_text_and_escapes_the_rest():
    assert printable("scène 1 → 2.png") == "scène 1 → 2.png"
    assert printable("a\nb\tc\x00d") == "a\\nb\\tc\\x00d"
    assert printable("x\udcff") == "x\\xff"  # an undecodable byte of a file name
