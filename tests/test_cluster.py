"""Batches on a real Dask cluster: a scheduler and worker processes on 127.0.0.1.

What is checked is what a render farm must hold: the files are byte for byte those of a
local ``--jobs 1`` render whatever the number of workers; a worker killed mid-batch has
its file rendered again elsewhere, nothing lost and nothing half-written; Ctrl-C cancels
what is not done and keeps what is; a file that fails on a worker is reported as a local
failure is; workers of another version are refused; kernels are readied once a worker.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

import pytest

from conftest import SAMPLES

distributed = pytest.importorskip("distributed")

CLI = [sys.executable, "-m", "crtfilter"]


def _start_cluster():
    """A scheduler and two worker processes on 127.0.0.1, and a client of them."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        local = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                         dashboard_address=None, silence_logs=50)
        return local, distributed.Client(local, set_as_default=False)


@pytest.fixture(scope="module")
def cluster():
    local, client = _start_cluster()
    try:
        yield local, client
    finally:
        client.close()
        local.close()


def _run(*args, timeout=600, **kw):
    return subprocess.run([*CLI, *map(str, args)], capture_output=True, text=True, timeout=timeout, **kw)


@pytest.fixture(scope="module")
def local_render(tmp_path_factory):
    """The samples rendered here, one job: what every cluster render must equal."""
    out = tmp_path_factory.mktemp("local") / "out"
    done = _run("render", SAMPLES, "-o", out, "--jobs", "1", "-q")
    assert done.returncode == 0, done.stderr
    return out


def _same_files(a: Path, b: Path) -> None:
    names = sorted(p.name for p in a.iterdir())
    assert names == sorted(p.name for p in b.iterdir())
    for name in names:
        assert (a / name).read_bytes() == (b / name).read_bytes(), name


def test_outputs_are_byte_identical_to_a_local_render(cluster, local_render, tmp_path):
    # the record each file keeps names the client's input, so the bytes cannot depend on
    # which worker (or which worker folder) rendered it; the animated sample is a clip
    local, _client = cluster
    out = tmp_path / "out"
    done = _run("render", SAMPLES, "-o", out, "--cluster", local.scheduler_address)
    assert done.returncode == 0, done.stderr
    assert "2 workers, 2 threads" in done.stderr
    _same_files(local_render, out)
    assert not list(tmp_path.rglob("*.part*"))


def test_one_worker_gives_the_same_bytes_as_two(local_render, tmp_path):
    out = tmp_path / "out"
    done = _run("render", SAMPLES, "-o", out, "--cluster", "local:1", "-q")
    assert done.returncode == 0, done.stderr
    _same_files(local_render, out)


def test_shared_storage_workers_write_the_same_bytes(cluster, local_render, tmp_path):
    local, _client = cluster
    out = tmp_path / "out"
    done = _run("render", SAMPLES, "-o", out, "--cluster", local.scheduler_address, "--shared-storage", "-q")
    assert done.returncode == 0, done.stderr
    _same_files(local_render, out)


def test_a_file_that_fails_on_a_worker_is_reported_with_the_clients_path(cluster, tmp_path):
    local, _client = cluster
    inputs = tmp_path / "in"
    inputs.mkdir()
    shutil.copy(SAMPLES / "scene-160x144.png", inputs / "good.png")
    (inputs / "broken.png").write_bytes(b"\x89PNG\r\n\x1a\n" + b"not really" * 20)
    out = tmp_path / "out"
    done = _run("render", inputs, "-o", out, "--cluster", local.scheduler_address)
    assert done.returncode == 1, done.stderr
    assert "1 rendered, 1 failed" in done.stdout
    failed = [line for line in done.stderr.splitlines() if "failed:" in line]
    assert len(failed) == 1 and str(inputs / "broken.png") in failed[0], done.stderr
    assert "crtfilter-task-" not in done.stderr  # the worker's own folder is not shown
    assert sorted(p.name for p in out.iterdir()) == ["good.png"]


