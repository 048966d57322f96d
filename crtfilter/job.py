"""File jobs: which outputs to write, one file-to-file render with its report, batches.

The CLI and the Python API both go through here; nothing here parses
arguments or prints.
"""

from __future__ import annotations

import json
import os
import signal
import threading
import time
from collections.abc import Callable, Iterable
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import __version__
from .audit import light_figures, light_levels, measure_codes, measure_render, render_local_energy
from .errors import CrtfilterError, InputError
from .files import (DEFAULT_COMPRESSION, DEFAULT_MAX_PIXELS, IMAGE_SUFFIXES, TEXT_KEY, encode_png, hdr_chunks,
                    read_image, read_png_codes, remove_stale_parts, write_atomic)
from .engine import render_codes
from .plan import Render
from .presets import Preset, load_preset, settings_dict


@dataclass
class Plan:
    """Inputs paired with their outputs, and what was passed over."""

    pairs: list[tuple[Path, Path]]
    skipped: list[Path] = field(default_factory=list)


def _same_file(a: Path, b: Path) -> bool:
    try:
        return a.resolve() == b.resolve() or (b.exists() and os.path.samefile(a, b))
    except OSError:
        return False


def plan_outputs(inputs: Iterable[str | os.PathLike], out: str | os.PathLike) -> Plan:
    """Pair every input image with its output path.

    A single input file with an ``out`` ending in ``.png`` writes that file;
    otherwise ``out`` is a folder, and each input folder's images land under it
    with the same sub-folders and a ``.png`` ending. Files in folders whose
    ending is not an image's are passed over (listed in ``skipped``).

    Raises
    ------
    InputError
        For a missing input, an output that is an input, or two inputs that
        would write the same output.
    """
    inputs = [Path(p) for p in inputs]
    out = Path(out)
    if not inputs:
        raise InputError("no input given")
    for p in inputs:
        if not p.exists():
            raise InputError(f"{p}: no such file or folder")
    single = len(inputs) == 1 and inputs[0].is_file() and out.suffix.lower() == ".png"
    pairs: list[tuple[Path, Path]] = []
    skipped: list[Path] = []
    if single:
        pairs.append((inputs[0], out))
    else:
        if out.exists() and not out.is_dir():
            raise InputError(f"{out}: output must be a folder for this input (or name a .png for one file)")
        for p in inputs:
            if p.is_dir() and _same_file(p, out):
                raise InputError(f"{out}: output would overwrite the input (the output folder is the input folder)")
            if p.is_dir():
                for f in sorted(q for q in p.rglob("*") if q.is_file()):
                    if f.suffix.lower() in IMAGE_SUFFIXES and not _inside(f, out):
                        pairs.append((f, out / f.relative_to(p).with_suffix(".png")))
                    elif not _inside(f, out):
                        skipped.append(f)
            else:
                pairs.append((p, out / (p.stem + ".png")))
    all_inputs = [i for i, _ in pairs]
    seen: dict[Path, Path] = {}
    for src, dst in pairs:
        for other in all_inputs:
            if _same_file(other, dst):
                raise InputError(f"{dst}: output would overwrite the input {other}")
        key = dst.resolve()
        if key in seen:
            raise InputError(f"{dst}: both {seen[key]} and {src} would be written here")
        seen[key] = src
    return Plan(pairs, skipped)


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.resolve().relative_to(folder.resolve())
        return True
    except ValueError:
        return False


def render_record(render: Render, preset: Preset) -> dict:
    """What a rendered PNG records about itself: tool, preset, every resolved setting."""
    g = render.geometry
    return {
        "tool": "crtfilter",
        "version": __version__,
        "preset": preset.name,
        "settings": settings_dict(preset.settings),
        "geometry": {"output": [g.out_w, g.out_h], "picture": [g.pic_x, g.pic_y, g.pic_w, g.pic_h],
                     "source": [g.src_w, g.src_h]},
        "mask_mean": [float(m) for m in render.mask.mean],
        "curves": [p.describe() for p in render.pairs],
        "balance": {
            "tiles": list(render.mask.cell) if preset.settings.tone.balance_tiles else None,
            "deviation_removed": render.balance_removed,
        },
        "gamut": {"primaries": preset.settings.decode.primaries, "white": preset.settings.decode.white,
                  "clipped": render.gamut_clipped},
    }


