"""Batches on a Dask cluster (the ``cluster`` extra: ``pip install 'crtfilter[cluster]'``).

The client (this process) plans the batch as for ``--jobs``; each file becomes
one task. By default a task carries the input's bytes and the resolved
settings, the worker renders and measures in a folder of its own, and sends
back the encoded bytes and the report; the client writes every output with
the same atomic write and overwrite rules as a local batch, so no storage
need be shared. With ``shared=True`` workers read and write the paths
themselves (every machine must see the same storage under the same names).

Tasks are fed as workers free up (a few per worker thread in flight, never
the whole batch at once), so the client's memory does not grow with the
batch. A worker that dies has its task run again elsewhere by the scheduler;
the files whose render started more than once are counted as retried. The
outputs are byte for byte those of a local ``--jobs 1`` render: the record a
file keeps names the client's input path, not the worker's copy.
"""

from __future__ import annotations

import functools
import math
import os
import shutil
import tempfile
import time
import uuid
import warnings
from contextlib import contextmanager
from pathlib import Path

from . import __version__
from .errors import CrtfilterError, SettingsError

#: Tasks in flight per worker thread: enough to keep every worker busy while results
#: travel back, few enough that the client holds only a handful of files.
IN_FLIGHT_PER_THREAD = 2

#: The topic of the event a worker logs as it starts a file (how retries are counted).
STARTED = "crtfilter-started"

#: The topic of the event a worker logs once it has readied the batch's kernels.
WARMED = "crtfilter-warmed"


class ClusterError(CrtfilterError):
    """The cluster cannot be used: not reachable, no workers, or another crtfilter on them."""


def _distributed():
    try:
        import distributed
    except ImportError:
        raise ClusterError("--cluster needs the cluster extra: pip install 'crtfilter[cluster]'") from None
    return distributed


@contextmanager
def connect(address: str, *, timeout: float = 30.0):
    """A client of the scheduler at ``address`` (``tcp://host:8786``), or of a cluster of
    N worker processes on this machine (``local:N``, bound to 127.0.0.1), closed on the way
    out. Checks that every worker runs this version of crtfilter.

    Raises
    ------
    ClusterError
        When the scheduler cannot be reached, has no workers within ``timeout``
        seconds, or a worker runs another version.
    """
    distributed = _distributed()
    local = None
    if address.startswith("local:"):
        try:
            n = int(address.split(":", 1)[1])
        except ValueError:
            n = 0
        if not 1 <= n <= 256:
            raise SettingsError(f"--cluster {address}: local:N takes 1 to 256 worker processes")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            local = distributed.LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                             host="127.0.0.1", dashboard_address=None,
                                             silence_logs=50, env={"CRTFILTER_THREADS": "1"})
        target = local
    elif "://" in address or ":" in address:
        target = address
    else:
        raise SettingsError(f"--cluster {address}: give a scheduler's address (tcp://host:8786) or local:N")
    try:
        try:
            client = distributed.Client(target, timeout=min(timeout, 10.0))
        except (OSError, TimeoutError) as exc:
            raise ClusterError(f"--cluster {address}: cannot reach the scheduler ({exc})") from None
        try:
            try:
                client.wait_for_workers(1, timeout=timeout)
            except TimeoutError:
                raise ClusterError(f"--cluster {address}: the scheduler has no workers "
                                   f"(none joined within {timeout:g} s)") from None
            check_versions(client)
            yield client
        finally:
            client.close()
    finally:
        if local is not None:
            local.close()


def _version() -> str:
    import crtfilter

    return crtfilter.__version__


def check_versions(client) -> None:
    """Refuse workers that run another version of crtfilter (their files would differ)."""
    try:
        theirs = client.run(_version)
    except Exception as exc:  # a worker without crtfilter cannot even unpickle the call
        raise ClusterError(f"the cluster's workers cannot run crtfilter ({type(exc).__name__}: {exc}); "
                           f"install crtfilter {__version__} on every worker") from None
    other = {addr: v for addr, v in theirs.items() if v != __version__}
    if other:
        said = ", ".join(f"{addr} runs {v}" for addr, v in sorted(other.items()))
        raise ClusterError(f"workers run another crtfilter than this one ({__version__}): {said}; "
                           f"install crtfilter {__version__} on every worker")


class _Warm:
    """A worker plugin: compile or load the batch's kernels once as each worker starts
    (and as any worker joins later), not per task."""

    def __init__(self, kernels: tuple):
        self.kernels = kernels
        self.name = "crtfilter-kernels-" + "-".join(map(str, kernels))[:120]

    def setup(self, worker) -> None:
        from .fast import ready

        ready(*self.kernels)
        worker.log_event(WARMED, {"worker": worker.address, "kernels": len(self.kernels)})

    def teardown(self, worker) -> None:
        pass


