"""File jobs: which outputs to write, one file-to-file render with its report, batches.

The CLI and the Python API both go through here; nothing here parses
arguments or prints.
"""

from __future__ import annotations

import dataclasses
import json
import os
import signal
import threading
import time
import warnings
from collections.abc import Callable, Iterable
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import __version__
from .audit import light_figures, light_levels, measure_codes, measure_render, render_local_energy
from .errors import CrtfilterError, InputError, RenderWarning, SettingsError, suggest
from .files import (DEFAULT_COMPRESSION, DEFAULT_MAX_PIXELS, IMAGE_SUFFIXES, TEXT_KEY, encode_png, hdr_chunks,
                    read_image, read_png_codes, read_render_record, remove_stale_parts)
from .clips import DEFAULT_DELIVERY, VIDEO_SUFFIXES
from .engine import render_codes
from .plan import Render
from .presets import Preset, load_preset, settings_dict
from .writes import WritePlan

#: What is taken as an input: pictures (animated ones too) and video files.
INPUT_SUFFIXES = frozenset(IMAGE_SUFFIXES | VIDEO_SUFFIXES)


@dataclass
class Plan:
    """Inputs paired with their outputs, what was passed over, and every path to be written.

    ``earlier`` lists the files found in the input folders that an earlier
    crtfilter run wrote (they are not inputs again); ``existing`` the outputs
    left alone because they exist (``skip_existing``); ``format`` the output
    format; ``writes`` holds every
    file found in the inputs and every planned output
    (:class:`crtfilter.writes.WritePlan`): energy maps and reports are added
    to it too, before any work.
    """

    pairs: list[tuple[Path, Path]]
    skipped: list[Path] = field(default_factory=list)
    earlier: list[Path] = field(default_factory=list)
    writes: WritePlan = field(default_factory=WritePlan)
    existing: list[Path] = field(default_factory=list)
    format: str = "png"


def _same_file(a: Path, b: Path) -> bool:
    try:
        return a.resolve() == b.resolve() or (b.exists() and os.path.samefile(a, b))
    except OSError:
        return False


#: The fields a ``--name`` template may use.
NAME_FIELDS = ("stem", "preset", "width", "height", "format")


def output_name(template: str, *, stem: str, preset: str = "", width: int = 0, height: int = 0,
                fmt: str = "png") -> str:
    """A file name (without its ending) from a template such as ``"{stem}-{preset}"``.

    Raises
    ------
    SettingsError
        For an unknown field, a broken template, or a name that is empty or
        holds a path separator.
    """
    from string import Formatter

    try:
        fields_used = [f for _text, f, _spec, _conv in Formatter().parse(template) if f is not None]
    except ValueError as exc:
        raise SettingsError(f"name template {template!r}: {exc}") from None
    for f in fields_used:
        if f not in NAME_FIELDS:
            raise SettingsError(f"name template {template!r}: unknown field {{{f}}}{suggest(f, NAME_FIELDS)}; "
                                f"allowed: {', '.join('{' + n + '}' for n in NAME_FIELDS)}")
    name = template.format(stem=stem, preset=preset, width=width, height=height, format=fmt)
    if not name or name in (".", "..") or "/" in name or "\\" in name or "\0" in name:
        raise SettingsError(f"name template {template!r} gives {name!r}, which is not a file name")
    return name


def _output_size(src: Path, preset: Preset | None) -> tuple[int, int]:
    """The output size a source gets with a preset, from the source's header (0, 0 if unknown)."""
    from .capture import source_size
    from .files import peek_image
    from .scale import plan_geometry

    head = peek_image(src) if preset is not None else None
    if head is None:
        return 0, 0
    try:
        g = plan_geometry(*source_size(head[0], head[1], preset.settings.capture),
                          preset.settings.picture_geometry)
    except CrtfilterError:
        return 0, 0
    return g.out_w, g.out_h