def render_file(input_path: str | os.PathLike, output_path: str | os.PathLike, *,
                preset: str | Preset | None = None, force: bool = False,
                energy_map: str | os.PathLike | None = None, frame: int | None = None,
                max_pixels: int | None = DEFAULT_MAX_PIXELS, compression: int = DEFAULT_COMPRESSION,
                **options) -> dict:
    """Render one image file to a PNG and return its report.

    Parameters
    ----------
    input_path, output_path : path-like
    preset : str or Preset, optional
        Shipped preset name, preset file path, or a loaded preset.
    force : bool
        Replace an existing output (never an input).
    energy_map : path-like, optional
        Also write a picture of the local energy error there (a PNG).
    frame : int, optional
        Frame of an animated input (the first by default).
    max_pixels : int or None
        Refuse inputs with more pixels (checked before decoding).
    compression : int
        PNG compression, 0 to 9 (see :func:`crtfilter.files.encode_png`).
    **options
        ``size`` (``"WxH"``: picture fitted inside, centred on black),
        ``scale`` (output rows per source line), ``pixel_aspect``,
        ``display_aspect``, ``transfer``, ``alpha``, ``depth``, ``dither``:
        each replaces what the preset says (:meth:`Preset.with_options`).

    Returns
    -------
    dict
        ``input``, ``output``, ``preset``, ``luminance`` (``input``,
        ``output``, ``ratio``, ``plain_multiply_ratio``), ``channels``,
        ``local`` (``window``, ``p50``, ``p99``, ``max``, ``measured``),
        ``geometry``, ``settings``, ``mask_mean``, ``curves``, ``balance``,
        ``notes``, ``seconds``.

    Raises
    ------
    CrtfilterError
        For bad input or settings; no output file is left behind.
    """
    started = time.perf_counter()
    src, dst = Path(input_path), Path(output_path)
    chosen = load_preset(preset).with_options(**options)
    if _same_file(src, dst):
        raise InputError(f"{dst}: output would overwrite the input")
    if dst.exists() and not force:
        raise InputError(f"{dst}: output exists (use --force to replace it)")
    image = read_image(src, frame=frame, max_pixels=max_pixels)
    render = render_codes(image.codes, chosen.settings, alpha=image.alpha)
    enc = render.encoding
    record = {"input": str(src.resolve()), "frame": frame, "input_profile": image.profile,
              **render_record(render, chosen)}
    record.update(light_figures(render.source_luminance, measure_render(render),
                                render.plain_multiply_luminance, render.source_channels, enc))
    local = render_local_energy(render)
    record["local"] = local.figures()
    chunks = []
    if enc.hdr:
        max_cll, max_fall = light_levels(render.codes, render.geometry, enc)
        record["hdr"] = {"peak": enc.peak, "reference_white": enc.reference_white,
                         "headroom": enc.headroom, "max_cll": max_cll, "max_fall": max_fall}
        chunks = hdr_chunks(max_cll, max_fall)
    data = encode_png(render.codes, {TEXT_KEY: json.dumps(record, separators=(",", ":"))}, chunks=chunks,
                      level=compression)
    dst.parent.mkdir(parents=True, exist_ok=True)
    write_atomic(dst, data)
    check_written(dst, data)
    report = {**record, "input": str(src), "output": str(dst)}
    if energy_map is not None:
        from .pictures import energy_map_picture

        write_atomic(energy_map, encode_png(energy_map_picture(local, render.geometry)))
        report["energy_map"] = str(energy_map)
    report["notes"] = image.notes + ([] if render.geometry.out_w == render.geometry.pic_w
                                     and render.geometry.out_h == render.geometry.pic_h
                                     else ["output measured over the picture area, borders left out"])
    report["seconds"] = round(time.perf_counter() - started, 3)
    return report


def check_written(path: Path, data: bytes) -> None:
    """Make sure ``path`` holds exactly ``data``.

    The figures are claims about the file, measured on the codes these bytes
    encode (PNG is lossless; ``inspect`` decodes a file and measures it again
    from scratch).
    """
    if path.read_bytes() != data:
        raise InputError(f"{path}: the written file does not read back as written")