def warm(client, kernels) -> None:
    """Have every worker, now and joining later, ready ``kernels`` (see :func:`crtfilter.fast.ready`)."""
    distributed = _distributed()

    class Warm(_Warm, distributed.WorkerPlugin):
        pass

    client.register_plugin(Warm(tuple(sorted(kernels))), name=None)


def _started(tag: str) -> None:
    try:
        from distributed import get_worker

        worker = get_worker()
        worker.log_event(STARTED, {"tag": tag, "worker": worker.address})
    except (ImportError, ValueError):
        pass


def _on_one_thread(fn, *args):
    from . import fast

    fast.set_threads(1)  # workers are one process per core: a file runs on one
    try:
        return fn(*args)
    finally:
        fast.set_threads(None)


def _scratch() -> Path:
    """A task's own folder, in memory where the machine offers it: the copy and the output are scratch."""
    shm = "/dev/shm" if os.path.isdir("/dev/shm") and os.access("/dev/shm", os.W_OK) else None
    return Path(tempfile.mkdtemp(prefix="crtfilter-task-", dir=shm))


def render_shared(tag: str, src: str, dst: str, map_path: str | None, task: dict):
    """A task where every machine sees the same storage: render in place."""
    from .job import _render_one

    _started(tag)
    return _on_one_thread(_render_one, Path(src), Path(dst), None if map_path is None else Path(map_path), task)


def render_bytes(tag: str, name: str, data: bytes, src: str, dst: str, map_path: str | None, task: dict):
    """A task that carries its input: render in a folder of the worker's own and send the
    encoded bytes back. Returns ``("ok", report, output bytes, map bytes or None, frame table
    bytes or None)`` or ``("failed", reason)``; paths in both are the client's."""
    from .job import _render_one

    _started(tag)
    folder = _scratch()
    try:
        here_src = folder / "in" / name
        here_src.parent.mkdir()
        here_src.write_bytes(data)
        here_dst = folder / "out" / Path(dst).name
        here_dst.parent.mkdir()
        here_map = None if map_path is None else folder / "map" / Path(map_path).name
        csv = task.get("frames_csv")
        here_csv = None if csv is None else folder / "csv" / Path(csv).name
        mine = {**task, "record_input": src, **({} if csv is None else {"frames_csv": here_csv})}
        if here_csv is not None:
            here_csv.parent.mkdir()
        outcome = _on_one_thread(_render_one, here_src, here_dst, here_map, mine)
        swap = [(str(here_src), src), (str(here_dst), dst)]
        if here_map is not None:
            swap.append((str(here_map), map_path))
        if here_csv is not None:
            swap.append((str(here_csv), str(csv)))
        outcome = _swap_paths(outcome, swap)
        if outcome[0] != "ok":
            return outcome
        return ("ok", outcome[1], here_dst.read_bytes(),
                None if here_map is None else here_map.read_bytes(),
                None if here_csv is None else here_csv.read_bytes())
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def render_part(tag: str, name: str, data: bytes | None, src: str, first: int, stop: int | None, task: dict):
    """A task rendering frames [first, stop) of a video clip as one part of its output
    (:func:`crtfilter.motion.render_segment`); ``data`` is the input's bytes, or None where
    the worker reads ``src`` itself. Returns ``("ok", part)`` or ``("failed", reason)``."""
    from . import clips
    from .errors import CrtfilterError as Failed
    from .motion import render_segment

    _started(tag)
    folder = _scratch()
    try:
        here = Path(src)
        if data is not None:
            here = folder / "in" / name
            here.parent.mkdir()
            here.write_bytes(data)
        try:
            clip = clips.probe(here, task.get("max_pixels"))
            if clip is None:
                raise Failed(f"{here}: not a clip")
            part = _on_one_thread(functools.partial(
                render_segment, clip, task["preset"], folder, fmt=task.get("fmt") or "mkv", first=first, stop=stop,
                delivery=task.get("delivery") or clips.DEFAULT_DELIVERY))
        except Failed as exc:
            return _swap_paths(("failed", str(exc)), [(str(here), src)])
        except MemoryError:
            return "failed", f"{src}: out of memory"
        return "ok", _swap_paths(part, [(str(here), src)])
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def split_plan(src: Path, dst: Path, task: dict, threads: int):
    """The frame ranges a clip is cut into for the workers, or None when it is rendered as
    one task: a video output (MKV, MP4) of a clip longer than one group of frames. Parts
    are whole groups (:func:`crtfilter.clips.keyframe_interval`), about two per worker
    thread; the last runs to the clip's end."""
    from . import clips, formats
    from .errors import CrtfilterError as Failed

    fmt = task.get("fmt") or formats.format_of(dst)
    if fmt not in ("mkv", "mp4") or task.get("frame") is not None:
        return None
    try:
        clip = clips.probe(src, task.get("max_pixels"))
        if clip is None:
            return None
        first, stop = clips.select(clip, task.get("frames"), task.get("start"), task.get("end"))
    except Failed:
        return None  # the task fails whole, with the render's own message
    group = clips.keyframe_interval(clip.rate)
    frames = (clip.frames if stop is None else stop) - first
    if frames <= group:
        return None
    length = group * max(1, math.ceil(frames / group / (2 * threads)))
    starts = list(range(first, first + frames, length))
    return clip, fmt, first, stop, [(a, b) for a, b in zip(starts, [*starts[1:], stop], strict=True)]


