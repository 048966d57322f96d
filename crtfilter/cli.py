"""The ``crtfilter`` command: parses, calls and prints. No computation lives here."""

from __future__ import annotations

import importlib
import json
import os
import sys
import threading
from contextlib import contextmanager
from pathlib import Path
from typing import Optional

import typer
import typer.core

from . import DEFAULT_PRESET, __version__, terms
from .errors import printable

_CLICK = importlib.import_module(typer.BadParameter.__module__)  # click's exceptions, as typer ships them


class _Command(typer.core.TyperCommand):
    """A command whose usage line and argument list show plain metavars (``IMAGE...``,
    ``[PRESET]...``), never type names."""

    def collect_usage_pieces(self, ctx) -> list[str]:
        pieces = [self.options_metavar] if self.options_metavar else []
        for param in self.get_params(ctx):
            if param.param_type_name == "argument":
                pieces.append(_argument_metavar(param))
        return pieces

    def format_options(self, ctx, formatter) -> None:
        args = [(_argument_metavar(p), (p.help or "") + ("  [required]" if p.required else ""))
                for p in self.get_params(ctx) if p.param_type_name == "argument"]
        opts = [rv for p in self.get_params(ctx) if p.param_type_name == "option"
                for rv in [p.get_help_record(ctx)] if rv is not None]
        if args:
            with formatter.section("Arguments"):
                formatter.write_dl(args)
        if opts:
            with formatter.section("Options"):
                formatter.write_dl(opts)


def _argument_metavar(param) -> str:
    """An argument as the usage line shows it: its metavar, or its name in capitals, in
    brackets when it may be left out, with "..." when it takes several."""
    name = param.metavar or param.name.upper()
    if param.nargs != 1 and not name.endswith("..."):
        name += "..."
    return name if param.required or name.startswith("[") else f"[{name}]"


class _Group(typer.core.TyperGroup):
    """The command group: every usage mistake (a missing argument, an unknown option, a
    value out of range) is one line on stderr, ``crtfilter: error: ...``, with status 2."""

    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True, **extra):
        try:
            code = super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
            code = code if isinstance(code, int) else 0
        except _CLICK.UsageError as exc:
            if type(exc).__name__ == "NoArgsIsHelpError":  # a bare command: its help, as asked
                typer.echo(exc.format_message(), err=True)
            else:
                where = f"; see '{exc.ctx.command_path} --help'" if exc.ctx is not None else ""
                _echo(f"crtfilter: error: {exc.format_message().rstrip('.')}{where}", err=True)
            code = exc.exit_code
        except _CLICK.ClickException as exc:
            _echo(f"crtfilter: error: {exc.format_message()}", err=True)
            code = exc.exit_code
        except typer.Abort:
            _echo("crtfilter: interrupted", err=True)
            code = 130
        if standalone_mode:
            sys.exit(code)
        return code


app = typer.Typer(
    cls=_Group,
    add_completion=False,
    no_args_is_help=True,
    rich_markup_mode=None,
    help=(
        "Turn low-resolution frames into high-resolution stills with scanlines and a "
        "phosphor mask, holding the picture's mean brightness, and measure that it was held.\n\n"
        "Caution: HDR output (render --output-range hdr) can be very bright on capable "
        "displays at high --peak values, and needs an HDR-capable viewer to look right."
    ),
)
presets_app = typer.Typer(
    cls=_Group,
    add_completion=False,
    invoke_without_command=True,
    help="List the shipped presets, or show one in full.",
)
app.add_typer(presets_app, name="presets")


def _echo(text: str, err: bool = False) -> None:
    """Print one line, its control characters escaped (file names can hold any of them)."""
    typer.echo(printable(text), err=err)


def _cell(text: str) -> str:
    """Text for a table cell: escaped, and never read as rich markup."""
    from rich.markup import escape

    return escape(printable(text))


def _fail(message: str, code: int = 2) -> None:
    _echo(f"crtfilter: error: {message}", err=True)
    raise typer.Exit(code)


def _version(value: bool):
    if value:
        _echo(f"crtfilter {__version__}")
        raise typer.Exit()


@app.callback()
def _main(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                 help="Print the version and exit."),
):
    pass


@contextmanager
def _cluster(address: str | None, quiet: bool = False):
    """A Dask client for ``--cluster`` (None without it); says on stderr what it joined."""
    if address is None:
        yield None
        return
    from .cluster import connect

    with connect(address) as client:
        workers = client.nthreads()
        if not quiet:
            _echo(f"crtfilter: cluster {address}: {len(workers)} workers, {sum(workers.values())} threads",
                  err=True)
        yield client


def _cores() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def _percent(ratio: float | None) -> str:
    return terms.percent(ratio)


def clip_line(src, rep: dict) -> str:
    """A clip's output line: frames, rate, and the light kept over its frames."""
    lum, clip = rep["luminance"], rep["clip"]
    w, h = rep["geometry"]["output"]
    spread = (f" (frames: min {_percent(lum['ratio_min'])}, median {_percent(lum['ratio_median'])}, "
              f"max {_percent(lum['ratio_max'])})" if lum["ratio_min"] is not None else "")
    how = f", {clip['delivery']}" if clip["format"] in ("mkv", "mp4") else ""
    return (f"{src} -> {rep['output']}  {w}x{h}  {clip['frames']} frames at {clip['fps']:g}/s "
            f"({clip['format']}{how})  light kept {_percent(lum['ratio'])}{spread}  "
            f"(plain multiply: {_percent(lum['plain_multiply_median'])})")


class _FrameProgress:
    """Frames of a clip on stderr when it is a terminal: frames, frames per second, time left."""

    def __init__(self, wanted: bool):
        self.wanted, self.bar, self.task, self.phase = wanted and sys.stderr.isatty(), None, None, None

    def __enter__(self):
        return self

    def update(self, phase: str, done: int, total: int) -> None:
        if not self.wanted:
            return
        if self.bar is None:
            from rich.console import Console
            from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

            self.bar = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                                TextColumn("frames"), TextColumn("{task.fields[rate]}"), TextColumn("eta"),
                                TimeRemainingColumn(), console=Console(stderr=True), transient=True)
            self.bar.__enter__()
        if phase != self.phase:
            if self.task is not None:
                self.bar.remove_task(self.task)
            self.task = self.bar.add_task(phase, total=total, rate="")
            self.phase = phase
        speed = self.bar.tasks[0].speed if self.bar.tasks else None
        self.bar.update(self.task, completed=done, total=total, rate=f"{speed:.1f}/s" if speed else "")

    def __exit__(self, *exc):
        if self.bar is not None:
            self.bar.__exit__(*exc)
        return False