def plan_outputs(inputs: Iterable[str | os.PathLike], out: str | os.PathLike, *, force: bool = False,
                 skip_existing: bool = False, fmt: str | None = None, name: str | None = None,
                 preset: str | Preset | None = None, include_renders: bool = False,
                 options: dict | None = None) -> Plan:
    """Pair every input image with its output path, and check every output before any work.

    A single input file with an ``out`` whose ending is an output format's
    (``.png``, ``.jpg``, ``.webp``, ``.avif``) writes that file in that format;
    otherwise ``out`` is a folder, and each input folder's images land under it
    with the same sub-folders, named by ``name`` (a template of
    :data:`NAME_FIELDS`, default ``"{stem}"``) with the ending of ``fmt``
    (default PNG). Files in folders whose ending is not an image's are passed
    over (``skipped``), and so are files that carry crtfilter's record, renders
    of an earlier run (``earlier``), unless ``include_renders``; a file named
    on its own is always an input. Nothing is ever written over an input.

    Raises
    ------
    InputError
        For a missing input, an ``out`` that names one file for several
        inputs, an output that is an input (also through a symlink, a hard link
        or ``..``), two inputs that would write the same output, or outputs
        that exist when neither ``force`` nor ``skip_existing`` is given (with
        ``skip_existing`` they are listed in ``existing`` and not rendered).

    ``preset`` and ``options`` (as for :func:`render_file`) give the
    ``{preset}``, ``{width}`` and ``{height}`` of the names.
    """
    from . import formats

    inputs = [Path(p) for p in inputs]
    out = Path(out)
    if not inputs:
        raise InputError("no input given")
    if force and skip_existing:
        raise SettingsError("give --force or --skip-existing, not both")
    for p in inputs:
        if not os.path.lexists(p):
            raise InputError(f"{p}: no such file or folder")
        if not p.exists():
            raise InputError(f"{p}: a symlink to nothing")
    chosen = fmt and formats.check_format(fmt)
    ending = out.suffix.lower()
    out_format = formats.format_of(out)
    if out_format is None and ending in IMAGE_SUFFIXES and not out.is_dir():
        raise InputError(f"{out}: crtfilter writes {', '.join(formats.available())}, not {ending[1:]} "
                         f"(name a .png, .jpg, .webp or .avif file, or a folder)")
    single = len(inputs) == 1 and not inputs[0].is_dir() and out_format is not None and not out.is_dir()
    if out_format is not None and not single and not out.is_dir():
        many = "a folder" if any(p.is_dir() for p in inputs) else f"{len(inputs)} files"
        raise InputError(f"{out}: names one {out_format.upper()} file, but the input is {many}: "
                         f"name a folder for the outputs (-o {out.with_suffix('')}) "
                         f"and choose their format with --format {out_format}")
    if single:
        if chosen and chosen != out_format:
            raise InputError(f"{out}: its ending says {out_format}, --format says {chosen}")
        chosen = out_format
        if name is not None:
            raise SettingsError("--name is for outputs in a folder; -o already names the file")
    chosen = formats.check_format(chosen or "png")
    suffix = {**{k: v[0] for k, v in formats.FORMATS.items()}, **formats.CLIP_FORMATS}[chosen]
    given = fmt is not None
    template = name if name is not None else "{stem}"
    loaded = load_preset(preset).with_options(**(options or {})) if preset is not None else None
    preset_name = loaded.name if loaded is not None else ""
    uses_size = any(f in template for f in ("{width}", "{height}"))

    def target(folder: Path, src: Path) -> Path:
        w, h = _output_size(src, loaded) if uses_size else (0, 0)
        ending = suffix
        if not given and src.suffix.lower() in VIDEO_SUFFIXES:
            ending = ".mkv"  # a video becomes a video unless --format says otherwise
        return folder / (output_name(template, stem=src.stem, preset=preset_name, width=w, height=h,
                                     fmt=chosen) + ending)

    writes = WritePlan(force=force)
    pairs: list[tuple[Path, Path]] = []
    skipped: list[Path] = []
    earlier: list[Path] = []
    if single:
        writes.protect(inputs[0])
        pairs.append((inputs[0], out))
    else:
        if os.path.lexists(out) and not out.is_dir():
            raise InputError(f"{out}: output must be a folder for this input (or name a .png for one file)")
        for p in inputs:
            if p.is_dir() and _same_file(p, out):
                raise InputError(f"{out}: output would overwrite the input (the output folder is the input folder)")
            if p.is_dir():
                for f in sorted(q for q in p.rglob("*") if q.is_file()):
                    if f.suffix.lower() in INPUT_SUFFIXES and not include_renders and _is_our_render(f):
                        earlier.append(f)  # an earlier run's output: replaced with --force, never a source
                        continue
                    writes.protect(f)
                    if f.suffix.lower() in INPUT_SUFFIXES:
                        pairs.append((f, target(out / f.relative_to(p).parent, f)))
                    else:
                        skipped.append(f)
            else:
                writes.protect(p)
                pairs.append((p, target(out, p)))
    existing: list[Path] = []
    kept: list[tuple[Path, Path]] = []
    for src, dst in pairs:
        source = writes.input_of(dst)
        if source is not None:
            raise InputError(f"{dst}: output would overwrite the input {source}")
        if os.path.lexists(dst) and not force and not os.path.isdir(dst):
            existing.append(dst)  # refused below, or with skip_existing left as it is
            continue
        try:
            writes.add(dst, f"output of {src}")
        except InputError as exc:
            raise InputError(str(exc).replace(f"the output of {src} would", "output would")) from None
        kept.append((src, dst))
    if existing and not skip_existing:
        more = f"; {len(existing) - 1} more outputs exist" if len(existing) > 1 else ""
        raise InputError(f"{existing[0]}: exists (use --force to replace it, or --skip-existing){more}")
    return Plan(kept, skipped, earlier, writes, existing=existing if skip_existing else [], format=chosen)


def _is_our_render(path: Path) -> bool:
    """True for an image file (PNG, JPEG, WebP, AVIF) that records a crtfilter render."""
    from . import formats

    if formats.format_of(path) is None:
        return False
    try:
        return formats.read_record(path) is not None
    except (CrtfilterError, OSError, ValueError):
        return False


def inside(path: Path, folder: Path) -> bool:
    """True when ``path`` is ``folder`` or lies below it, after resolving both."""
    try:
        path.resolve().relative_to(folder.resolve())
        return True
    except ValueError:
        return False


def images_in(path: str | os.PathLike, leave_out: str | os.PathLike | None = None, *,
              clips: bool = False) -> list[Path]:
    """The images an ``--images`` option names: one image file, or every image below a
    folder (by ending, sorted), leaving out what lies below ``leave_out``; with ``clips``
    video files too.

    Raises
    ------
    SettingsError
        For a path that is not there, a file that is no image by its ending, or a
        folder without images.
    """
    kinds = INPUT_SUFFIXES if clips else IMAGE_SUFFIXES
    path = Path(path)
    if path.is_file():
        if path.suffix.lower() not in kinds:
            raise SettingsError(f"{path}: not an image{' or a clip' if clips else ''} by its ending "
                                f"({', '.join(sorted(kinds))})")
        return [path]
    if not path.is_dir():
        raise SettingsError(f"{path}: no such file or folder")
    found = sorted(p for p in path.rglob("*") if p.is_file() and p.suffix.lower() in kinds
                   and not (leave_out is not None and inside(p, Path(leave_out))))
    if not found:
        raise SettingsError(f"{path}: no images in this folder")
    return found