@dataclass
class BatchResult:
    """What a batch did: one report per rendered file, the failures with their reasons.

    ``interrupted`` is True when the batch was stopped (Ctrl-C) before its end;
    ``not_started`` counts the files it did not reach.
    """

    reports: list[dict] = field(default_factory=list)
    failures: list[tuple[Path, str]] = field(default_factory=list)
    skipped: list[Path] = field(default_factory=list)
    interrupted: bool = False
    not_started: int = 0


def energy_map_paths(plan: Plan, out: str | os.PathLike, where: str | os.PathLike) -> dict[Path, Path]:
    """Where each input's energy map goes: ``where`` itself for a single file,
    else ``where/<output's path under out>-energy.png``."""
    where = Path(where)
    if len(plan.pairs) == 1 and where.suffix.lower() == ".png":
        return {plan.pairs[0][0]: where}
    maps = {}
    for src, dst in plan.pairs:
        rel = dst.relative_to(out) if _inside(dst, Path(out)) else Path(dst.name)
        maps[src] = where / rel.with_name(rel.stem + "-energy.png")
    return maps


def render_batch(plan: Plan, *, preset: str | Preset | None = None, force: bool = False,
                 on_done: Callable[[Path, dict | None, str | None], None] | None = None,
                 energy_maps: dict[Path, Path] | None = None, frame: int | None = None,
                 max_pixels: int | None = DEFAULT_MAX_PIXELS, compression: int = DEFAULT_COMPRESSION,
                 jobs: int = 1, prepared: bool = False, **options) -> BatchResult:
    """Render every pair of a plan, going on past bad files.

    ``on_done(input, report, error)`` is called after each file;
    ``energy_maps`` maps inputs to energy map paths (see
    :func:`energy_map_paths`); ``frame``, ``max_pixels``, ``compression``
    and ``options`` as for :func:`render_file`. With ``jobs`` > 1 the files
    are rendered by that many worker processes (reports stay in input order;
    the files are byte for byte those of one job; the kernels they need are
    compiled first, unless ``prepared`` says :func:`prepare_kernels` has run). A first Ctrl-C lets the
    files in progress finish and starts no more; a second stops at once (a
    file in progress is not left half-written). Either way finished outputs
    stay, and the result says it was interrupted and how many files were not
    started.
    """
    chosen = load_preset(preset).with_options(**options)
    result = BatchResult(skipped=list(plan.skipped))
    for folder in {dst.parent for _, dst in plan.pairs}:
        if folder.is_dir():
            remove_stale_parts(folder)
    work = [(n, src, dst, (energy_maps or {}).get(src)) for n, (src, dst) in enumerate(plan.pairs)]
    task = {"preset": chosen, "force": force, "frame": frame, "max_pixels": max_pixels,
            "compression": compression}
    with _stop_between_files() as stop:
        if jobs > 1 and len(work) > 1:
            if not prepared:
                _ready_kernels([src for _n, src, _dst, _map in work], chosen)
            _run_pool(work, task, on_done, result, stop, jobs)
        else:
            with _threads(jobs):
                _run_pairs(work, task, on_done, result, stop)
    return result


@contextmanager
def _threads(jobs: int):
    """With ``jobs`` = 1, render on one core: the fast path splits a picture over one thread."""
    from . import fast

    if jobs != 1:
        yield
        return
    fast.set_threads(1)
    try:
        yield
    finally:
        fast.set_threads(None)


def prepare_kernels(plan: Plan, *, preset: str | Preset | None = None, **options) -> None:
    """Compile or load, before the first file, every fast-path kernel the batch's inputs
    will run (each input's header says its size): the compile notice, if any, comes
    before the progress bar, and workers inherit the kernels and compile nothing."""
    _ready_kernels([src for src, _dst in plan.pairs], load_preset(preset).with_options(**options))


def _ready_kernels(inputs, preset: Preset) -> None:
    from .fast import needed_kernels, ready
    from .files import peek_image

    wanted: set = set()
    for shape in {peek_image(src) for src in inputs} - {None}:
        try:
            wanted.update(needed_kernels(preset.settings, *shape))
        except CrtfilterError:  # that file will fail with its own message
            continue
    ready(*sorted(wanted))


