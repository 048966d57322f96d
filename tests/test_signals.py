"""Batches stopped by signals, workers that die with their parent, and workers that run out
of memory or die: real `crtfilter render` processes, signalled and watched from outside.

Every batch runs in its own session, so that whatever it starts can be found in /proc and
killed in the end, whatever happened.
"""

from __future__ import annotations

import json
import os
import re
import resource
import shutil
import signal
import subprocess
import sys
import time
from contextlib import contextmanager
from pathlib import Path

import imagecodecs
import pytest
from PIL import Image

from conftest import SCENE

FILES = 40
OUT_W, OUT_H = 2880, 2160  # the default preset's output for a 320x240 frame
JOBS = 2
WAIT = 60.0   # seconds: only a hung process gets anywhere near this
SETTLE = 5.0  # seconds within which the processes of a stopped batch must be gone

pytestmark = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc, Linux only")


# --------------------------------------------------------------------------
# Processes, found in /proc

def _stat(pid: int) -> list[str] | None:
    """Fields of /proc/PID/stat after the command name: state, ppid, pgrp, session, ..."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    return text.rsplit(")", 1)[1].split()


def _processes(where) -> list[int]:
    """Live processes (a zombie is dead: it only waits to be reaped) whose stat fields
    satisfy ``where``."""
    found = []
    for name in os.listdir("/proc"):
        if name.isdigit() and int(name) != os.getpid():
            fields = _stat(int(name))
            if fields is not None and fields[0] not in "ZX" and where(fields):
                found.append(int(name))
    return found


def in_session(sid: int) -> list[int]:
    return _processes(lambda f: int(f[3]) == sid)


def children(pid: int) -> list[int]:
    return _processes(lambda f: int(f[1]) == pid)


def wait_until_gone(sid: int, within: float) -> list[int]:
    deadline = time.monotonic() + within
    while (left := in_session(sid)) and time.monotonic() < deadline:
        time.sleep(0.02)
    return left


@contextmanager
def batch(src: Path, out: Path, *extra, jobs: int = JOBS, limit: int | None = None):
    """A `crtfilter render` of a folder in a session of its own; the whole session is
    killed on the way out, whatever the test saw."""
    command = [sys.executable, "-m", "crtfilter", "render", str(src), "-o", str(out), "--jobs", str(jobs),
               "--report", str(out / "r.json"), "-q", *extra]

    def limited():
        resource.setrlimit(resource.RLIMIT_AS, (limit, limit))

    proc = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True, preexec_fn=limited if limit else None)
    try:
        yield proc
    finally:
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        if proc.poll() is None:
            proc.kill()
        proc.communicate()
        assert wait_until_gone(proc.pid, WAIT) == []


# --------------------------------------------------------------------------
# Inputs and outputs

@pytest.fixture(scope="module")
def frames(tmp_path_factory) -> Path:
    """FILES copies of the 320x240 scene: a batch of a few seconds on two cores."""
    folder = tmp_path_factory.mktemp("frames")
    for i in range(FILES):
        shutil.copyfile(SCENE, folder / f"frame{i:02d}.png")
    return folder


def wait_for_output(proc: subprocess.Popen, out: Path) -> None:
    deadline = time.monotonic() + WAIT
    while not (out.is_dir() and any(out.glob("*.png"))):
        assert proc.poll() is None, "the batch ended before writing anything"
        assert time.monotonic() < deadline, "no output appeared"
        time.sleep(0.002)


def pngs(out: Path) -> set[str]:
    return {p.name for p in out.glob("*.png")} if out.is_dir() else set()


def leftovers(out: Path) -> list[str]:
    """What a write may leave: hidden files and .part files."""
    return sorted(p.name for p in out.rglob("*") if p.name.startswith(".") or p.name.endswith(".part"))


def assert_complete(out: Path, w: int = OUT_W, h: int = OUT_H) -> set[str]:
    """Every PNG in ``out`` decodes whole, at the expected size; returns their names."""
    names = pngs(out)
    for name in names:
        data = (out / name).read_bytes()
        # reference library: imagecodecs (libpng) decodes every row, checking the chunks' CRCs
        assert imagecodecs.png_decode(data).shape == (h, w, 3), name
        # reference library: Pillow, a second, independent decoder
        with Image.open(out / name) as im:
            im.load()
            assert im.size == (w, h), name
    return names


def report_outputs(out: Path) -> set[str]:
    return {Path(entry["output"]).name for entry in json.loads((out / "r.json").read_text())}


SUMMARY = re.compile(r"(interrupted|stopped by SIG[A-Z]+): (\d+) rendered, (\d+) failed, (\d+) not started")


def summary(stdout: str) -> tuple[str, int, int, int]:
    lines = [m for m in map(SUMMARY.fullmatch, stdout.splitlines()) if m]
    assert len(lines) == 1, stdout
    how, *counts = lines[0].groups()
    return (how, *map(int, counts))


# --------------------------------------------------------------------------
# A first signal: the files in progress finish, no more start, summary and report

@pytest.mark.parametrize("signum, jobs", [(signal.SIGTERM, JOBS), (signal.SIGHUP, JOBS),
                                          (signal.SIGTERM, 1), (signal.SIGHUP, 1)],
                         ids=["SIGTERM-pool", "SIGHUP-pool", "SIGTERM-one-job", "SIGHUP-one-job"])
def test_a_stop_signal_lets_the_files_in_progress_finish_and_starts_no_more(frames, tmp_path, signum, jobs):
    out = tmp_path / "out"
    with batch(frames, out, jobs=jobs) as proc:
        wait_for_output(proc, out)
        written_before = len(pngs(out))
        os.kill(proc.pid, signum)  # the parent only, as a service manager or a closed terminal would
        stdout, stderr = proc.communicate(timeout=WAIT)
        assert proc.returncode == 128 + signum, stderr
        assert wait_until_gone(proc.pid, SETTLE) == [], "a process of the batch is still there"
    assert "Traceback" not in stderr
    how, rendered, failed, not_started = summary(stdout)
    assert how == f"stopped by {signal.Signals(signum).name}"
    assert failed == 0 and not_started >= 1
    assert rendered + not_started == FILES
    # what was in progress finished: at most one file per job, and one more that may
    # have finished between counting the outputs and the signal
    assert written_before <= rendered <= written_before + jobs + 1
    names = assert_complete(out)
    assert len(names) == rendered
    assert report_outputs(out) == names
    assert leftovers(out) == []


@pytest.mark.parametrize("jobs, second", [(JOBS, signal.SIGHUP), (1, signal.SIGHUP), (1, signal.SIGTERM)],
                         ids=["pool", "one-job", "one-job-same-signal"])
def test_a_second_signal_stops_at_once_and_leaves_no_uncounted_file(frames, tmp_path, jobs, second):
    out = tmp_path / "out"
    scale = 16  # 5120x3840 outputs at the slowest compression: about 1.5 s a file
    with batch(frames, out, "--scale", str(scale), "--compression", "9", jobs=jobs) as proc:
        wait_for_output(proc, out)
        time.sleep(0.1)  # the next files have started
        written_before = len(pngs(out))
        os.kill(proc.pid, signal.SIGTERM)
        # both signals come while one file is being encoded (in one process: during
        # one call, which Python sees as one, or, by their numbers, in the wrong order)
        time.sleep(0.05)
        os.kill(proc.pid, second)
        stopped = time.monotonic()
        stdout, stderr = proc.communicate(timeout=WAIT)
        took = time.monotonic() - stopped
        assert proc.returncode == 128 + signal.SIGTERM, stderr  # the first signal says why
        assert wait_until_gone(proc.pid, SETTLE) == []
    assert "Traceback" not in stderr
    how, rendered, failed, not_started = summary(stdout)
    assert how == "stopped by SIGTERM"
    assert failed == 0 and rendered + not_started == FILES
    names = assert_complete(out, 320 * scale, 240 * scale)
    assert len(names) == rendered  # a file cut short left nothing behind, not even whole
    assert report_outputs(out) == names
    assert leftovers(out) == []
    if jobs > 1:
        # the workers are killed: the batch does not wait for the files in progress
        assert written_before <= rendered <= written_before + jobs
        assert took < 1.0, f"the second signal took {took:.2f} s to stop the batch"
    else:
        # in one process the stop comes when the encoder call returns: the file it
        # encoded is never written
        assert rendered == written_before


def test_ctrl_c_still_says_interrupted_and_exits_130(frames, tmp_path):
    out = tmp_path / "out"
    with batch(frames, out) as proc:
        wait_for_output(proc, out)
        os.kill(proc.pid, signal.SIGINT)
        stdout, stderr = proc.communicate(timeout=WAIT)
        assert proc.returncode == 130, stderr
    how, rendered, _failed, not_started = summary(stdout)
    assert how == "interrupted" and not_started >= 1
    assert len(assert_complete(out)) == rendered


# --------------------------------------------------------------------------
# Workers die with their parent

def test_workers_die_with_a_killed_parent_and_write_nothing_after(frames, tmp_path):
    out = tmp_path / "out"
    with batch(frames, out) as proc:
        wait_for_output(proc, out)
        workers = children(proc.pid)
        assert len(workers) == JOBS, workers
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=WAIT)
        assert wait_until_gone(proc.pid, SETTLE) == [], "a worker outlived its parent"
        after = pngs(out)
        time.sleep(1.0)  # a file is written in a fraction of this
        assert pngs(out) == after
    assert 1 <= len(after) < FILES
    assert assert_complete(out) == after


# --------------------------------------------------------------------------
# A worker out of memory; a worker that dies

MEMORY_LIMIT = 3 << 29  # 1.5 GiB of address space: numba and LLVM load in it, and a 320x240
# frame at --scale 4 renders in it; a 4000x3000 frame at --scale 4 (a 16000x12000 output,
# 550 MiB of codes alone, float32 work arrays besides) does not
SMALL = 5


@pytest.fixture(scope="module")
def one_too_large(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("too-large")
    for i in range(SMALL):
        shutil.copyfile(SCENE, folder / f"small{i}.png")
    with Image.open(SCENE) as im:
        im.convert("RGB").resize((4000, 3000), Image.Resampling.NEAREST).save(folder / "large.png",
                                                                               compress_level=1)
    # compile (or load) the kernels these inputs need without the limit, so that the
    # limited run only loads them
    code = ("import sys; from crtfilter.job import plan_outputs, prepare_kernels; "
            "prepare_kernels(plan_outputs([sys.argv[1]], sys.argv[2]), scale=4)")
    subprocess.run([sys.executable, "-c", code, str(folder), str(folder.parent / "unused")], check=True,
                   timeout=600)
    return folder


@pytest.mark.parametrize("jobs", [JOBS, 1], ids=["pool", "one-job"])
def test_a_file_out_of_memory_fails_alone_and_the_batch_goes_on(one_too_large, tmp_path, jobs):
    out = tmp_path / "out"
    # --max-pixels just above the large input's 12 million: reading reserves no more than that needs
    with batch(one_too_large, out, "--scale", "4", "--max-pixels", "12500000", jobs=jobs,
               limit=MEMORY_LIMIT) as proc:
        stdout, stderr = proc.communicate(timeout=WAIT)
        assert proc.returncode == 1, stderr
    assert "Traceback" not in stderr
    assert f"{SMALL} rendered, 1 failed" in stdout.splitlines()
    failed = [line for line in stderr.splitlines() if line.startswith("  failed:")]
    assert failed == [f"  failed: {one_too_large / 'large.png'}: out of memory"]
    names = assert_complete(out, 1280, 960)
    assert names == {f"small{i}.png" for i in range(SMALL)}
    assert report_outputs(out) == names
    assert leftovers(out) == []


def _wait_for(what, within: float = WAIT):
    deadline = time.monotonic() + within
    while not (found := what()):
        assert time.monotonic() < deadline, "timed out"
        time.sleep(0.001)
    return found


def _lasting(find, for_seconds: float = 0.05) -> list[int]:
    """The processes ``find`` gives that are still alive ``for_seconds`` later."""
    found = find()
    if not found:
        return []
    time.sleep(for_seconds)
    return [pid for pid in find() if pid in found]


def test_the_files_of_a_worker_that_died_are_rendered_again(frames, tmp_path):
    out = tmp_path / "out"
    with batch(frames, out) as proc:
        wait_for_output(proc, out)
        workers = children(proc.pid)
        assert len(workers) == JOBS, workers
        os.kill(workers[0], signal.SIGKILL)  # as the kernel's out-of-memory killer would
        stdout, stderr = proc.communicate(timeout=WAIT)
        assert proc.returncode == 0, stderr
    assert f"{FILES} rendered, 0 failed" in stdout.splitlines()
    retried = re.findall(r"^  retried: (.+) \(a worker process died while it was in progress\)$", stderr, re.M)
    assert 1 <= len(retried) <= JOBS, stderr
    assert {Path(p).parent for p in retried} == {frames}
    names = assert_complete(out)
    assert len(names) == FILES and report_outputs(out) == names
    assert leftovers(out) == []


def test_a_file_whose_worker_dies_twice_fails_and_the_batch_goes_on(frames, tmp_path):
    out = tmp_path / "out"
    with batch(frames, out) as proc:
        wait_for_output(proc, out)
        first = children(proc.pid)
        os.kill(first[0], signal.SIGKILL)
        # the files in flight are tried again one at a time, each in a pool of one
        # worker: kill that worker too while it renders. It starts once the broken pool's
        # processes are all gone (a process the broken pool itself started in the
        # meantime dies with it, so a new one counts only once it has lived a while)
        _wait_for(lambda: not any(pid in children(proc.pid) for pid in first))
        second = _wait_for(lambda: _lasting(lambda: [p for p in children(proc.pid) if p not in first]))
        for pid in second:
            os.kill(pid, signal.SIGKILL)
        stdout, stderr = proc.communicate(timeout=WAIT)
        assert proc.returncode == 1, stderr
    assert f"{FILES - 1} rendered, 1 failed" in stdout.splitlines()
    failed = re.findall(r"^  failed: (.+): its worker process died while rendering it, twice "
                        r"\(killed by SIGKILL, perhaps for want of memory\)$", stderr, re.M)
    assert len(failed) == 1, stderr
    retried = re.findall(r"^  retried: (.+) \(a worker", stderr, re.M)
    assert failed[0] in retried
    names = assert_complete(out)
    assert len(names) == FILES - 1 and Path(failed[0]).name not in names
    assert report_outputs(out) == names
    assert leftovers(out) == []