def _swap_paths(value, swap):
    """``value`` with the worker's paths in its strings replaced by the client's."""
    if isinstance(value, str):
        for mine, theirs in swap:
            value = value.replace(mine, theirs)
        return value
    if isinstance(value, dict):
        return {k: _swap_paths(v, swap) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return type(value)(_swap_paths(v, swap) for v in value)
    return value


def _write_back(item, outcome, force: bool):
    """Write what a carrying task sent back, as a local render writes: atomically, checked,
    never over an input; the outcome as :func:`crtfilter.job._render_one` gives it."""
    from .job import check_written
    from .writes import WritePlan

    if outcome[0] != "ok":
        return outcome
    _, report, data, map_data, csv_data = outcome
    _n, src, dst, map_path = item
    writes = WritePlan(force=force)
    writes.protect(src)
    try:
        writes.add(dst)
        if map_path is not None:
            writes.add(map_path, "energy map")
        csv = report.get("frames_csv")
        if csv_data is not None and csv:
            writes.add(csv, "frame table")
        writes.write(dst, data)
        check_written(dst, data)
        if map_data is not None:
            map_path.parent.mkdir(parents=True, exist_ok=True)
            writes.write(map_path, map_data)
        if csv_data is not None and csv:
            writes.write(csv, csv_data)
    except CrtfilterError as exc:
        return "failed", str(exc)
    except OSError as exc:
        return "failed", f"{dst}: cannot write ({exc.strerror or exc})"
    return "ok", report


def run_batch(client, work, task: dict, on_done, result, stop, *, shared: bool = False) -> None:
    """Render ``work`` (as :func:`crtfilter.job.render_batch` lists it) on the cluster.

    Results are recorded in input order; a first stop signal cancels every
    task not finished (finished outputs stay); a second one acts the same.
    """
    distributed = _distributed()
    from .job import _record, _record_progress, kept

    key = uuid.uuid4().hex[:12]
    threads = max(1, sum(client.nthreads().values()))
    queue = list(work)
    parts_folders: list[Path] = []
    pending_parts: list = []  # (clip's state, part number, first frame, stop, input bytes)
    running: dict = {}
    done_in_order: dict = {}

    def submit(item) -> None:
        n, src, dst, map_path = item
        plan = split_plan(src, dst, task, threads) if map_path is None else None
        if plan is not None:
            clip, fmt, first, stop, ranges = plan
            data = None
            if not shared:
                try:
                    data = src.read_bytes()
                except OSError as exc:
                    finish(item, ("failed", f"{src}: cannot be read ({exc.strerror or exc})"))
                    return
            parts_folders.append(folder := Path(tempfile.mkdtemp(prefix="crtfilter-parts-")))
            whole = {"item": item, "clip": clip, "fmt": fmt, "first": first, "stop": stop,
                     "parts": [None] * len(ranges), "left": len(ranges), "failed": None,
                     "folder": folder, "started": time.perf_counter()}
            for k, (a, b) in enumerate(ranges):
                pending_parts.append((whole, k, a, b, data))
            return
        if shared:
            future = client.submit(render_shared, f"{key}-{n}", str(src), str(dst), None if map_path is None else str(map_path),
                                   task, key=f"crtfilter-{key}-{n}", pure=False)
        else:
            try:
                data = src.read_bytes()
            except OSError as exc:
                finish(item, ("failed", f"{src}: cannot be read ({exc.strerror or exc})"))
                return
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # "large object in graph": the input travels with its task
                future = client.submit(render_bytes, f"{key}-{n}", src.name, data, str(src), str(dst),
                                       None if map_path is None else str(map_path), task,
                                       key=f"crtfilter-{key}-{n}", pure=False)
        running[future] = item

    def finish(item, outcome) -> None:
        done_in_order[item[0]] = (item[1], kept(result, outcome))
        _record_progress(on_done, item[1], outcome)

    def submit_part() -> None:
        whole, k, a, b, data = pending_parts.pop(0)
        n, src = whole["item"][0], whole["item"][1]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # "large object in graph": the input travels with its task
            future = client.submit(render_part, f"{key}-{n}.{k}", src.name, data, str(src), a, b, task,
                                   key=f"crtfilter-{key}-{n}.{k}", pure=False)
        running[future] = (whole, k)

    def part_done(whole, k, future) -> None:
        try:
            kind, value = future.result()
        except Exception as exc:
            kind, value = "failed", f"{whole['item'][1]}: a part failed on its worker ({type(exc).__name__}: {exc})"
        if kind != "ok":
            whole["failed"] = whole["failed"] or value
        else:
            if value["data"] is not None:
                path = whole["folder"] / f"part-{k:05d}.mkv"
                path.write_bytes(value["data"])
                value = {**value, "data": None, "path": path}
            whole["parts"][k] = value
        whole["left"] -= 1
        if whole["left"] == 0:
            finish(whole["item"], _join(whole, task))

    try:
        while running or ((queue or pending_parts) and not stop["asked"]):
            while (queue or pending_parts) and not stop["asked"] and len(running) < threads * IN_FLIGHT_PER_THREAD:
                if pending_parts:
                    submit_part()
                else:
                    submit(queue.pop(0))
            if not running:
                continue
            try:
                finished, _ = distributed.wait(list(running), timeout=0.25, return_when="FIRST_COMPLETED")
            except TimeoutError:
                finished = ()
            for future in finished:
                item = running.pop(future)
                if isinstance(item[0], dict):  # a part of a clip
                    part_done(*item, future)
                else:
                    finish(item, _outcome(future, item, task, shared))
            if stop["asked"]:
                break
    except KeyboardInterrupt:
        pass
    finally:
        if running:
            client.cancel(list(running))
        result.interrupted = bool(stop["asked"]) or bool(running) or bool(queue) or bool(pending_parts)
        for folder in parts_folders:
            shutil.rmtree(folder, ignore_errors=True)
        for n in sorted(done_in_order):
            src, outcome = done_in_order[n]
            _record(result, None, src, outcome)
        result.retried = _retried(client, key, work)
    if result.interrupted:
        import signal

        result.not_started = len(work) - len(done_in_order)
        result.stopped_by = stop.get("signal") or signal.SIGINT
    if shared:
        from .files import remove_stale_parts

        for folder in {item[2].parent for item in work}:
            remove_stale_parts(folder)


def _join(whole: dict, task: dict):
    """Join a clip's parts into its output on the client: ("ok", report) or ("failed", reason)."""
    from .motion import join_segments
    from .writes import WritePlan

    _n, src, dst, _map = whole["item"]
    if whole["failed"] is not None:
        return "failed", whole["failed"]
    writes = WritePlan(force=task.get("force", False))
    writes.protect(src)
    try:
        writes.add(dst)
        csv = task.get("frames_csv")
        if csv is not None:
            writes.add(csv, "frame table")
        report = join_segments(whole["clip"], dst, whole["parts"], fmt=whole["fmt"],
                               delivery=task.get("delivery") or "444", first=whole["first"], stop=whole["stop"],
                               writes=writes, frames_csv=None if csv is None else Path(csv),
                               started=whole["started"])
    except CrtfilterError as exc:
        return "failed", str(exc)
    except OSError as exc:
        return "failed", f"{dst}: cannot write ({exc.strerror or exc})"
    report["input"] = str(src)
    report["clip"]["parts"] = len([p for p in whole["parts"] if p is not None and p.get("path") is not None])
    return "ok", report


def _outcome(future, item, task: dict, shared: bool):
    n, src, dst, map_path = item
    try:
        outcome = future.result()
    except Exception as exc:
        name = type(exc).__name__
        if name == "KilledWorker":
            return "failed", f"{src}: every worker that took it died (the scheduler gave up on it)"
        if isinstance(exc, MemoryError):
            return "failed", f"{src}: out of memory"
        return "failed", f"{src}: failed on its worker ({name}: {exc})"
    if shared:
        return outcome
    return _write_back(item, outcome, task.get("force", False))


def _retried(client, key: str, work) -> list[Path]:
    """The files whose render started more than once (their first worker died)."""
    try:
        events = client.get_events(STARTED)
    except Exception:
        return []
    count: dict[str, int] = {}
    for _time, msg in events:
        if isinstance(msg, dict) and str(msg.get("tag", "")).startswith(key + "-"):
            count[msg["tag"]] = count.get(msg["tag"], 0) + 1
    again = {tag[len(key) + 1:].split(".")[0] for tag, times in count.items() if times > 1}  # a part counts
    return [src for n, src, _dst, _map in work if str(n) in again]