def _render_one(src: Path, dst: Path, map_path: Path | None, task: dict) -> tuple[str, object]:
    """One file of a batch: ("ok", report) or ("failed", reason). Runs in workers too."""
    existed = dst.exists()
    try:
        if map_path is not None:
            map_path.parent.mkdir(parents=True, exist_ok=True)
        return "ok", render_file(src, dst, energy_map=map_path, **task)
    except CrtfilterError as exc:
        return "failed", str(exc)
    except OSError as exc:  # the output side: a full disk, a read-only folder
        return "failed", f"{dst}: cannot write ({exc.strerror or exc})"
    except KeyboardInterrupt:  # stopped at once: the file in progress is dropped
        if not existed and dst.exists():
            dst.unlink()  # written whole but not yet checked: leave the folder as it was
        raise


def _record(result: BatchResult, on_done, src: Path, outcome: tuple[str, object]) -> None:
    kind, value = outcome
    if kind == "ok":
        result.reports.append(value)
        if on_done:
            on_done(src, value, None)
    else:
        result.failures.append((src, value))
        if on_done:
            on_done(src, None, value)


def _worker_start() -> None:
    # The parent decides about Ctrl-C; each worker's numba uses one thread,
    # since the processes already share the cores.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    os.environ["CRTFILTER_THREADS"] = "1"


def _start_method() -> str:
    """fork where it is safe - the workers then start in milliseconds with everything
    imported and the kernels compiled - and spawn while another thread runs, which a
    fork would not carry over."""
    import multiprocessing

    if "fork" not in multiprocessing.get_all_start_methods() or threading.active_count() > 1:
        return "spawn"
    return "fork"


def _run_pool(work, task, on_done, result: BatchResult, stop, jobs: int) -> None:
    import multiprocessing
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

    pool = ProcessPoolExecutor(max_workers=jobs, mp_context=multiprocessing.get_context(_start_method()),
                               initializer=_worker_start)
    queue, running, done_in_order = list(work), {}, {}
    try:
        while queue or running:
            while queue and not stop["asked"] and len(running) < 2 * jobs:
                n, src, dst, map_path = queue.pop(0)
                running[pool.submit(_render_one, src, dst, map_path, task)] = (n, src)
            if not running:
                break
            finished, _ = wait(running, return_when=FIRST_COMPLETED)
            for future in finished:
                n, src = running.pop(future)
                done_in_order[n] = (src, future.result())
                _record_progress(on_done, src, future.result())
    except KeyboardInterrupt:  # a second Ctrl-C: stop the workers now
        for process in list(getattr(pool, "_processes", {}).values()):
            process.terminate()
        pool.shutdown(wait=False, cancel_futures=True)
        result.interrupted = True
        result.not_started = len(queue) + len(running)
        queue = []
    else:
        pool.shutdown(wait=True)
    finally:
        for n in sorted(done_in_order):
            src, outcome = done_in_order[n]
            _record(result, None, src, outcome)
    if stop["asked"] and queue:
        result.interrupted = True
        result.not_started = len(queue)
    elif stop["asked"]:
        result.interrupted = True


def _record_progress(on_done, src: Path, outcome: tuple[str, object]) -> None:
    if on_done:
        kind, value = outcome
        on_done(src, value if kind == "ok" else None, None if kind == "ok" else value)


@contextmanager
def _stop_between_files():
    """Turn a first Ctrl-C into a request to stop after the current file; a second stops at once.

    Yields a dict whose ``"asked"`` is set by the first Ctrl-C. Outside the
    main thread signals cannot be caught, and Ctrl-C acts at once.
    """
    state = {"asked": False}
    if threading.current_thread() is not threading.main_thread():
        yield state
        return

    def ask(signum, frame):
        if state["asked"]:
            raise KeyboardInterrupt
        state["asked"] = True

    previous = signal.signal(signal.SIGINT, ask)
    try:
        yield state
    finally:
        signal.signal(signal.SIGINT, previous)


def _run_pairs(work, task, on_done, result: BatchResult, stop) -> None:
    for position, (_n, src, dst, map_path) in enumerate(work):
        if stop["asked"]:
            result.interrupted = True
            result.not_started = len(work) - position
            return
        try:
            outcome = _render_one(src, dst, map_path, task)
        except KeyboardInterrupt:
            result.interrupted = True
            result.not_started = len(work) - position
            return
        _record(result, on_done, src, outcome)