def render_record(render: Render, preset: Preset) -> dict:
    """What a rendered PNG records about itself: tool, preset, the options laid over the
    preset (by their names in :meth:`Preset.with_options`), every resolved setting."""
    g = render.geometry
    return {
        "tool": "crtfilter",
        "version": __version__,
        "preset": preset.name,
        "options": dict(preset.options),
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


#: A lossy encoding that moves the mean light by more than this share gets a warning.
LOSSY_LIGHT_WARNING = 0.01


def render_file(input_path: str | os.PathLike, output_path: str | os.PathLike, *,
                preset: str | Preset | None = None, force: bool = False,
                energy_map: str | os.PathLike | None = None, frame: int | None = None,
                max_pixels: int | None = DEFAULT_MAX_PIXELS, compression: int = DEFAULT_COMPRESSION,
                fmt: str | None = None, quality: int = 95, subsampling: str = "4:4:4",
                frames: str | None = None, start: str | None = None, end: str | None = None,
                delivery: str = DEFAULT_DELIVERY, frames_csv: str | os.PathLike | None = None,
                asked: dict | None = None, on_frame: Callable[[str, int, int], None] | None = None,
                record_input: str | None = None, **options) -> dict:
    """Render one image file to a PNG (or JPEG, WebP, AVIF) and return its report.

    A clip (an animated GIF, PNG or WebP, or a video) without ``frame`` is
    rendered as a clip (:func:`crtfilter.motion.render_clip`): to an APNG
    (``.png``), an animated WebP, or an MKV or MP4 video, ``frames`` (``"A:B"``)
    or ``start`` and ``end`` (times) choosing its frames, ``delivery`` how a
    video is encoded (:data:`crtfilter.clips.DELIVERIES`), ``frames_csv`` a
    file for every frame's figures; ``asked["asked"]`` set stops it between
    frames (a first Ctrl-C), ``on_frame(phase, done, total)`` follows it.

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
    fmt : str, optional
        ``png``, ``jpeg``, ``webp`` or ``avif``; by default the output's
        ending says. A lossy file's figures are measured on its decoded
        pixels, and its record is kept in XMP.
    quality, subsampling : int, str
        For lossy formats: quality 1 to 100, and JPEG's and AVIF's chroma
        subsampling (``4:4:4`` by default: 4:2:0 blurs the colour stripes of
        the mask, see README).
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
        ``notes``, ``warnings`` (what the render did that may not have been
        meant: shrinking, scanlines without room, a source of over 1000
        lines, rows drawn twice), ``seconds``.

    ``record_input`` is the input path the file's record names (by default
    the input's own, resolved): a cluster worker renders a copy of the
    client's file and names the client's.

    Raises
    ------
    CrtfilterError
        For bad input or settings; no output file is left behind.
    """
    started = time.perf_counter()
    src, dst = Path(input_path), Path(output_path)
    chosen = load_preset(preset).with_options(**options)
    writes = WritePlan(force=force)
    writes.protect(src)
    if writes.input_of(dst) is not None:
        raise InputError(f"{dst}: output would overwrite the input")
    writes.add(dst)
    if energy_map is not None:
        writes.add(energy_map, "energy map")
    from . import formats

    fmt = formats.check_format(fmt or formats.format_of(dst) or "png")
    s = chosen.settings
    from . import clips

    clip = clips.probe(src, max_pixels) if frame is None or clips.is_video_name(src) else None
    if clip is None and (fmt in formats.CLIP_FORMATS or any(v is not None for v in (frames, start, end))):
        raise SettingsError(f"{src}: a still picture: {fmt.upper()} output and --frames, --from and --to "
                            "are for clips" if fmt in formats.CLIP_FORMATS else
                            f"{src}: a still picture: --frames, --from and --to are for clips")
    if clip is not None and frame is None:
        from .motion import render_clip

        motion_fmt = {"png": "apng", "apng": "apng", "webp": "webp", "mkv": "mkv", "mp4": "mp4"}.get(fmt)
        if motion_fmt is None:
            raise SettingsError(f"{src}: a clip: write it as .png (APNG), .webp, .mkv or .mp4, "
                                "or take one frame with --frame N")
        if energy_map is not None:
            raise SettingsError(f"{src}: a clip: --energy-map is for stills (take one frame with --frame N)")
        if frames_csv is not None:
            writes.add(frames_csv, "frame table")
        first, stop = clips.select(clip, frames, start, end)
        report = render_clip(clip, dst, chosen, fmt=motion_fmt, writes=writes, first=first, stop=stop,
                             delivery=delivery, asked=asked, on_frame=on_frame,
                             frames_csv=None if frames_csv is None else Path(frames_csv))
        report["input"] = str(src)
        return report
    if frames_csv is not None:
        raise SettingsError(f"{src}: a still picture: --frames-csv is for clips")
    if fmt in formats.CLIP_FORMATS:
        raise SettingsError(f"{dst}: {fmt.upper()} is for clips; take the frame as a picture (.png)")
    formats.check_output(fmt, s.output_depth, s.output_range == "hdr", s.decode.keep_alpha)
    if clip is not None and clip.kind == "video":  # one frame of a video, as a picture
        try:
            image = next(iter(clips.read_frames(clip, frame, frame + 1)))
        except StopIteration:
            raise InputError(f"{src}: has no frame {frame} (about {clip.frames} at {clip.fps:g} per second)") from None
        image.notes.append(f"video: frame {frame} taken")
    else:
        image = read_image(src, frame=frame, max_pixels=max_pixels)
    render = render_codes(image.codes, s, alpha=image.alpha)
    enc = render.encoding
    notes: list[str] = []
    if fmt != "png":
        # the figures are claims about the file: measure what it decodes to
        rendered = render.codes
        before = measure_render(render).luminance
        data, _ = formats.encode_lossy(rendered, fmt, None, quality=quality, subsampling=subsampling)
        render = dataclasses.replace(render, codes=formats.decode_lossy(data), code_counts=None,
                                     output_tile_sums=None, output_channel_sums=None)
        moved = measure_render(render).luminance / before - 1 if before > 0 else 0.0
        if abs(moved) > LOSSY_LIGHT_WARNING:
            render.warnings = [*render.warnings, formats.light_moved_warning(fmt, quality, subsampling, moved)]
    record = {"input": record_input or str(src.resolve()), "frame": frame, "input_profile": image.profile,
              **render_record(render, chosen)}
    if fmt != "png":
        record["file"] = {"format": fmt, "quality": int(quality),
                          **({"subsampling": subsampling} if fmt in ("jpeg", "avif") else {})}
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
    text = json.dumps(record, separators=(",", ":"))
    if fmt == "png":
        data = encode_png(render.codes, {TEXT_KEY: text}, chunks=chunks, level=compression)
    else:
        data, notes = formats.add_record(data, fmt, text, quality=quality, codes=rendered, subsampling=subsampling)
        if not np.array_equal(formats.decode_lossy(data), render.codes):
            raise InputError(f"{dst}: the {fmt.upper()} encoder gave other pixels with the record added")
    writes.write(dst, data)
    check_written(dst, data)
    report = {**record, "input": str(src), "output": str(dst)}
    if energy_map is not None:
        from .pictures import energy_map_picture

        writes.write(energy_map, encode_png(energy_map_picture(local, render.geometry)))
        report["energy_map"] = str(energy_map)
    report["notes"] = image.notes + notes + ([] if render.geometry.out_w == render.geometry.pic_w
                                     and render.geometry.out_h == render.geometry.pic_h
                                     else ["output measured over the picture area, borders left out"])
    report["warnings"] = list(render.warnings)
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

    With ``keep_reports`` False, ``reports`` holds only each file's input and
    output (what a summary needs), so that a long batch's memory does not grow
    by a full report a file. ``interrupted`` is True when the batch was stopped (Ctrl-C, SIGTERM or
    SIGHUP) before its end, ``stopped_by`` says by which signal (the first
    one), and ``not_started`` counts the files it did not reach. ``retried``
    lists the files that were in progress when a worker process died and were
    rendered once more (a file whose worker died again is among the failures).
    """

    reports: list[dict] = field(default_factory=list)
    failures: list[tuple[Path, str]] = field(default_factory=list)
    skipped: list[Path] = field(default_factory=list)
    interrupted: bool = False
    not_started: int = 0
    stopped_by: int | None = None
    retried: list[Path] = field(default_factory=list)
    keep_reports: bool = True


def energy_map_paths(plan: Plan, out: str | os.PathLike, where: str | os.PathLike) -> dict[Path, Path]:
    """Where each input's energy map goes: ``where`` itself for a single file,
    else ``where/<output's path under out>-energy.png``; each is added to the
    plan's writes (so a map can be neither an input nor another output).

    Raises
    ------
    InputError
        As :meth:`crtfilter.writes.WritePlan.add`.
    """
    where = Path(where)
    if len(plan.pairs) == 1 and where.suffix.lower() == ".png":
        maps = {plan.pairs[0][0]: where}
    else:
        if os.path.lexists(where) and not where.is_dir():
            raise InputError(f"{where}: energy maps need a folder for this input (or name a .png for one file)")
        maps = {}
        for src, dst in plan.pairs:
            rel = dst.relative_to(out) if inside(dst, Path(out)) else Path(dst.name)
            maps[src] = where / rel.with_name(rel.stem + "-energy.png")
    for src, path in maps.items():
        plan.writes.add(path, f"energy map of {src}")
    return maps


def render_batch(plan: Plan, *, preset: str | Preset | None = None, force: bool = False,
                 on_done: Callable[[Path, dict | None, str | None], None] | None = None,
                 energy_maps: dict[Path, Path] | None = None, frame: int | None = None,
                 max_pixels: int | None = DEFAULT_MAX_PIXELS, compression: int = DEFAULT_COMPRESSION,
                 jobs: int = 1, prepared: bool = False, quality: int = 95, subsampling: str = "4:4:4",
                 clip_options: dict | None = None, on_frame: Callable[[str, int, int], None] | None = None,
                 cluster=None, shared_storage: bool = False, keep_reports: bool = True,
                 **options) -> BatchResult:
    """Render every pair of a plan, going on past bad files (in the plan's format).

    ``on_done(input, report, error)`` is called after each file;
    ``energy_maps`` maps inputs to energy map paths (see
    :func:`energy_map_paths`); ``frame``, ``max_pixels``, ``compression``
    and ``options`` as for :func:`render_file`, and ``clip_options`` its
    ``frames``, ``start``, ``end``, ``delivery`` and ``frames_csv``;
    ``on_frame`` follows a clip's frames when files are rendered one at a time. With ``jobs`` > 1 the files
    are rendered by that many worker processes (reports stay in input order;
    the files are byte for byte those of one job; the kernels they need are
    compiled first, unless ``prepared`` says :func:`prepare_kernels` has run). A first Ctrl-C lets the
    files in progress finish and starts no more; a second stops at once (a
    file in progress is not left half-written). Either way finished outputs
    stay, and the result says it was interrupted and how many files were not
    started. With ``cluster`` (a Dask client, see :func:`crtfilter.cluster.connect`)
    the files are rendered on its workers instead, which are sent each input's
    bytes and send the encoded file back, or, with ``shared_storage``, read and
    write the paths themselves; a first Ctrl-C there cancels what is not done.
    """
    chosen = load_preset(preset).with_options(**options)
    result = BatchResult(skipped=list(plan.skipped), keep_reports=keep_reports)
    names: dict[Path, set[str]] = {}
    for path in [dst for _, dst in plan.pairs] + list((energy_maps or {}).values()):
        names.setdefault(path.parent, set()).add(path.name)
    for folder, in_folder in names.items():
        remove_stale_parts(folder, in_folder)
    work = [(n, src, dst, (energy_maps or {}).get(src)) for n, (src, dst) in enumerate(plan.pairs)]
    task = {"preset": chosen, "force": force, "frame": frame, "max_pixels": max_pixels,
            "compression": compression, "fmt": plan.format, "quality": quality, "subsampling": subsampling,
            **(clip_options or {})}
    with _stop_between_files() as stop:
        if cluster is not None:  # a Dask client: see crtfilter.cluster
            from . import cluster as on_cluster

            on_cluster.warm(cluster, kernels_for([src for _n, src, _dst, _map in work], chosen))
            on_cluster.run_batch(cluster, work, task, on_done, result, stop, shared=shared_storage)
        elif jobs > 1 and len(work) > 1:
            if not prepared:
                _ready_kernels([src for _n, src, _dst, _map in work], chosen)
            _run_pool(work, task, on_done, result, stop, jobs)
        else:
            # one file at a time here: a clip stops between its frames at a first Ctrl-C
            with _threads(jobs):
                _run_pairs(work, {**task, "asked": stop, "on_frame": on_frame}, on_done, result, stop)
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
    from .fast import ready

    ready(*sorted(kernels_for(inputs, preset)))


def kernels_for(inputs, preset: Preset) -> set:
    """The fast-path kernels that rendering ``inputs`` with ``preset`` will run (each
    input's header says its size)."""
    from .capture import source_size
    from .fast import needed_kernels
    from .files import peek_image

    wanted: set = set()
    for shape in {peek_image(src) for src in inputs} - {None}:
        try:
            picture = source_size(shape[0], shape[1], preset.settings.capture)
            wanted.update(needed_kernels(preset.settings, *picture, *shape[2:]))
        except CrtfilterError:  # that file will fail with its own message
            continue
    return wanted


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
    except MemoryError:  # this file is too large for the memory left; the next may fit
        if not existed and dst.exists():
            try:
                dst.unlink()  # a failed file leaves no output (the energy map may be what failed)
            except OSError:
                pass
        return "failed", f"{src}: out of memory"
    except KeyboardInterrupt:  # stopped at once: the file in progress is dropped
        if not existed and dst.exists():
            dst.unlink()  # written whole but not yet checked: leave the folder as it was
        raise


def kept(result: BatchResult, outcome: tuple[str, object]) -> tuple[str, object]:
    """What a batch holds of a file's outcome until it is recorded in input order: with
    ``keep_reports`` False only the report's input and output, so that a long batch does
    not hold a full report a file while it runs."""
    kind, value = outcome
    if kind == "ok" and not result.keep_reports:
        return kind, {"input": value.get("input"), "output": value.get("output")}
    return outcome


def _record(result: BatchResult, on_done, src: Path, outcome: tuple[str, object]) -> None:
    kind, value = outcome
    if kind == "ok":
        result.reports.append(kept(result, outcome)[1])
        if on_done:
            on_done(src, value, None)
    else:
        result.failures.append((src, value))
        if on_done:
            on_done(src, None, value)


#: The signals that stop a batch: the first lets the files in progress finish and starts
#: no more, a second stops at once. Workers ignore them: the parent decides.
_STOP_SIGNALS = tuple(getattr(signal, name) for name in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, name))

_PR_SET_PDEATHSIG = 1  # <linux/prctl.h>


def _worker_start(parent: int | None = None) -> None:
    # The parent decides when to stop: a terminal's Ctrl-C or hang-up reaches the
    # whole process group, and a file must not be cut short here. A worker dies
    # with its parent and starts nothing for a parent that is gone. Each worker's
    # numba uses one thread, since the processes already share the cores.
    for signum in _STOP_SIGNALS:
        signal.signal(signum, signal.SIG_IGN)
    signal.set_wakeup_fd(-1)  # a forked worker's copy of the parent's (see _stop_between_files)
    if hasattr(signal, "pthread_sigmask"):  # blocked while the parent started this process
        signal.pthread_sigmask(signal.SIG_UNBLOCK, _STOP_SIGNALS)
    _die_with_parent(parent)
    os.environ["CRTFILTER_THREADS"] = "1"


def _die_with_parent(parent: int | None) -> None:
    """On Linux, have the kernel send this process SIGKILL when its parent ends; then make
    sure the parent is still ``parent`` (it may have ended before the request was made),
    and leave at once if not.

    The kernel watches the thread that started this process: the pool is started
    by the thread that runs the batch, which outlives it.
    """
    import sys

    if sys.platform.startswith("linux"):
        import ctypes

        try:
            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(ctypes.c_int(_PR_SET_PDEATHSIG), ctypes.c_ulong(signal.SIGKILL), ctypes.c_ulong(0),
                       ctypes.c_ulong(0), ctypes.c_ulong(0))
        except (OSError, AttributeError):  # no prctl to be found: the check below still holds
            pass
    if parent is not None and os.getppid() != parent:
        os._exit(1)


def _start_method() -> str:
    """fork where it is safe - the workers then start in milliseconds with everything
    imported and the kernels compiled - and spawn while another thread runs, which a
    fork would not carry over."""
    import multiprocessing

    if "fork" not in multiprocessing.get_all_start_methods() or threading.active_count() > 1:
        return "spawn"
    return "fork"


def _new_pool(jobs: int):
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    import numpy.ma  # noqa: F401  (numpy.unique imports it on first use: once here, not in every worker)

    return ProcessPoolExecutor(max_workers=jobs, mp_context=multiprocessing.get_context(_start_method()),
                               initializer=_worker_start, initargs=(os.getpid(),))


def _end_pool(pool) -> list[int]:
    """Stop a pool's workers at once - SIGKILL, since they ignore the polite signals -
    wait for them and for the pool's own threads. Returns the exit codes of the workers
    that had ended by themselves before."""
    from multiprocessing.connection import wait

    processes = list((getattr(pool, "_processes", None) or {}).values())
    # a process's sentinel is ready once it has ended, whichever thread reaps it
    gone = set(wait([p.sentinel for p in processes], timeout=0)) if processes else set()
    ended = [p for p in processes if p.sentinel in gone]
    for p in processes:
        if p not in ended:
            p.kill()
    for p in processes:
        p.join(timeout=10)
    pool.shutdown(wait=True)
    return [p.exitcode for p in ended if p.exitcode is not None]


def _how_ended(exit_codes: list[int]) -> str:
    said = []
    for code in exit_codes:
        if code < 0:
            try:
                name = signal.Signals(-code).name
            except ValueError:
                name = f"signal {-code}"
            said.append(f"killed by {name}" + (", perhaps for want of memory" if -code == signal.SIGKILL else ""))
        else:
            said.append(f"exit status {code}")
    return "; ".join(said) or "how, is not known"


def _drop_unfinished(item, existed: tuple[bool, bool]) -> None:
    """Remove what a file whose worker was killed may have left: its output and energy map
    when they are new (written whole but never reported), and named temporary files."""
    for path, was_there in zip(item[2:], existed):
        if path is None:
            continue
        if not was_there and os.path.lexists(path):
            try:
                path.unlink()
            except OSError:
                pass
        remove_stale_parts(path.parent, [path.name])


def _outcome(future, src: Path) -> tuple[str, object]:
    try:
        return future.result()
    except MemoryError:  # in a worker, outside the render (taking the file or sending back)
        return "failed", f"{src}: out of memory"


@contextmanager
def _signals_held():
    """Hold the stop signals back in this thread meanwhile (a pool's ``submit`` starts
    workers): a worker started here (forked, or forked and run anew) inherits the mask,
    and ignores them before it lets them through (:func:`_worker_start`), so none can
    reach it before. Held signals are handled on the way out."""
    if not hasattr(signal, "pthread_sigmask"):
        yield
        return
    held = signal.pthread_sigmask(signal.SIG_BLOCK, _STOP_SIGNALS)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, held)


def _run_pool(work, task, on_done, result: BatchResult, stop, jobs: int) -> None:
    """Render ``work`` with ``jobs`` worker processes.

    At most ``jobs`` files are sent at a time, so a file sent is a file in
    progress, and after a first stop signal none starts. When a worker process
    dies (the kernel's out-of-memory killer, an exit), the pool is broken: its
    other workers are stopped, and every file that was in flight is tried once
    more, one at a time in a pool of one worker; one whose worker dies again
    fails, saying how it ended. The batch goes on with a new pool. A second stop
    signal kills the workers at once, keeping what had come back, and removes
    what the killed files may have left.
    """
    from concurrent.futures import FIRST_COMPLETED, wait
    from concurrent.futures.process import BrokenProcessPool

    queue, again, second_try = list(work), [], set()
    running: dict = {}  # future -> (item, whether its output and energy map existed when sent)
    done_in_order: dict = {}
    pool, pool_size = None, 0

    def finish(item, outcome) -> None:
        done_in_order[item[0]] = (item[1], kept(result, outcome))
        _record_progress(on_done, item[1], outcome)

    try:
        while running or (not stop["asked"] and (queue or again)):
            # second tries run one at a time in a pool of one, so that a worker that
            # dies names its file; then the batch goes on with a full pool
            size = 1 if again or any(item[0] in second_try for item, _ in running.values()) else jobs
            if pool is not None and pool_size != size and not running:
                pool.shutdown(wait=True)
                pool = None
            if pool is None:
                pool, pool_size = _new_pool(size), size
            broken = False
            while not stop["asked"] and len(running) < jobs and (queue or again):
                if (again and running) or any(item[0] in second_try for item, _ in running.values()):
                    break  # a second try runs alone
                pending = again if again else queue
                item = pending.pop(0)
                existed = tuple(p is not None and os.path.lexists(p) for p in item[2:])
                try:
                    with _signals_held():
                        future = pool.submit(_render_one, *item[1:], task)
                        running[future] = (item, existed)
                        if pending is again:
                            second_try.add(item[0])
                except BrokenProcessPool:
                    pending.insert(0, item)
                    broken = True
                    break
            if not broken:
                if not running:
                    break
                finished, _ = wait(running, return_when=FIRST_COMPLETED)
                broken = any(isinstance(f.exception(), BrokenProcessPool) for f in finished)
            if not broken:
                for future in finished:
                    item, _existed = running.pop(future)
                    finish(item, _outcome(future, item[1]))
                continue
            # a worker died: end this pool, keep what came back, and try again what was in flight
            how = _how_ended(_end_pool(pool))
            pool = None
            for future, (item, existed) in running.items():
                if future.done() and not isinstance(future.exception(), BrokenProcessPool):
                    finish(item, _outcome(future, item[1]))
                    continue
                _drop_unfinished(item, existed)
                if item[0] in second_try:
                    finish(item, ("failed", f"{item[1]}: its worker process died while rendering it, "
                                            f"twice ({how})"))
                else:
                    again.append(item)
            running = {}
        if pool is not None:
            pool.shutdown(wait=True)  # inside the try: a second signal may come meanwhile
            pool = None
    except KeyboardInterrupt:  # a second stop signal: stop the workers now
        if pool is not None:
            _end_pool(pool)
            pool = None
        for future, (item, existed) in running.items():
            if item[0] in done_in_order:
                continue
            if future.done() and future.exception() is None:
                finish(item, _outcome(future, item[1]))  # it came back before the stop: it counts
            else:
                _drop_unfinished(item, existed)
        result.interrupted = True
    except BaseException:
        if pool is not None:
            _end_pool(pool)
        raise
    finally:
        for n in sorted(done_in_order):
            src, outcome = done_in_order[n]
            _record(result, None, src, outcome)
        result.retried = [src for n, src, _dst, _map in work if n in second_try]
    if stop["asked"] or result.interrupted:
        result.interrupted = True
        result.not_started = len(work) - len(done_in_order)  # with those cut short by a second signal
        result.stopped_by = stop.get("signal") or signal.SIGINT


def _record_progress(on_done, src: Path, outcome: tuple[str, object]) -> None:
    if on_done:
        kind, value = outcome
        on_done(src, value if kind == "ok" else None, None if kind == "ok" else value)


@contextmanager
def _stop_between_files():
    """Turn a first stop signal (Ctrl-C, SIGTERM, SIGHUP) into a request to stop after
    the files in progress; a second of any of them stops at once (KeyboardInterrupt),
    and any after that are let pass while the batch ends.

    Yields a dict: ``"asked"`` is set by the first signal, ``"signal"`` says
    which it was. Outside the main thread signals cannot be caught, and Ctrl-C
    acts at once.

    Python runs a handler only between bytecodes, once for any number of
    deliveries of one signal, and pending signals in the order of their
    numbers; two signals that come during one long call (a PNG encode) would
    count as one, or in the wrong order. So the deliveries are also counted,
    in order, from the bytes the interpreter writes to its wakeup file for each
    (unless something else, an event loop, uses that file).
    """
    state = {"asked": False, "signal": None, "now": False}
    if threading.current_thread() is not threading.main_thread():
        yield state
        return
    reader, writer = os.pipe()
    os.set_blocking(reader, False)
    os.set_blocking(writer, False)
    try:
        before = signal.set_wakeup_fd(writer, warn_on_full_buffer=False)
    except (ValueError, OSError):  # where the wakeup file must be a socket
        before = None
    if before != -1:  # not ours to take, or not to be had: count by the handler's calls
        if before is not None:
            signal.set_wakeup_fd(before)
        os.close(reader)
        os.close(writer)
        reader = writer = None

    def arrived() -> list[int]:
        got = b""
        while reader is not None:
            try:
                chunk = os.read(reader, 256)
            except (BlockingIOError, InterruptedError):
                break
            if not chunk:
                break
            got += chunk
        return [n for n in got if n in _STOP_SIGNALS]

    def ask(signum, frame):
        for delivered in arrived() or [signum]:
            if state["now"]:
                return  # already stopping at once
            if state["asked"]:
                state["now"] = True
                raise KeyboardInterrupt
            state["asked"], state["signal"] = True, delivered

    previous = {signum: signal.signal(signum, ask) for signum in _STOP_SIGNALS}
    try:
        yield state
    finally:
        for signum, handler in previous.items():
            signal.signal(signum, signal.SIG_DFL if handler is None else handler)
        if writer is not None:
            signal.set_wakeup_fd(-1)
            os.close(reader)
            os.close(writer)


def _run_pairs(work, task, on_done, result: BatchResult, stop) -> None:
    for position, (_n, src, dst, map_path) in enumerate(work):
        if stop["asked"]:
            result.interrupted = True
            result.not_started = len(work) - position
            break
        try:
            outcome = _render_one(src, dst, map_path, task)
        except KeyboardInterrupt:
            result.interrupted = True
            result.not_started = len(work) - position
            break
        _record(result, on_done, src, outcome)
    else:
        result.interrupted = stop["asked"]  # asked during the last file: that one finished
    if result.interrupted:
        result.stopped_by = stop.get("signal") or signal.SIGINT


def render_array(pixels: np.ndarray, *, preset: str | Preset | None = None, **options) -> np.ndarray:
    """Render an 8-bit sRGB array to an 8-bit sRGB array; see :func:`crtfilter.render`."""
    arr = np.asarray(pixels)
    if arr.dtype != np.uint8 or arr.ndim != 3 or arr.shape[2] != 3:
        raise InputError(f"pixels must be a uint8 array of shape (H, W, 3) (got {arr.dtype} {arr.shape})")
    chosen = load_preset(preset).with_options(**{**options, "depth": 8})
    render = render_codes(np.ascontiguousarray(arr), chosen.settings, figures=False)
    for text in render.warnings:
        warnings.warn(text, RenderWarning, stacklevel=3)
    return render.codes


#: Difference within which a re-measured figure still holds: relative for the mean
#: luminances, absolute for the local errors (which are themselves relative); float
#: round-off across routes, machines and library versions; the decoded samples are exact.
HOLDS_WITHIN = 1e-6


def _record_problem(record: dict) -> str | None:
    """What is wrong with the shape of a crtfilter record, as the end of a sentence
    (``"has no geometry.output"``), or None: every key that inspect reads or prints,
    with its kind, and the picture box inside the output."""
    import math

    def number(v) -> bool:
        return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)

    def whole(low: int):
        return lambda v: isinstance(v, int) and not isinstance(v, bool) and v >= low

    def row(*tests):
        return lambda v: isinstance(v, list) and len(v) == len(tests) and all(t(x) for t, x in zip(tests, v))

    def figure(v) -> bool:
        return v is None or number(v)

    def text(v) -> bool:
        return isinstance(v, str)

    wanted = [
        ("version", text, "text"),
        ("preset", text, "text"),
        ("settings", lambda v: isinstance(v, dict) and all(isinstance(t, dict) for t in v.values()),
         "an object of tables"),
        ("geometry.output", row(whole(1), whole(1)), "two whole numbers of at least 1"),
        ("geometry.picture", row(whole(0), whole(0), whole(1), whole(1)),
         "four whole numbers (x and y at least 0, width and height at least 1)"),
        ("geometry.source", row(whole(1), whole(1)), "two whole numbers of at least 1"),
        ("mask_mean", row(number, number, number), "three numbers"),
        ("curves", row(text, text, text), "three lines of text"),
        ("luminance.output", figure, "a number or null"),
        ("luminance.input", figure, "a number or null"),
        ("luminance.ratio", figure, "a number or null"),
        ("local.window", row(whole(1), whole(1)), "two whole numbers of at least 1"),
        ("local.p50", figure, "a number or null"),
        ("local.p99", figure, "a number or null"),
        ("local.max", figure, "a number or null"),
    ]
    optional = [("input", text, "text"), ("frame", lambda v: v is None or whole(0)(v), "a whole number or null")]
    missing = object()
    for (key, test, want), required in [(w, True) for w in wanted] + [(w, False) for w in optional]:
        value = record
        for part in key.split("."):
            value = value.get(part, missing) if isinstance(value, dict) else missing
        if value is missing:
            if required:
                return f"has no {key}"
            continue
        if not test(value):
            shown = json.dumps(value)
            shown = shown if len(shown) <= 60 else shown[:57] + "..."
            return f"{key} must be {want} (got {shown})"
    out_w, out_h = record["geometry"]["output"]
    x, y, w, h = record["geometry"]["picture"]
    if x + w > out_w or y + h > out_h:
        return f"geometry.picture {w}x{h} at ({x}, {y}) does not fit in the {out_w}x{out_h} output"
    return None