class _Progress:
    """A progress bar on stderr when it is a terminal; nothing otherwise."""

    def __init__(self, total: int, label: str):
        self.total, self.label, self.bar, self.task = total, label, None, None

    def __enter__(self):
        if self.total > 1 and sys.stderr.isatty():
            from rich.console import Console
            from rich.progress import (BarColumn, MofNCompleteColumn, Progress, ProgressColumn, TextColumn,
                                       TimeElapsedColumn, TimeRemainingColumn)
            from rich.text import Text

            class Rate(ProgressColumn):
                def render(self, task):
                    return Text(f"{task.speed:.2f}/s" if task.speed else "", style="progress.data.speed")

            self.bar = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), Rate(),
                                TimeElapsedColumn(), TextColumn("eta"), TimeRemainingColumn(),
                                console=Console(stderr=True), transient=True)
            self.bar.__enter__()
            self.task = self.bar.add_task(self.label, total=self.total)
        return self

    def advance(self) -> None:
        if self.bar is not None:
            self.bar.advance(self.task)

    def __exit__(self, *exc):
        if self.bar is not None:
            self.bar.__exit__(*exc)
        return False


@app.command(cls=_Command)
def render(
    inputs: list[Path] = typer.Argument(..., metavar="IMAGE...",
                                        help="Image files or folders of images."),
    out: Path = typer.Option(..., "-o", "--out", metavar="PATH",
                             help="Output file for one input (.png, .jpg, .webp or .avif), otherwise a folder."),
    preset: str = typer.Option(DEFAULT_PRESET, "--preset", "-p", metavar="PRESET",
                               help="Shipped preset name or path to a preset .toml file; several, "
                                    "comma-separated, render each image with each."),
    scale: Optional[float] = typer.Option(None, "--scale", metavar="ROWS",
                                          help="Output rows per source line (replaces the preset's fit; with "
                                               "--size, that scale centred in that size)."),
    size: Optional[str] = typer.Option(None, "--size", metavar="WxH",
                                       help="Exact output size; the picture is whole-scaled to fit inside "
                                            "(--fill: as large as fits), centred on black."),
    fill: Optional[bool] = typer.Option(None, "--fill/--whole-scale",
                                        help="--fill: scale the picture to fill the size or the preset's box, "
                                             "at a fractional scale; --whole-scale: only whole scales, every "
                                             "source line the same number of rows [default: the preset's]."),
    kernel: Optional[str] = typer.Option(None, "--kernel", metavar="NAME",
                                         help="Upscale kernel: sharp, nearest, bilinear, cubic or lanczos3."),
    phosphor: Optional[str] = typer.Option(None, "--phosphor", metavar="LAYOUT",
                                           help="Phosphor layout: aperture, slot, dots or none."),
    triad_pitch: Optional[float] = typer.Option(None, "--triad-pitch", metavar="PX",
                                                help="Width of one red-green-blue triad in output pixels "
                                                     "(1.5 to 64, fractions allowed)."),
    scanline_strength: Optional[float] = typer.Option(None, "--scanline-strength", metavar="0-1",
                                                      help="How dark the gaps between source lines are; 0 turns "
                                                           "the scanlines off."),
    beam_width: Optional[float] = typer.Option(None, "--beam-width", metavar="LINES",
                                               help="The beam's height at half its peak, in source lines "
                                                    "(0.2 to 2)."),
    softness: Optional[float] = typer.Option(None, "--softness", metavar="0-1",
                                             help="Gentler tone curves: 0 the full lift and cut, 1 none."),
    crop: Optional[str] = typer.Option(None, "--crop", metavar="X,Y,W,H",
                                       help="Keep this rectangle of each input (its own pixels): cut a "
                                            "capture's borders."),
    line_doubled: Optional[bool] = typer.Option(None, "--line-doubled/--not-line-doubled",
                                                help="The input draws every source line twice (a 240-line "
                                                     "picture captured as 480): take each row pair as one line."),
    overscan: Optional[float] = typer.Option(None, "--overscan", metavar="PERCENT",
                                             help="Cut this share of the width and of the height, half from "
                                                  "each side, as a television's bezel hid it."),
    pixel_aspect: Optional[str] = typer.Option(None, "--pixel-aspect", metavar="W:H",
                                               help="Shape of one source pixel on the original display, e.g. 8:7."),
    display_aspect: Optional[str] = typer.Option(None, "--display-aspect", metavar="W:H",
                                                 help="Shape of the whole original picture, e.g. 4:3."),
    transfer: Optional[str] = typer.Option(None, "--transfer", metavar="NAME",
                                           help="Source transfer function: srgb, gamma-2.2 or bt1886."),
    depth: Optional[int] = typer.Option(None, "--depth", metavar="BITS",
                                        help="Output bits per sample: 8 or 16."),
    primaries: Optional[str] = typer.Option(None, "--primaries", metavar="NAME",
                                            help="The source display's primaries: srgb, smpte-c (SMPTE RP 145), "
                                                 "ebu (EBU Tech 3213) or ntsc-1953 (BT.470 System M; its own "
                                                 "white is C: add --white C)."),
    white: Optional[str] = typer.Option(None, "--white", metavar="NAME",
                                        help="The source display's white: d65, 9300k or C; adapted to D65 "
                                             "(Bradford)."),
    output_range: Optional[str] = typer.Option(None, "--output-range", metavar="sdr|hdr",
                                               help="hdr: 16-bit PQ, BT.2020, tagged with cICP; the mask keeps its "
                                                    "structure in highlights. CAUTION: can be very bright."),
    peak: Optional[float] = typer.Option(None, "--peak", metavar="NITS",
                                         help="HDR: the brightest output, cd/m² [default: 1000]."),
    reference_white: Optional[float] = typer.Option(None, "--reference-white", metavar="NITS",
                                                    help="HDR: where input white lands, cd/m² [default: 203, "
                                                         "ITU-R BT.2408]."),
    dither: Optional[str] = typer.Option(None, "--dither", metavar="KIND",
                                         help="8-bit rounding: none, ordered or noise (keeps smooth ramps "
                                              "free of bands, and the mean where it was)."),
    light_tolerance: Optional[float] = typer.Option(None, "--light-tolerance", metavar="PERCENT",
                                          help="Warn when a file's light kept is further than this from "
                                               "its target (100 %, or the light share), measured on the "
                                               "written file [default: 1]."),
    strict: bool = typer.Option(False, "--strict",
                                help="Exit with status 1 when a file kept its light outside "
                                     "--light-tolerance, or a clip flashes above the WCAG 2.3.1 "
                                     "thresholds (the files are still written)."),
    light_share: Optional[float] = typer.Option(None, "--light-share", metavar="SHARE",
                                                help="Standard range: hold this share of the input's light "
                                                     "(0.5 to 1, e.g. 0.9) and use the headroom it leaves to "
                                                     "keep the mask in highlights [default: 1]."),
    glow_share: Optional[float] = typer.Option(None, "--glow-share", metavar="SHARE",
                                               help="Spread this share of each pixel's light in the face "
                                                    "glass (0 to 0.5; 0: no glow) [default: the preset's]."),
    glow_radius: Optional[float] = typer.Option(None, "--glow-radius", metavar="PX",
                                                help="How far the glow reaches, in output pixels "
                                                     "[default: the preset's, 24 if it has none]."),
    rounding: Optional[str] = typer.Option(None, "--rounding", metavar="KIND",
                                           help="8-bit rounding without dither: cell-light moves a sample "
                                                "one code here and there so each mask cell keeps its light, "
                                                "nearest rounds each alone [default: cell-light]."),
    alpha: Optional[str] = typer.Option(None, "--alpha", metavar="over:COLOR|keep",
                                        help="Transparency: composite over a colour in linear light "
                                             "(over:black, over:#202830) or keep it in an RGBA output."),
    frame: Optional[int] = typer.Option(None, "--frame", metavar="N", min=0,
                                        help="Render only this frame of a clip, from 0, as a picture "
                                             "[default: a clip is rendered as a clip]."),
    frames: Optional[str] = typer.Option(None, "--frames", metavar="A:B",
                                         help="Clips: render frames A to B-1 (from 0; either may be left out)."),
    start: Optional[str] = typer.Option(None, "--from", metavar="TIME",
                                        help="Clips: start at this time (SS.s, MM:SS.s or HH:MM:SS.s)."),
    end: Optional[str] = typer.Option(None, "--to", metavar="TIME", help="Clips: stop before this time."),
    delivery: str = typer.Option("444", "--delivery", metavar="444|lossless|420",
                                 help="MKV and MP4: 444 keeps the mask at full colour resolution "
                                      "(near-lossless); lossless holds the exact codes (large files); 420 "
                                      "is for players that need it and blurs fine colour stripes (README)."),
    frames_csv: Optional[Path] = typer.Option(None, "--frames-csv", metavar="FILE.csv",
                                              help="One clip: write every frame's light figures as CSV."),
    max_pixels: int = typer.Option(89_478_485, "--max-pixels", metavar="N",
                                   help="Refuse larger inputs (a guard against decompression bombs)."),
    energy_map: Optional[Path] = typer.Option(None, "--energy-map", metavar="PATH",
                                              help="Also draw where light was gained or lost, per mask cell: "
                                                   "a .png for one input, else a folder."),
    report: Optional[Path] = typer.Option(None, "--report", metavar="FILE.json",
                                          help="Write a JSON array with one object per image."),
    force: bool = typer.Option(False, "--force", help="Replace existing outputs (never an input)."),
    jobs: int = typer.Option(0, "--jobs", "-j", metavar="N", min=0, max=256,
                             help="Worker processes for several images; 0 takes one per core."),
    cluster: Optional[str] = typer.Option(None, "--cluster", metavar="ADDRESS|local:N",
                                          help="Render on a Dask cluster instead of --jobs: a scheduler's "
                                               "address (tcp://host:8786), or local:N worker processes here. "
                                               "Needs the cluster extra (README)."),
    shared_storage: bool = typer.Option(False, "--shared-storage",
                                        help="With --cluster: workers read inputs and write outputs "
                                             "themselves (every machine sees the same paths) instead of "
                                             "being sent the bytes."),
    compression: int = typer.Option(4, "--compression", metavar="0-9", min=0, max=9,
                                    help="PNG compression 0-9: up to 6 fast; 7-9 much slower, smaller files "
                                         "for smooth pictures."),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="Print only the summary and errors."),
    out_format: Optional[str] = typer.Option(None, "--format", metavar="png|jpeg|webp|avif|apng|mkv|mp4",
                                             help="Format of the outputs in a folder [default: png, and mkv for "
                                                  "videos; for one file, its ending]. A clip written as png is "
                                                  "an APNG, as webp an animated WebP."),
    quality: int = typer.Option(95, "--quality", metavar="1-100", min=1, max=100,
                                help="JPEG, WebP and AVIF quality; WebP at 100 is lossless."),
    subsampling: str = typer.Option("4:4:4", "--subsampling", metavar="4:4:4|4:2:2|4:2:0",
                                    help="JPEG and AVIF chroma subsampling; 4:2:0 blurs the mask's colour "
                                         "stripes and loses light."),
    name: Optional[str] = typer.Option(None, "--name", metavar="TEMPLATE",
                                       help="Output file names in a folder, from {stem}, {preset}, {width}, "
                                            "{height}, {format} [default: {stem}, or {stem}-{preset} with "
                                            "several presets]."),
    skip_existing: bool = typer.Option(False, "--skip-existing",
                                       help="Leave outputs that exist as they are and render the rest."),
    include_renders: bool = typer.Option(False, "--include-renders",
                                         help="Take files crtfilter rendered before as inputs too "
                                              "(in folders they are passed over)."),
):
    """Render images with a preset and say how much light each kept.

    One line per image gives the output's mean luminance as a share of the
    input's (measured from the written file), and what a plain multiply by the
    same mask would have kept. Exit status: 0 all rendered, 1 some failed,
    2 bad usage or a single input that failed, 130 interrupted (Ctrl-C),
    143 or 129 stopped by SIGTERM or SIGHUP.

    Clips (animated GIF, APNG, WebP; MP4, MKV, MOV, AVI, WebM video) are
    rendered as clips, to APNG, animated WebP, MKV or MP4, with the light of
    every frame measured from the written file (min, median and max on the
    line), the sound copied, and a flash check.

    Caution: with --output-range hdr the file can be very bright on an HDR
    display (up to --peak cd/m²), and needs an HDR-capable viewer to look right.

    Caution: clips that flash can trigger seizures in people with photosensitive
    epilepsy. Every clip written is checked against the WCAG 2.2 2.3.1 general
    and red flash thresholds, and the seconds above them are named on stderr
    (--strict makes that exit status 1). The check is an aid, not a
    certification: look at the result before you publish it.
    """
    from .errors import CrtfilterError
    from .job import BatchResult, energy_map_paths, plan_outputs, prepare_kernels, render_batch
    from .motion import caution

    names = [n.strip() for n in preset.split(",") if n.strip()] or [DEFAULT_PRESET]
    if len(set(names)) != len(names):
        _fail(f"--preset names a preset twice: {preset}")
    if light_tolerance is None:
        light_tolerance = 1.0
    elif not light_tolerance >= 0:
        _fail(f"--light-tolerance must be a percentage of 0 or more (got {light_tolerance:g})")
    template = name if name is not None or len(names) == 1 else "{stem}-{preset}"
    options = dict(size=size, scale=scale, pixel_aspect=pixel_aspect, display_aspect=display_aspect,
                   transfer=transfer, alpha=alpha, depth=depth, dither=dither, primaries=primaries, white=white,
                   output_range=output_range, peak=peak, reference_white=reference_white, kernel=kernel,
                   whole_scale=None if fill is None else not fill, phosphor=phosphor, triad_pitch=triad_pitch,
                   scanline_strength=scanline_strength, beam_width=beam_width, softness=softness, crop=crop,
                   line_doubled=line_doubled, overscan=overscan, rounding=rounding, light_share=light_share,
                   glow_share=glow_share, glow_radius=glow_radius)
    plans, all_maps, planned = [], [], {}
    try:
        for p in names:
            plan = plan_outputs(inputs, out, force=force, skip_existing=skip_existing, fmt=out_format,
                                name=template, preset=p, include_renders=include_renders, options=options)
            if len(names) > 1 and len(plan.pairs) == 1 and plan.pairs[0][1] == out:
                raise CrtfilterError(f"{out}: names one file, but {len(names)} presets were given: "
                                     f"name a folder for their outputs")
            maps = energy_map_paths(plan, out, energy_map) if energy_map is not None else None
            for _src, dst in plan.pairs:
                key = os.path.realpath(dst)
                if key in planned:
                    raise CrtfilterError(f"{dst}: the presets {planned[key]} and {p} would both write it "
                                         "(put {preset} in --name)")
                planned[key] = p
            plans.append(plan)
            all_maps.append(maps)
        if report is not None:  # every plan protects the same inputs: the first one checks it
            if os.path.realpath(report) in planned:
                raise CrtfilterError(f"{report}: both an output and the report would be written here")
            plans[0].writes.add(report, "report")
    except CrtfilterError as exc:
        _fail(str(exc))
    first = plans[0]
    if not any(pl.pairs for pl in plans) and not first.existing:
        where = ", ".join(map(str, inputs))
        if first.earlier:
            _fail(f"no images to render in {where}: its {len(first.earlier)} pictures were rendered by "
                  "crtfilter (--include-renders takes them)")
        _fail(f"no images found in {where}")

    def printer(plan):
        """Print each file's line in the order of the inputs, whatever order they finish in."""
        order = {src: i for i, (src, _dst) in enumerate(plan.pairs)}
        waiting: dict[int, tuple] = {}
        state = {"next": 0}

        def line(src, rep, error):
            ratio = None if rep is None else rep["luminance"]["ratio"]
            target = 1.0 if rep is None else rep["luminance"].get("target", 1.0)
            if rep is not None and "clip" in rep:  # the frame furthest from the target
                lum = rep["luminance"]
                ratio = max((r for r in (lum["ratio_min"], lum["ratio_max"]) if r is not None),
                            key=lambda r: abs(r / target - 1), default=None)
                said = caution(rep)
                if said is not None:
                    rep["warnings"] = [*rep.get("warnings", ()), said]
                    flashing.append(src)
            if ratio is not None and abs(ratio / target - 1) > light_tolerance / 100 + 5e-7:
                aim = "100 %" if target == 1.0 else f"its target {_percent(target)}"
                rep["warnings"] = [*rep.get("warnings", ()),
                                   f"light kept {_percent(ratio)} is outside {aim} ± {light_tolerance:g} % "
                                   "(--light-tolerance)"]
                outside.append(src)
            if error is not None:
                _echo(f"crtfilter: error: {error}", err=True)
            elif not quiet and "clip" in rep:
                _echo(clip_line(src, rep))
            elif not quiet:
                lum = rep["luminance"]
                w, h = rep["geometry"]["output"]
                nits = (f", {lum['input_nits']:.1f} -> {lum['output_nits']:.1f} cd/m²"
                        if "output_nits" in lum else "")
                aim = f" (target {_percent(lum['target'])})" if lum.get("target", 1.0) != 1.0 else ""
                _echo(f"{src} -> {rep['output']}  {w}x{h}  light kept {_percent(lum['ratio'])}{aim}"
                      f"  (plain multiply: {_percent(lum['plain_multiply_ratio'])}){nits}")
            if rep is not None:
                for text in rep.get("warnings", ()):
                    _echo(f"crtfilter: warning: {src}: {text}", err=True)

        def done(src, rep, error):
            progress.advance()
            waiting[order.get(src, len(order))] = (src, rep, error)
            while state["next"] in waiting:
                line(*waiting.pop(state["next"]))
                state["next"] += 1

        def flush():
            for i in sorted(waiting):
                line(*waiting.pop(i))

        return done, flush

    result = BatchResult(skipped=list(first.skipped))
    outside: list = []  # files whose light kept is outside --light-tolerance
    flashing: list = []  # clips that flash above the thresholds
    clip_options = dict(frames=frames, start=start, end=end, delivery=delivery, frames_csv=frames_csv)
    if frames_csv is not None and (len(names) > 1 or sum(len(pl.pairs) for pl in plans) != 1):
        _fail("--frames-csv names one file: give one clip and one preset")
    if shared_storage and cluster is None:
        _fail("--shared-storage is for --cluster")
    try:
        with _cluster(cluster, quiet) as client:
            if client is None:
                for p, plan in zip(names, plans, strict=True):
                    prepare_kernels(plan, preset=p, **options)
            total_files = sum(len(pl.pairs) for pl in plans)
            with _Progress(total_files, "rendering") as progress, \
                    _FrameProgress(total_files == 1 and client is None) as frame_bar:
                for p, plan, maps in zip(names, plans, all_maps, strict=True):
                    done, flush = printer(plan)
                    part = render_batch(plan, preset=p, force=force, on_done=done, energy_maps=maps,
                                        jobs=jobs or _cores(), compression=compression, frame=frame,
                                        max_pixels=max_pixels, prepared=True, quality=quality,
                                        subsampling=subsampling, clip_options=clip_options,
                                        on_frame=frame_bar.update, cluster=client,
                                        shared_storage=shared_storage, keep_reports=report is not None,
                                        **options)
                    flush()
                    result.reports += part.reports
                    result.failures += part.failures
                    result.retried += part.retried
                    if part.interrupted:
                        result.interrupted, result.stopped_by = True, part.stopped_by
                        result.not_started += part.not_started + sum(
                            len(pl.pairs) for pl in plans[plans.index(plan) + 1:])
                        break
    except CrtfilterError as exc:
        _fail(str(exc))
    if report is not None:
        try:
            first.writes.write(report, (json.dumps(result.reports, indent=2) + "\n").encode())
        except CrtfilterError as exc:
            _fail(str(exc))
    total = sum(len(pl.pairs) for pl in plans)
    existing = sum(len(pl.existing) for pl in plans)
    earlier = len(first.earlier)
    single = total == 1 and not existing
    if not single or result.skipped or result.interrupted or existing or earlier:
        line = f"{len(result.reports)} rendered, {len(result.failures)} failed"
        if result.skipped:
            line += f", {len(result.skipped)} skipped (not images by their ending)"
        if existing:
            line += f", {existing} left as they were (they exist)"
        if earlier:
            line += f", {earlier} passed over (rendered by crtfilter before; --include-renders takes them)"
        if result.interrupted:
            import signal

            how = ("interrupted" if result.stopped_by in (None, signal.SIGINT)
                   else f"stopped by {signal.Signals(result.stopped_by).name}")
            line = f"{how}: {line}, {result.not_started} not started"
        _echo(line)
        for _path, why in result.failures:
            _echo(f"  failed: {why}", err=True)
        for path in result.retried:
            _echo(f"  retried: {path} (a worker process died while it was in progress)", err=True)
    if result.interrupted:
        raise typer.Exit(128 + (result.stopped_by or 2))  # 128 + the signal's number; SIGINT is 2
    if result.failures:
        raise typer.Exit(2 if single else 1)
    if strict and outside:
        _echo(f"crtfilter: {len(outside)} of {len(result.reports)} files kept light outside their target "
              f"± {light_tolerance:g} % (--strict)", err=True)
    if strict and flashing:
        _echo(f"crtfilter: {len(flashing)} clips flash above the WCAG 2.3.1 thresholds (--strict)", err=True)
    if strict and (outside or flashing):
        raise typer.Exit(1)