def test_kernels_are_readied_once_per_worker_not_per_file(cluster, tmp_path):
    local, client = cluster
    before = len(client.get_events("crtfilter-warmed"))
    started = len(client.get_events("crtfilter-started"))
    inputs = tmp_path / "in"
    inputs.mkdir()
    for k in range(6):  # a compiled route (cubic), six files
        shutil.copy(SAMPLES / "scene-160x144.png", inputs / f"s{k}.png")
    done = _run("render", inputs, "-o", tmp_path / "out", "--cluster", local.scheduler_address,
                "--kernel", "cubic", "-q")
    assert done.returncode == 0, done.stderr
    assert len(client.get_events("crtfilter-started")) - started == 6
    assert len(client.get_events("crtfilter-warmed")) - before == len(client.nthreads())  # one per worker


def test_workers_of_another_version_are_refused(cluster, tmp_path):
    local, client = cluster

    def pretend(version):
        import crtfilter

        old, crtfilter.__version__ = crtfilter.__version__, version
        return old

    old = client.run(pretend, "0.0.0-other")
    try:
        done = _run("render", SAMPLES / "scene-160x144.png", "-o", tmp_path / "a.png",
                    "--cluster", local.scheduler_address)
    finally:
        for version in set(old.values()):
            client.run(pretend, version)
    assert done.returncode == 2
    assert "workers run another crtfilter" in done.stderr and "0.0.0-other" in done.stderr
    assert len(done.stderr.strip().splitlines()) == 1, done.stderr
    assert not (tmp_path / "a.png").exists()


def test_mistakes_get_one_line(tmp_path):
    for args, said in ((["--cluster", "nowhere"], "give a scheduler's address"),
                       (["--cluster", "local:0"], "local:N takes 1 to 256"),
                       (["--shared-storage"], "--shared-storage is for --cluster")):
        done = _run("render", SAMPLES / "scene-160x144.png", "-o", tmp_path / "a.png", *args)
        assert done.returncode == 2 and said in done.stderr, (args, done.stderr)
        assert len(done.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "a.png").exists()


def _many(tmp_path: Path, n: int) -> Path:
    inputs = tmp_path / "in"
    inputs.mkdir()
    for k in range(n):
        shutil.copy(SAMPLES / "scene-320x240.png", inputs / f"s{k:02d}.png")
    return inputs


def _wait_for(predicate, timeout=120.0):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(0.05)
    return False