def inspect_file(path: str | os.PathLike) -> dict:
    """Read what a rendered PNG records about itself and measure it again.

    The output's mean luminance is measured from the file's bytes; when the
    recorded input file still exists it is decoded and upscaled again as the
    record says, so the ratio and the local energy figures can be checked too.
    Both are read with the default pixel limit, the record's text chunks with
    their size limits (see :func:`crtfilter.files.read_png_text`).

    Returns
    -------
    dict
        ``file``, ``record`` (as stored), ``measured`` (``output``, and where
        the input exists ``input``, ``ratio``, ``local``), and ``checks``: a
        list of ``{"figure", "recorded", "measured", "holds"}``; ``holds`` is
        True when every check holds; ``curves_in_words``, the tone pairs
        (:meth:`crtfilter.tone.TonePair.in_words`) per channel.

    Raises
    ------
    InputError
        One line, when the file is missing or not a regular file, not a PNG,
        over the pixel limit, carries no crtfilter record or a malformed one
        (not JSON, not an object, a key missing or of the wrong kind, settings
        that are not valid), or when the recorded input cannot be read again.
    """
    from . import color
    from .audit import local_energy
    from .capture import cut
    from .files import PixelLimitError, read_render_record
    from .plan import plan_render, source_linear
    from .presets import settings_from_record
    from .scale import Geometry, upscale

    from . import formats

    path = Path(path)
    lossy = formats.format_of(path) not in (None, "png")
    record = formats.read_record(path) if lossy else read_render_record(path)
    if record is None:
        raise InputError(f"{path}: no crtfilter record in this file (not rendered by crtfilter?)")
    problem = _record_problem(record)
    if problem is not None:
        raise InputError(f"{path}: its crtfilter record {problem}")
    out_w, out_h = record["geometry"]["output"]
    pic_x, pic_y, pic_w, pic_h = record["geometry"]["picture"]
    src_w, src_h = record["geometry"]["source"]
    geometry = Geometry(src_w, src_h, out_w, out_h, pic_x, pic_y, pic_w, pic_h)
    try:
        settings = settings_from_record(record["settings"])
        enc = settings.encoding
    except CrtfilterError as exc:
        raise InputError(f"{path}: {exc}") from None
    except (ValueError, TypeError, ArithmeticError) as exc:
        raise InputError(f"{path}: recorded settings are not valid ({type(exc).__name__}: {exc})") from None
    try:
        codes = (formats.read_lossy_codes(path, DEFAULT_MAX_PIXELS) if lossy
                 else read_png_codes(path, max_pixels=DEFAULT_MAX_PIXELS))
    except PixelLimitError as exc:
        raise InputError(f"{exc.bare}: inspect reads no larger picture") from None
    if codes.shape[:2] != (out_h, out_w):
        raise InputError(f"{path}: is {codes.shape[1]}x{codes.shape[0]}, its record says {out_w}x{out_h}")
    output = measure_codes(codes, geometry, enc)
    measured: dict = {"output": output.luminance}
    checks = [("luminance.output", record["luminance"]["output"], output.luminance)]
    source = Path(record.get("input", ""))
    input_found = source.is_file()
    if input_found:
        try:
            image = read_image(source, frame=record.get("frame"), max_pixels=DEFAULT_MAX_PIXELS)
        except PixelLimitError as exc:
            raise InputError(f"{exc.bare} (the recorded input of {path}): inspect reads no larger picture") from None
        try:
            cell = plan_render(settings, src_w, src_h).cell
        except CrtfilterError as exc:
            raise InputError(f"{path}: its recorded settings and source size plan no render ({exc})") from None
        picture, alpha = cut(image.codes, image.alpha, settings.capture)
        lin, _ = source_linear(picture, settings, alpha)
        measured["input"] = float(color.channel_means(lin) @ enc.luma)
        measured["ratio"] = output.luminance / measured["input"] if measured["input"] > 0 else None
        checks.append(("luminance.input", record["luminance"]["input"], measured["input"]))
        checks.append(("luminance.ratio", record["luminance"]["ratio"], measured["ratio"]))
        up = upscale(lin, pic_w, pic_h, settings.kernel, cell=cell)
        picture = codes[pic_y:pic_y + pic_h, pic_x:pic_x + pic_w, :3]
        local = local_energy(color.luminance(up, enc.luma) * enc.gain,  # against the light aimed for
                             color.luminance(enc.decode(picture), enc.luma),
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
    try:
        words = [p.in_words() for p in plan_render(settings, src_w, src_h).pairs]
    except CrtfilterError:
        words = []
    return {"file": str(path), "record": record, "measured": measured, "checks": rows,
            "input_found": input_found, "holds": all(r["holds"] for r in rows), "curves_in_words": words}