@app.command(cls=_Command)
def check(
    presets: Optional[list[str]] = typer.Argument(None, metavar="[PRESET]...",
                                                  help="Preset names or .toml files (default: every shipped preset)."),
    images: Optional[Path] = typer.Option(None, "--images", metavar="PATH",
                                          help="An image, or a folder of images (default: the bundled samples "
                                               "and test charts)."),
    min_ratio: Optional[float] = typer.Option(None, "--min-ratio", metavar="R",
                                              help="Lowest light kept, output / input mean luminance [default: 0.99]."),
    max_ratio: Optional[float] = typer.Option(None, "--max-ratio", metavar="R",
                                              help="Highest light kept [default: 1.01]."),
    min_contrast: Optional[float] = typer.Option(None, "--min-contrast", metavar="C",
                                                 help="Lowest mask contrast (Michelson, linear luminance) on "
                                                      "a uniform 18 % grey [default: 0.25]."),
    json_file: Optional[Path] = typer.Option(None, "--json", metavar="FILE", help="Write every figure as JSON."),
    junit: Optional[Path] = typer.Option(None, "--junit", metavar="FILE",
                                         help="Write JUnit XML for CI systems to display."),
    maps: Optional[Path] = typer.Option(None, "--maps", metavar="DIR",
                                        help="Draw an energy map per preset and image into this folder."),
    force: bool = typer.Option(False, "--force", help="Replace the reports and maps of an earlier check."),
    cluster: Optional[str] = typer.Option(None, "--cluster", metavar="ADDRESS|local:N",
                                          help="Render on a Dask cluster: a scheduler's address "
                                               "(tcp://host:8786), or local:N worker processes here."),
):
    """Fail when a preset darkens, brightens or stops showing its mask.

    Renders each preset on each image, measures the written files, and holds
    the light kept to [min-ratio, max-ratio] and the mask contrast at 18 % grey
    to min-contrast. Settings may also come from a [tool.crtfilter.check] table
    in ./pyproject.toml (keys: presets, images, min_ratio, max_ratio,
    min_contrast, json, junit, maps); flags given here win. Exit status: 0 all
    pass, 1 a check failed, 2 bad usage.
    """
    from .errors import CrtfilterError
    from .gate import CheckSettings, config_from_pyproject, junit_xml, resolve_presets, run_check
    from .writes import WritePlan

    flags = {"presets": tuple(presets) if presets else None,
             "images": None if images is None else str(images),
             "min_ratio": min_ratio, "max_ratio": max_ratio, "min_contrast": min_contrast,
             "json": None if json_file is None else str(json_file),
             "junit": None if junit is None else str(junit),
             "maps": None if maps is None else str(maps)}
    try:
        config = config_from_pyproject(Path.cwd())
        settings = CheckSettings(**{**config, **{k: v for k, v in flags.items() if v is not None}})
        total = len(resolve_presets(settings.presets))
        writes = WritePlan(force=force)
        with _cluster(cluster) as client, _Progress(total * 12, "checking") as progress:
            result = run_check(settings, writes=writes, on_case=lambda case: progress.advance(), cluster=client)
    except CrtfilterError as exc:
        _fail(str(exc))
    from rich.console import Console
    from rich.table import Table

    table = Table(title=f"light kept within {_percent(settings.min_ratio)} to {_percent(settings.max_ratio)}; "
                        f"mask contrast at 18 % grey >= {settings.min_contrast}")
    for col in ("preset", "image", "light kept", "local error p99", "mask contrast", "result"):
        table.add_column(col, justify="right" if col not in ("preset", "image") else "left")
    for c in result.cases:
        light = "" if c.kind == "contrast" or c.value is None else _percent(c.value)
        local = "" if c.local_p99 is None else _percent(c.local_p99)
        verdict = "[green]pass[/green]" if c.passed else f"[bold red]FAIL[/bold red] {_cell(c.message)}"
        table.add_row(_cell(c.preset), _cell(c.image), light, local, terms.contrast(c.contrast), verdict)
    Console(width=max(110, Console().width)).print(table)
    try:
        for path, data in ((settings.json, lambda: (json.dumps(result.as_dict(), indent=2) + "\n").encode()),
                           (settings.junit, lambda: junit_xml(result))):
            if path:
                writes.write(path, data())
    except CrtfilterError as exc:
        _fail(str(exc))
    n = len(result.cases)
    if result.passed:
        _echo(f"all {n} checks passed")
        return
    _echo(f"{len(result.failures)} of {n} checks failed", err=True)
    raise typer.Exit(1)


