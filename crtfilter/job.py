"""File jobs: which outputs to write, one file-to-file render with its report, batches.

The CLI and the Python API both go through here; nothing here parses
arguments or prints.
"""

from __future__ import annotations

import json
import os
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import __version__
from .audit import light_figures, measure_codes, measure_png
from .errors import CrtfilterError, InputError
from .files import IMAGE_SUFFIXES, TEXT_KEY, encode_png, read_image, write_atomic
from .pipeline import Render, balance_tile, render_codes
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
            "tiles": list(balance_tile(render.mask)) if preset.settings.tone.balance_tiles else None,
            "deviation_removed": render.balance_removed,
        },
    }


def render_file(input_path: str | os.PathLike, output_path: str | os.PathLike, *,
                preset: str | Preset | None = None, force: bool = False, **options) -> dict:
    """Render one image file to a PNG and return its report.

    Parameters
    ----------
    input_path, output_path : path-like
    preset : str or Preset, optional
        Shipped preset name, preset file path, or a loaded preset.
    force : bool
        Replace an existing output (never an input).
    **options
        ``size`` (``"WxH"``: picture fitted inside, centred on black),
        ``scale`` (output rows per source line), ``pixel_aspect``,
        ``display_aspect``, ``transfer``, ``depth``: each replaces what the
        preset says (:meth:`Preset.with_options`).

    Returns
    -------
    dict
        ``input``, ``output``, ``preset``, ``luminance`` (``input``,
        ``output``, ``ratio``, ``plain_multiply_ratio``), ``channels``,
        ``geometry``, ``mask_mean``, ``curves``, ``notes``, ``seconds``.

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
    image = read_image(src)
    render = render_codes(image.codes, chosen.settings, alpha=image.alpha)
    record = render_record(render, chosen)
    written = measure_codes(render.codes, render.geometry)
    record.update(light_figures(render.source_luminance, written, render.plain_multiply_luminance,
                                render.source_channels))
    data = encode_png(render.codes, {TEXT_KEY: json.dumps(record, separators=(",", ":"))})
    dst.parent.mkdir(parents=True, exist_ok=True)
    write_atomic(dst, data)
    # Measure again from the bytes on disk: that is the claim the report makes.
    on_disk = measure_png(dst, render.geometry)
    report = {"input": str(src), "output": str(dst), **record}
    report.update(light_figures(render.source_luminance, on_disk, render.plain_multiply_luminance,
                                render.source_channels))
    report["notes"] = image.notes + ([] if render.geometry.out_w == render.geometry.pic_w
                                     and render.geometry.out_h == render.geometry.pic_h
                                     else ["output measured over the picture area, borders left out"])
    report["seconds"] = round(time.perf_counter() - started, 3)
    return report


@dataclass
class BatchResult:
    """What a batch did: one report per rendered file, the failures with their reasons."""

    reports: list[dict] = field(default_factory=list)
    failures: list[tuple[Path, str]] = field(default_factory=list)
    skipped: list[Path] = field(default_factory=list)


def render_batch(plan: Plan, *, preset: str | Preset | None = None, force: bool = False,
                 on_done: Callable[[Path, dict | None, str | None], None] | None = None,
                 **options) -> BatchResult:
    """Render every pair of a plan, going on past bad files.

    ``on_done(input, report, error)`` is called after each file; ``options``
    as for :func:`render_file`.
    """
    chosen = load_preset(preset).with_options(**options)
    result = BatchResult(skipped=list(plan.skipped))
    for src, dst in plan.pairs:
        try:
            report = render_file(src, dst, preset=chosen, force=force)
        except CrtfilterError as exc:
            result.failures.append((src, str(exc)))
            if on_done:
                on_done(src, None, str(exc))
            continue
        result.reports.append(report)
        if on_done:
            on_done(src, report, None)
    return result


def render_array(pixels: np.ndarray, *, preset: str | Preset | None = None, **options) -> np.ndarray:
    """Render an 8-bit sRGB array to an 8-bit sRGB array; see :func:`crtfilter.render`."""
    arr = np.asarray(pixels)
    if arr.dtype != np.uint8 or arr.ndim != 3 or arr.shape[2] != 3:
        raise InputError(f"pixels must be a uint8 array of shape (H, W, 3) (got {arr.dtype} {arr.shape})")
    chosen = load_preset(preset).with_options(**{**options, "depth": 8})
    return render_codes(np.ascontiguousarray(arr), chosen.settings).codes