def render_array(pixels: np.ndarray, *, preset: str | Preset | None = None, **options) -> np.ndarray:
    """Render an 8-bit sRGB array to an 8-bit sRGB array; see :func:`crtfilter.render`."""
    arr = np.asarray(pixels)
    if arr.dtype != np.uint8 or arr.ndim != 3 or arr.shape[2] != 3:
        raise InputError(f"pixels must be a uint8 array of shape (H, W, 3) (got {arr.dtype} {arr.shape})")
    chosen = load_preset(preset).with_options(**{**options, "depth": 8})
    return render_codes(np.ascontiguousarray(arr), chosen.settings, figures=False).codes


#: Difference within which a re-measured figure still holds: relative for the mean
#: luminances, absolute for the local errors (which are themselves relative); float
#: round-off across routes, machines and library versions; the decoded samples are exact.
HOLDS_WITHIN = 1e-6


def inspect_file(path: str | os.PathLike) -> dict:
    """Read what a rendered PNG records about itself and measure it again.

    The output's mean luminance is measured from the file's bytes; when the
    recorded input file still exists it is decoded and upscaled again as the
    record says, so the ratio and the local energy figures can be checked too.

    Returns
    -------
    dict
        ``file``, ``record`` (as stored), ``measured`` (``output``, and where
        the input exists ``input``, ``ratio``, ``local``), and ``checks``: a
        list of ``{"figure", "recorded", "measured", "holds"}``; ``holds`` is
        True when every check holds.

    Raises
    ------
    InputError
        When the file is missing, not a PNG, or carries no crtfilter record.
    """
    from . import color
    from .audit import local_energy
    from .files import read_render_record
    from .plan import plan_render, source_linear
    from .presets import settings_from_record
    from .scale import Geometry, upscale

    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such file")
    try:
        record = read_render_record(path)
    except (OSError, ValueError) as exc:
        raise InputError(f"{path}: cannot read its record ({exc})") from None
    if record is None:
        raise InputError(f"{path}: no crtfilter record in this file (not rendered by crtfilter?)")
    out_w, out_h = record["geometry"]["output"]
    pic_x, pic_y, pic_w, pic_h = record["geometry"]["picture"]
    src_w, src_h = record["geometry"]["source"]
    geometry = Geometry(src_w, src_h, out_w, out_h, pic_x, pic_y, pic_w, pic_h)
    settings = settings_from_record(record["settings"])
    enc = settings.encoding
    codes = read_png_codes(path)
    if codes.shape[:2] != (out_h, out_w):
        raise InputError(f"{path}: is {codes.shape[1]}x{codes.shape[0]}, its record says {out_w}x{out_h}")
    output = measure_codes(codes, geometry, enc)
    measured: dict = {"output": output.luminance}
    checks = [("luminance.output", record["luminance"]["output"], output.luminance)]
    source = Path(record.get("input", ""))
    if source.is_file():
        image = read_image(source, frame=record.get("frame"), max_pixels=None)
        lin, _ = source_linear(image.codes, settings, image.alpha)
        measured["input"] = float(color.channel_means(lin) @ enc.luma)
        measured["ratio"] = output.luminance / measured["input"] if measured["input"] > 0 else None
        checks.append(("luminance.input", record["luminance"]["input"], measured["input"]))
        checks.append(("luminance.ratio", record["luminance"]["ratio"], measured["ratio"]))
        up = upscale(lin, pic_w, pic_h, settings.kernel, cell=plan_render(settings, src_w, src_h).cell)
        picture = codes[pic_y:pic_y + pic_h, pic_x:pic_x + pic_w, :3]
        local = local_energy(color.luminance(up, enc.luma), color.luminance(enc.decode(picture), enc.luma),
                             tuple(record["local"]["window"]))
        measured["local"] = local.figures()
        checks += [(f"local.{k}", record["local"][k], measured["local"][k]) for k in ("p50", "p99", "max")]

    def holds(figure: str, a, b) -> bool:
        if a is None or b is None:
            return a is b
        if figure.startswith("local."):
            # relative errors of cell sums: the render's own route may sum in
            # another order, so hold them to HOLDS_WITHIN absolutely
            return abs(a - b) <= HOLDS_WITHIN
        return abs(a - b) <= HOLDS_WITHIN * max(abs(a), abs(b), 1e-12)

    rows = [{"figure": f, "recorded": a, "measured": b, "holds": holds(f, a, b)} for f, a, b in checks]
    return {"file": str(path), "record": record, "measured": measured, "checks": rows,
            "input_found": source.is_file(), "holds": all(r["holds"] for r in rows)}