#: The names people read for the figures inspect measures again (keys as in the record).
_FIGURE_NAMES = {"luminance.output": "output luminance", "luminance.input": "input luminance",
                 "luminance.ratio": "light kept", "local.p50": "local error p50", "local.p99": "local error p99",
                 "local.max": "local error max"}


def _figure_text(figure: str):
    """How a figure inspect checks is shown: light kept and local errors as percentages,
    mean luminances to six significant digits ("holds" is decided on the full values)."""
    if figure == "luminance.ratio" or figure.startswith("local."):
        return lambda v: "n/a" if v is None else _percent(v)
    return lambda v: "n/a" if v is None else f"{v:.6g}"


@app.command(cls=_Command)
def inspect(
    file: Path = typer.Argument(..., metavar="FILE", help="A PNG, JPEG, WebP or AVIF file written by crtfilter."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON instead of text."),
):
    """Print the settings and figures a rendered PNG records, and check they still hold.

    The output is measured again from the file; if the recorded input still
    exists it is measured and upscaled again too. Exit status: 0 every figure
    holds, 1 one does not, 2 not a crtfilter PNG.
    """
    from .errors import CrtfilterError
    from .job import inspect_file

    try:
        found = inspect_file(file)
    except CrtfilterError as exc:
        _fail(str(exc))
    if as_json:
        typer.echo(json.dumps(found, indent=2))
    else:
        rec = found["record"]
        given = rec.get("options") if isinstance(rec.get("options"), dict) else {}
        laid = "".join(f", {k} = {json.dumps(v)}" for k, v in given.items())
        _echo(f"{found['file']}: rendered by crtfilter {rec['version']} with preset {rec['preset']}{laid}")
        _echo(f"from {rec.get('input', '?')}" + ("" if found["input_found"] else " (not found: "
                   "input figures not re-measured)"))
        g = rec["geometry"]
        x, y, pw, ph = g["picture"]
        where = "" if [pw, ph] == g["output"] else f" (picture {terms.size(pw, ph)} at {x},{y})"
        _echo(f"output {terms.size(*g['output'])}{where} from a {terms.size(*g['source'])} source; "
              f"light kept {_percent(rec['luminance']['ratio'])} "
              + (f"(target {_percent(rec['luminance']['target'])}) "
                 if rec["luminance"].get("target", 1.0) != 1.0 else "") +
              f"(plain multiply {_percent(rec['luminance']['plain_multiply_ratio'])})")
        for table, values in rec["settings"].items():
            _echo(f"[{table}] " + ", ".join(f"{k} = {json.dumps(v)}" for k, v in values.items()))
        words = found["curves_in_words"]
        if words and len(set(words)) == 1:
            _echo(f"mask mean {rec['mask_mean'][1]:.4f}; {words[0]}")
        else:
            for name, mean, text in zip(("red", "green", "blue"), rec["mask_mean"], words, strict=False):
                _echo(f"{name}: mask mean {mean:.4f}; {text}")
        _echo("measured again:")
        for row in found["checks"]:
            shown = _figure_text(row["figure"])
            _echo(f"  {_FIGURE_NAMES.get(row['figure'], row['figure']):<22} recorded {shown(row['recorded']):<12} "
                  f"measured {shown(row['measured']):<12} {'holds' if row['holds'] else 'DOES NOT HOLD'}")
    if not found["holds"]:
        raise typer.Exit(1)


@app.command(cls=_Command)
def compare(
    image: Path = typer.Argument(..., metavar="IMAGE", help="The picture to compare presets on."),
    presets: str = typer.Option(..., "--presets", metavar="A,B,C", help="One to twelve presets, comma-separated."),
    out: Path = typer.Option(..., "-o", "--out", metavar="FILE", help="The sheet to write (.png)."),
    crop: Optional[str] = typer.Option(None, "--crop", metavar="X,Y,W,H",
                                       help="Region in source pixels shown 1:1 [default: where the presets differ most]."),
    force: bool = typer.Option(False, "--force", help="Replace an existing sheet."),
):
    """Put several presets side by side on one picture, at 1:1, with their figures.

    Each panel has a 1:1 crop, an overview of the whole frame and the light
    kept and mask contrast; a plain nearest upscale and a plain multiply by the
    first preset's mask come first, to show the darkening crtfilter avoids.
    """
    from .compare import compare_sheet, parse_crop
    from .errors import CrtfilterError
    from .files import encode_png
    from .presets import load_preset
    from .writes import WritePlan

    names = [n.strip() for n in presets.split(",") if n.strip()]
    try:
        if not 1 <= len(names) <= 12:
            raise CrtfilterError(f"name one to twelve presets (got {len(names)})")
        writes = WritePlan(force=force)
        writes.protect(image)
        writes.add(out, "sheet")
        chosen = [load_preset(n) for n in names]
        region = parse_crop(crop) if crop is not None else None
        with _Progress(2 * len(chosen), "comparing") as progress:
            sheet, figures = compare_sheet(image, chosen, region, on_step=progress.advance)
        writes.write(out, encode_png(sheet))
    except CrtfilterError as exc:
        _fail(str(exc))
    x, y, w, h = figures["crop"]
    why = "" if figures["crop_reason"] == "given" else f", chosen {figures['crop_reason']}"
    _echo(f"{out}: {terms.size(sheet.shape[1], sheet.shape[0])}, crop {x},{y} {terms.size(w, h)} source px{why}")
    for panel in figures["panels"]:
        contrast = "" if panel["contrast"] is None else f", mask contrast {terms.contrast(panel['contrast'])}"
        _echo(f"  {panel['name']}: light kept {_percent(panel['ratio'])}{contrast}")


@app.command(cls=_Command)
def curves(
    preset: Optional[str] = typer.Argument(None, metavar="[PRESET]", help="Preset name or .toml file."),
    out: Path = typer.Option(..., "-o", "--out", metavar="FILE", help="The plot to write (.png)."),
    mean: Optional[float] = typer.Option(None, "--mean", metavar="MU",
                                         help="Plot the pair for this mask mean instead of a preset's."),
    curve: str = typer.Option("blend", "--curve", metavar="NAME",
                             help="With --mean: the curve family (blend, integer, exponent, piecewise)."),
    softness: float = typer.Option(0.0, "--softness", metavar="0-1", help="With --mean: 0 strongest to 1 no mask."),
    headroom: float = typer.Option(1.0, "--headroom", metavar="H",
                                   help="With --mean: peak / reference white (HDR), 1 / light share for standard range."),
    force: bool = typer.Option(False, "--force", help="Replace an existing plot."),
):
    """Plot a preset's lift and cut curves, the identity and the mask visibility.

    The preset's pairs are those for a 320x240 source; channels that differ
    are drawn separately.
    """
    from .audit import REFERENCE_SOURCE
    from .errors import CrtfilterError
    from .masks import build_mask
    from .plots import plot_curves
    from .presets import load_preset
    from .scale import plan_geometry
    from .tone import ToneSettings, solve_channels, tone_pair
    from .writes import WritePlan

    try:
        if (preset is None) == (mean is None):
            raise CrtfilterError("give a preset or --mean MU (one of them)" if preset is None
                                 else "give a preset or --mean MU, not both")
        writes = WritePlan(force=force)
        if preset is not None and Path(preset).suffix.lower() == ".toml":
            writes.protect(preset)
        writes.add(out, "plot")
        if mean is not None:
            pairs = (tone_pair(mean, ToneSettings(curve=curve, softness=softness), headroom=headroom),) * 3
            title = f"mask mean {mean:g}" + (f", headroom {headroom:g}" if headroom != 1 else "")
        else:
            p = load_preset(preset)
            g = plan_geometry(*REFERENCE_SOURCE, p.settings.picture_geometry)
            pairs = solve_channels(build_mask(g, p.settings.mask).mean, p.settings.tone,
                                   headroom=p.settings.encoding.headroom)
            title = f"{p.name}: lift and cut curves"
        data = plot_curves(pairs, out, title=title, write=writes.write)
    except CrtfilterError as exc:
        _fail(str(exc))
    for ch in data["channels"]:
        shape = "a straight line within the headroom" if ch["linear"] else f"degree {ch['degree']}"
        _echo(f"{out}: {ch['label']}: mask mean {ch['mu']:.4f}, {ch['curve']} curve, "
                   f"slope {ch['slope']:.3f}, {shape}")


@app.command(cls=_Command)
def mask(
    preset: str = typer.Argument(..., metavar="PRESET", help="Preset name or .toml file."),
    out: Path = typer.Option(..., "-o", "--out", metavar="FILE", help="The preview to write (.png)."),
    zoom: int = typer.Option(16, "--zoom", metavar="N", min=1, max=64, help="Screen pixels per mask pixel."),
    force: bool = typer.Option(False, "--force", help="Replace an existing preview."),
):
    """Show a few cells of a preset's mask, enlarged, with the cell outline and means.

    The mask is the one a 320x240 source gets with the preset's geometry.
    """
    from .audit import REFERENCE_SOURCE
    from .errors import CrtfilterError
    from .files import encode_png
    from .masks import build_mask
    from .pictures import mask_preview
    from .presets import load_preset
    from .scale import plan_geometry
    from .writes import WritePlan

    try:
        writes = WritePlan(force=force)
        if Path(preset).suffix.lower() == ".toml":
            writes.protect(preset)
        writes.add(out, "preview")
        p = load_preset(preset)
        built = build_mask(plan_geometry(*REFERENCE_SOURCE, p.settings.picture_geometry), p.settings.mask)
        writes.write(out, encode_png(mask_preview(built, zoom=zoom)))
    except CrtfilterError as exc:
        _fail(str(exc))
    _echo(f"{out}: period cell {terms.cell(built.cell)}, mask mean {' '.join(f'{m:.4f}' for m in built.mean)}")


@app.command(cls=_Command)
def report(
    presets: list[str] = typer.Argument(..., metavar="PRESET...", help="Preset names or .toml files."),
    images: Path = typer.Option(..., "--images", metavar="PATH", help="An image, or a folder of images."),
    out: Path = typer.Option(..., "-o", "--out", metavar="FOLDER", help="Folder for the page and its pictures."),
    force: bool = typer.Option(False, "--force", help="Replace a report written there before."),
):
    """Write a static HTML page comparing presets on a folder of images.

    Per image: thumbnails linking to full-size outputs, the figures, energy
    maps, and a 1:1 toggle between two presets; per preset: its curves. The
    page needs no network. Open FOLDER/index.html.
    """
    from .errors import CrtfilterError
    from .job import images_in
    from .presets import load_preset
    from .report import build_report

    try:
        found = images_in(images, out)  # what an earlier report wrote below the images is left out
        chosen = [load_preset(n) for n in presets]
        with _Progress(len(found) * len(chosen), "reporting") as progress:
            index = build_report(chosen, found, out, force=force, on_step=progress.advance)
    except CrtfilterError as exc:
        _fail(str(exc))
    _echo(f"{index}: {len(chosen)} preset{'s' * (len(chosen) != 1)} on {len(found)} "
          f"image{'s' * (len(found) != 1)}")


@presets_app.callback()
def presets(
    ctx: typer.Context,
    as_json: bool = typer.Option(False, "--json", help="Print a JSON array instead of a table."),
):
    """List the shipped presets: name, description, mask, mask mean and visibility."""
    if ctx.invoked_subcommand is not None:
        return
    from .audit import COMMON_SOURCES, REFERENCE_GREY, REFERENCE_SOURCE, output_size, preset_figures
    from .errors import CrtfilterError
    from .presets import all_presets, settings_dict
    from .scale import parse_size

    try:
        rows = []
        for p in all_presets():
            figures = preset_figures(p.settings)
            outputs = {s: list(output_size(p.settings, *parse_size(s))) for s in COMMON_SOURCES}
            rows.append({"name": p.name, "description": p.description,
                         "mask": p.settings.mask.phosphor, "outputs": outputs,
                         "scanlines": p.settings.mask.scanlines,
                         **figures, "settings": settings_dict(p.settings),
                         "default": p.name == DEFAULT_PRESET})
    except CrtfilterError as exc:
        _fail(str(exc))
    if as_json:
        typer.echo(json.dumps(rows, indent=2))
        return
    from rich.console import Console
    from rich.table import Table

    w, h = REFERENCE_SOURCE
    table = Table(title=f"Presets: output size for a source of {', '.join(COMMON_SOURCES)}; mask mean and "
                        f"mask contrast at {REFERENCE_GREY:.0%} grey for {terms.size(w, h)}")
    heads = ["name", "mask", "scanlines", *COMMON_SOURCES, "mask mean", "mask contrast"]
    for head in heads:
        table.add_column(head, no_wrap=True, min_width=len(head))
    for r in rows:
        means = {f"{m:.3f}" for m in r["mask_mean"]}
        table.add_row(r["name"] + (" *" if r["default"] else ""), r["mask"], "yes" if r["scanlines"] else "no",
                      *("x".join(map(str, r["outputs"][s])) for s in COMMON_SOURCES),
                      means.pop() if len(means) == 1 else " ".join(f"{m:.3f}" for m in r["mask_mean"]),
                      terms.contrast(r["contrast"]))
    Console(width=max(120, Console().width)).print(table)
    for r in rows:
        _echo(f"  {r['name']}: {r['description']}")
    _echo(f"  * the default. Each picture is whole-scaled to fit within its preset's box; --size, --scale and --fill "
          "on render change that.")


@presets_app.command("show", cls=_Command)
def presets_show(
    name: str = typer.Argument(..., metavar="PRESET", help="Preset name or path to a preset .toml file."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON instead of text."),
):
    """Print a preset as a TOML file of every resolved setting, the curves the solver chose
    as comments: save it as a .toml file to start a preset of your own."""
    from .audit import REFERENCE_SOURCE, preset_figures
    from .errors import CrtfilterError
    from .plan import plan_render
    from .presets import load_preset, preset_toml, settings_dict

    try:
        p = load_preset(name)
        figures = preset_figures(p.settings)
    except CrtfilterError as exc:
        _fail(str(exc))
    data = {"name": p.name, "description": p.description, "file": str(p.path),
            "settings": settings_dict(p.settings), **figures}
    if as_json:
        typer.echo(json.dumps(data, indent=2))
        return
    w, h = REFERENCE_SOURCE
    pairs = plan_render(p.settings, w, h).pairs
    notes = [f"from {p.path}" if p.path is not None else "",
             f"for a {terms.size(w, h)} source: output {terms.size(*figures['output'])}, "
             f"period cell {terms.cell(figures['cell'])}, mask contrast at 18 % grey "
             f"{terms.contrast(figures['contrast'])} (green channel {terms.contrast(figures['contrast_green'])})"]
    channels = [f"mask mean {mean:.4f}; {pair.in_words()}" for mean, pair in zip(figures["mask_mean"], pairs,
                                                                                   strict=True)]
    if len(set(channels)) == 1:
        notes.append(f"red, green and blue: {channels[0]}")
    else:
        notes += [f"{name}: {text}" for name, text in zip(("red", "green", "blue"), channels, strict=True)]
    notes.append("curve coefficients: crtfilter presets show --json")
    typer.echo(preset_toml(p, [n for n in notes if n]), nl=False)


@presets_app.command("diff", cls=_Command)
def presets_diff(
    a: str = typer.Argument(..., metavar="PRESET_A", help="Preset name or .toml file."),
    b: str = typer.Argument(..., metavar="PRESET_B", help="Preset name or .toml file."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON instead of text."),
):
    """Show which resolved settings differ between two presets, and what that does to the mask."""
    from .errors import CrtfilterError
    from .presets import diff_presets, load_preset

    try:
        found = diff_presets(load_preset(a), load_preset(b))
    except CrtfilterError as exc:
        _fail(str(exc))
    if as_json:
        typer.echo(json.dumps(found, indent=2))
        return
    _echo(f"{found['a']} -> {found['b']}")
    if not found["settings"]:
        _echo("  no resolved setting differs")
    for row in found["settings"]:
        _echo(f"  {row['key']}: {json.dumps(row['a'])} -> {json.dumps(row['b'])}")
    f = found["figures"]
    _echo("for a 320x240 source:")
    _echo(f"  mask mean (R G B): {' '.join(f'{m:.4f}' for m in f['mask_mean']['a'])} -> "
               f"{' '.join(f'{m:.4f}' for m in f['mask_mean']['b'])}")
    _echo(f"  lift slope at black (G): {f['slope']['a'][1]:.3f} -> {f['slope']['b'][1]:.3f}; "
               f"curve degree {f['degree']['a'][1]} -> {f['degree']['b'][1]}")
    _echo(f"  mask contrast at 18 % grey: {terms.contrast(f['contrast']['a'])} -> "
          f"{terms.contrast(f['contrast']['b'])}")
    _echo(f"  output: {terms.size(*f['output']['a'])} -> {terms.size(*f['output']['b'])}")


@app.command(cls=_Command)
def tune(
    image: Path = typer.Argument(..., metavar="IMAGE", help="The picture to tune a look on (a still, "
                                 "or the first frame of a clip)."),
    preset: str = typer.Option(DEFAULT_PRESET, "--preset", "-p", metavar="NAME|FILE",
                               help="The preset to start from (and to extend when saving)."),
    port: int = typer.Option(0, "--port", metavar="PORT", help="The port to listen on, on 127.0.0.1 "
                             "(0, the default: a free one)."),
    open_browser: bool = typer.Option(False, "--open", help="Open the page in the default browser."),
):
    """Tune a look by eye on a local page, with its figures, and save it as a preset.

    Serves a page on 127.0.0.1 only (never another interface), at an address
    with a random token that this prints; requests without it, or from another
    site, are refused. The page shows the picture at 1:1 (zoom 1x, 2x, 4x),
    re-rendered as the settings move, the whole frame's figures beside it, an A/B
    switch against the starting preset, and saves a preset file that extends the
    starting one with only what differs - inside the working folder, replacing a
    file only when asked to confirm. Ctrl-C stops it.
    """
    from .errors import CrtfilterError
    from .live.server import TuneServer
    from .live.session import Session
    from .presets import load_preset

    if not 0 <= port <= 65535:
        _fail(f"--port must be from 0 to 65535 (got {port})")
    try:
        start = load_preset(preset)
        session = Session.open(image, start)
    except CrtfilterError as exc:
        _fail(str(exc))
    try:
        server = TuneServer(session, port=port)
    except OSError as exc:
        _fail(f"cannot listen on 127.0.0.1:{port} ({exc.strerror or exc})")
    import signal

    def stop(signum, frame):
        raise KeyboardInterrupt

    for name in ("SIGTERM", "SIGHUP"):  # stop as Ctrl-C does, from here on
        if hasattr(signal, name):
            signal.signal(getattr(signal, name), stop)
    try:  # a stop signal from here on ends it cleanly, whenever it comes
        threading.Thread(target=_warm_quietly, daemon=True).start()
        _echo(f"crtfilter tune: {image} from preset {start.name}")
        _echo(f"open {server.url}")
        _echo("(a local page: it listens on 127.0.0.1 only; Ctrl-C stops it)")
        sys.stdout.flush()
        if open_browser:
            import webbrowser

            webbrowser.open(server.url)
        server.serve_forever(poll_interval=0.2)
    except KeyboardInterrupt:
        pass
    finally:
        server.server_close()
    saved = ", ".join(str(p) for p in dict.fromkeys(server.saved)) or "nothing"
    _echo(f"crtfilter tune: stopped; saved {saved}", err=True)


def _warm_quietly() -> None:
    """Ready every compiled kernel (loaded from the cache, or compiled once), so that a
    setting that moves a render to another route does not wait for it."""
    from .fast import warm

    warm(quiet=True)


@app.command("compile", cls=_Command)
def compile_kernels():
    """Compile the fast path for this machine now, every route at once.

    crtfilter compiles what a render needs on first use (and says so); this
    does all of it ahead, for CI images and containers. The machine code is
    kept in numba's cache: beside the installed package, or where
    NUMBA_CACHE_DIR points.
    """
    from .fast import warm

    done = warm()
    if not done["available"]:
        _fail("numba is not available here: renders take the slower reference path", 1)
    total = done["compiled"] + done["loaded"]
    what = (f"compiled {done['compiled']} of {total} kernels" if done["compiled"]
            else f"all {total} kernels were compiled already; loaded")
    _echo(f"crtfilter: {what} in {done['seconds']:.1f} s; cache: {done['cache']}")


def main() -> None:
    """Entry point of the console script."""
    try:
        app(prog_name="crtfilter")
    except KeyboardInterrupt:
        _echo("crtfilter: interrupted", err=True)
        sys.exit(130)


if __name__ == "__main__":
    main()
