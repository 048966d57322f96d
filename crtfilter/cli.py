"""The ``crtfilter`` command: parses, calls and prints. No computation lives here."""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Optional

import typer

from . import DEFAULT_PRESET, __version__

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    rich_markup_mode=None,
    help=(
        "Turn low-resolution frames into high-resolution stills with scanlines and a "
        "phosphor mask, holding the picture's mean brightness, and measure that it was held."
    ),
)
presets_app = typer.Typer(
    add_completion=False,
    invoke_without_command=True,
    help="List the shipped presets, or show one in full.",
)
app.add_typer(presets_app, name="presets")


def _fail(message: str, code: int = 2) -> None:
    typer.echo(f"crtfilter: error: {message}", err=True)
    raise typer.Exit(code)


def _version(value: bool):
    if value:
        typer.echo(f"crtfilter {__version__}")
        raise typer.Exit()


@app.callback()
def _main(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                 help="Print the version and exit."),
):
    pass


def _percent(ratio: float | None) -> str:
    return "n/a (black input)" if ratio is None else f"{100 * ratio:.2f} %"


@app.command()
def render(
    inputs: list[Path] = typer.Argument(..., metavar="INPUT...",
                                        help="Image files or folders of images."),
    out: Path = typer.Option(..., "-o", "--out",
                             help="Output .png for one input file, otherwise a folder."),
    preset: str = typer.Option(DEFAULT_PRESET, "--preset", "-p",
                               help="Shipped preset name or path to a preset .toml file."),
    scale: Optional[float] = typer.Option(None, "--scale",
                                          help="Output rows per source line (replaces the preset's fit)."),
    size: Optional[str] = typer.Option(None, "--size", metavar="WxH",
                                       help="Exact output size; the picture is fitted inside, centred on black."),
    pixel_aspect: Optional[str] = typer.Option(None, "--pixel-aspect", metavar="W:H",
                                               help="Shape of one source pixel on the original display, e.g. 8:7."),
    display_aspect: Optional[str] = typer.Option(None, "--display-aspect", metavar="W:H",
                                                 help="Shape of the whole original picture, e.g. 4:3."),
    transfer: Optional[str] = typer.Option(None, "--transfer", metavar="NAME",
                                           help="Source transfer function: srgb, gamma-2.2 or bt1886."),
    depth: Optional[int] = typer.Option(None, "--depth", metavar="BITS",
                                        help="Output bits per sample: 8 or 16."),
    dither: Optional[str] = typer.Option(None, "--dither", metavar="KIND",
                                         help="8-bit rounding: none, ordered or noise (keeps smooth ramps "
                                              "free of bands, and the mean where it was)."),
    energy_map: Optional[Path] = typer.Option(None, "--energy-map", metavar="PATH",
                                              help="Also draw where light was gained or lost, per mask cell: "
                                                   "a .png for one input, else a folder."),
    report: Optional[Path] = typer.Option(None, "--report", metavar="FILE.json",
                                          help="Write a JSON array with one object per image."),
    force: bool = typer.Option(False, "--force", help="Replace existing outputs (never an input)."),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="Print only the summary and errors."),
):
    """Render images with a preset and say how much light each kept.

    One line per image gives the output's mean luminance as a share of the
    input's (measured from the written file), and what a plain multiply by the
    same mask would have kept. Exit status: 0 all rendered, 1 some failed,
    2 bad usage or a single input that failed.
    """
    from .errors import CrtfilterError
    from .files import write_atomic
    from .job import energy_map_paths, plan_outputs, render_batch

    if scale is not None and size is not None:
        _fail("give --scale or --size, not both")
    try:
        plan = plan_outputs(inputs, out)
    except CrtfilterError as exc:
        _fail(str(exc))
    if not plan.pairs:
        _fail(f"no images found in {', '.join(map(str, inputs))}")

    def done(src, rep, error):
        if error is not None:
            typer.echo(f"crtfilter: error: {error}", err=True)
        elif not quiet:
            lum = rep["luminance"]
            w, h = rep["geometry"]["output"]
            typer.echo(f"{src} -> {rep['output']}  {w}x{h}  light kept {_percent(lum['ratio'])}"
                       f"  (plain multiply: {_percent(lum['plain_multiply_ratio'])})")

    try:
        maps = energy_map_paths(plan, out, energy_map) if energy_map is not None else None
        result = render_batch(plan, preset=preset, force=force, on_done=done, energy_maps=maps,
                              size=size, scale=scale, pixel_aspect=pixel_aspect,
                              display_aspect=display_aspect, transfer=transfer, depth=depth,
                              dither=dither)
    except CrtfilterError as exc:
        _fail(str(exc))
    if report is not None:
        write_atomic(report, (json.dumps(result.reports, indent=2) + "\n").encode())
    single = len(plan.pairs) == 1
    if not single or result.skipped:
        line = f"{len(result.reports)} rendered, {len(result.failures)} failed"
        if result.skipped:
            line += f", {len(result.skipped)} skipped (not images by their ending)"
        typer.echo(line)
        for _path, why in result.failures:
            typer.echo(f"  failed: {why}", err=True)
    if result.failures:
        raise typer.Exit(2 if single else 1)