def test_ctrl_c_cancels_what_is_left_and_keeps_what_is_done(cluster, tmp_path):
    local, _client = cluster
    inputs = _many(tmp_path, 16)
    out = tmp_path / "out"
    proc = subprocess.Popen([*CLI, "render", str(inputs), "-o", str(out), "--cluster", local.scheduler_address,
                             "--kernel", "cubic"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    assert _wait_for(lambda: out.exists() and len(list(out.glob("*.png"))) >= 2)
    proc.send_signal(signal.SIGINT)
    stdout, stderr = proc.communicate(timeout=120)
    assert proc.returncode == 130, stderr
    assert "interrupted:" in stdout
    written = sorted(out.glob("*.png"))
    assert 2 <= len(written) < 16
    reference = _run("render", inputs, "-o", tmp_path / "ref", "--kernel", "cubic", "-q")
    assert reference.returncode == 0
    for path in written:  # each kept output whole, and the one a local render gives
        assert path.read_bytes() == (tmp_path / "ref" / path.name).read_bytes(), path
    assert not [p for p in out.iterdir() if p.suffix != ".png"]


def test_a_worker_killed_mid_batch_has_its_file_rendered_again(tmp_path, local_render):
    local, client = _start_cluster()  # a cluster of its own: this test kills one of its workers
    try:
        inputs = _many(tmp_path, 8)
        out = tmp_path / "out"
        proc = subprocess.Popen([*CLI, "render", str(inputs), "-o", str(out), "--cluster",
                                 local.scheduler_address, "--kernel", "cubic"],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)

        from crtfilter.cluster import STARTED

        def started():  # the workers that have started a file of this batch (a task merely
            # assigned to a worker has not begun, and would not count as in progress)
            return [msg["worker"] for _time, msg in client.get_events(STARTED) if isinstance(msg, dict)]

        assert _wait_for(lambda: bool(started()))
        victim = started()[0]
        pid = client.run(os.getpid, workers=[victim])[victim]
        os.kill(pid, signal.SIGKILL)
        stdout, stderr = proc.communicate(timeout=300)
        assert proc.returncode == 0, stderr
        assert "8 rendered, 0 failed" in stdout
        assert "retried:" in stderr
        written = sorted(out.glob("*.png"))
        assert len(written) == 8 and not [p for p in out.iterdir() if p.suffix != ".png"]
        reference = _run("render", inputs, "-o", tmp_path / "ref", "--kernel", "cubic", "-q")
        assert reference.returncode == 0
        _same_files(tmp_path / "ref", out)
    finally:
        client.close()
        local.close()


def test_check_on_a_cluster_gives_the_figures_of_a_local_check(cluster, tmp_path):
    local, _client = cluster
    here = _run("check", "slot-coarse-within-1080p", "--json", tmp_path / "here.json", "--maps", tmp_path / "m1")
    there = _run("check", "slot-coarse-within-1080p", "--json", tmp_path / "there.json", "--maps", tmp_path / "m2",
                 "--cluster", local.scheduler_address)
    assert here.returncode == there.returncode == 0, there.stderr
    assert (tmp_path / "here.json").read_text().replace("m1", "m") == (tmp_path / "there.json").read_text().replace(
        "m2", "m")
    _same_files(tmp_path / "m1" / "slot-coarse-within-1080p", tmp_path / "m2" / "slot-coarse-within-1080p")


def _video(path: Path, seconds: float = 4.5, rate: int = 30) -> Path:
    from crtfilter import clips

    subprocess.run([clips.ffmpeg(), "-v", "error", "-y", "-f", "lavfi", "-i", f"testsrc2=size=160x120:rate={rate}",
                    "-f", "lavfi", "-i", "sine=frequency=440:sample_rate=48000", "-t", str(seconds),
                    "-c:v", "libx264rgb", "-qp", "0", "-c:a", "flac", str(path)], check=True)
    return path


def _decoded_sums(path: Path) -> list[str]:
    from crtfilter import clips

    done = subprocess.run([clips.ffmpeg(), "-v", "error", "-i", str(path), "-map", "0:v", "-f", "framemd5", "-"],
                          capture_output=True, text=True, check=True)
    return [line.rsplit(",", 1)[1].strip() for line in done.stdout.splitlines() if not line.startswith("#")]


@pytest.mark.parametrize("ending,extra", [(".mkv", []), (".mp4", ["--frames", "7:100"]),
                                          (".mkv", ["--delivery", "lossless", "--from", "1.2"])])
def test_a_video_cut_into_parts_decodes_to_the_frames_of_a_local_render(cluster, tmp_path, ending, extra):
    # parts are whole closed groups of frames at a constant quantiser, so the joined file
    # decodes to exactly the frames of one encode; its figures are those of a local render
    import json

    local, _client = cluster
    src = _video(tmp_path / "play.mkv")
    here, there = tmp_path / f"here{ending}", tmp_path / f"there{ending}"
    a = _run("render", src, "-o", here, "--size", "640x480", "--report", tmp_path / "a.json", *extra)
    b = _run("render", src, "-o", there, "--size", "640x480", "--report", tmp_path / "b.json", *extra,
             "--cluster", local.scheduler_address)
    assert a.returncode == 0 and b.returncode == 0, b.stderr
    ra, rb = (json.loads((tmp_path / n).read_text())[0] for n in ("a.json", "b.json"))
    assert rb["clip"]["parts"] >= 2
    assert _decoded_sums(here) == _decoded_sums(there)
    assert ra["frames"] == rb["frames"] and ra["luminance"] == rb["luminance"] and ra["flashes"] == rb["flashes"]
    assert ra["clip"]["audio"] == rb["clip"]["audio"] == "copied"
    from crtfilter import clips

    info = subprocess.run([clips.ffmpeg(), "-hide_banner", "-i", str(there)], capture_output=True, text=True).stderr
    assert "Audio: flac" in info and "crtfilter" in info  # the sound and the record are in the joined file
    assert not list(tmp_path.glob("*.part*"))