@presets_app.callback()
def presets(
    ctx: typer.Context,
    as_json: bool = typer.Option(False, "--json", help="Print a JSON array instead of a table."),
):
    """List the shipped presets: name, description, mask, mask mean and visibility."""
    if ctx.invoked_subcommand is not None:
        return
    from .audit import REFERENCE_GREY, REFERENCE_SOURCE, preset_figures
    from .errors import CrtfilterError
    from .presets import all_presets, settings_dict

    try:
        rows = []
        for p in all_presets():
            figures = preset_figures(p.settings)
            rows.append({"name": p.name, "description": p.description,
                         "mask": p.settings.mask.phosphor,
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
    table = Table(title=f"Presets (figures for a {w}x{h} source; contrast at {REFERENCE_GREY:.0%} grey, green)")
    for col in ("name", "mask", "output", "mask mean R G B", "contrast", "description"):
        table.add_column(col, overflow="fold")
    for r in rows:
        mask = r["mask"] + (" + scanlines" if r["scanlines"] else "")
        table.add_row(r["name"] + (" (default)" if r["default"] else ""), mask,
                      "x".join(map(str, r["output"])),
                      " ".join(f"{m:.3f}" for m in r["mask_mean"]),
                      f"{r['contrast_grey']:.2f}", r["description"])
    Console(width=max(120, Console().width)).print(table)


@presets_app.command("show")
def presets_show(
    name: str = typer.Argument(..., help="Preset name or path to a preset .toml file."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON instead of text."),
):
    """Print a preset's resolved settings and the curves the solver chose."""
    from .audit import REFERENCE_SOURCE, preset_figures
    from .errors import CrtfilterError
    from .presets import load_preset, settings_dict

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
    typer.echo(f"{p.name}: {p.description}")
    typer.echo(f"file: {p.path}")
    for table, values in data["settings"].items():
        typer.echo(f"[{table}]")
        for key, value in values.items():
            typer.echo(f"  {key} = {json.dumps(value)}")
    w, h = REFERENCE_SOURCE
    typer.echo(f"for a {w}x{h} source: output {figures['output'][0]}x{figures['output'][1]}, "
               f"mask cell {figures['cell'][0]}x{figures['cell'][1]} px (rows x columns)")
    for ch, mean, curve in zip("RGB", figures["mask_mean"], figures["curves"], strict=True):
        typer.echo(f"  {ch}: mask mean {mean:.4f}; {curve}")
    typer.echo(f"  contrast at 18 % grey: green {figures['contrast_grey']:.3f}, "
               f"luminance {figures['contrast_grey_luminance']:.3f}")


def main() -> None:
    """Entry point of the console script."""
    try:
        app(prog_name="crtfilter")
    except KeyboardInterrupt:
        typer.echo("crtfilter: interrupted", err=True)
        sys.exit(130)


if __name__ == "__main__":
    main()
