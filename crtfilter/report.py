"""A static HTML report: presets side by side on a folder of images, with their figures.

Everything it needs sits in the output folder (pictures, plots, one HTML file
with its own CSS and a little JavaScript); nothing is fetched from a network.
"""

from __future__ import annotations

import html
import json
from collections.abc import Callable
from pathlib import Path

from . import __version__, terms
from .audit import REFERENCE_SOURCE, mask_contrast
from .compare import CROP_REASON, choose_crop
from .errors import InputError, SettingsError
from .files import encode_png, read_image, read_png_codes
from .job import render_file
from .masks import build_mask
from .pictures import crop_box, overview, sdr_view
from .plan import linearise
from .presets import Preset
from .scale import Geometry, plan_geometry
from .tone import solve_channels
from .writes import WritePlan, slug, unique_names, unique_stems

THUMB = (320, 240)

_CSS = """
body { font: 15px/1.45 system-ui, sans-serif; margin: 0 auto; max-width: 1500px; padding: 1em 2em;
       background: #1c1c20; color: #e8e8e8; }
a { color: #8ab4f8; }
h1 { font-size: 1.6em; margin-bottom: .2em; } h2 { margin-top: 2em; border-bottom: 1px solid #444; }
table { border-collapse: collapse; margin: .8em 0; }
th, td { padding: .35em .7em; border-bottom: 1px solid #333; text-align: left; vertical-align: middle; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
img.thumb { display: block; width: 160px; height: auto; image-rendering: auto; }
.presets { display: flex; flex-wrap: wrap; gap: 1em; }
.preset { background: #26262b; padding: .8em; border-radius: 6px; width: 440px; }
.preset img { width: 100%; height: auto; background: #fff; }
.toggle { background: #26262b; padding: .8em; border-radius: 6px; display: inline-block; }
.toggle img.crop { display: block; image-rendering: pixelated; margin-top: .6em; }
.toggle .shown { font-weight: bold; margin-left: .6em; }
.note { color: #aaa; font-size: .9em; }
"""

_SCRIPT = """
document.querySelectorAll('.toggle').forEach(function (box) {
  var crops = JSON.parse(box.dataset.crops);
  var a = box.querySelector('select.a'), b = box.querySelector('select.b');
  var img = box.querySelector('img.crop'), shown = box.querySelector('.shown');
  var button = box.querySelector('button');
  var which = 'a';
  function label(select) { return select.options[select.selectedIndex].text; }
  function show() {
    var on = which === 'a' ? a : b, off = which === 'a' ? b : a;
    img.src = crops[on.value];
    img.alt = '1:1 crop, ' + label(on);
    shown.textContent = label(on);
    button.textContent = 'show ' + label(off);
  }
  button.addEventListener('click', function () { which = which === 'a' ? 'b' : 'a'; show(); });
  a.addEventListener('change', function () { which = 'a'; show(); });
  b.addEventListener('change', function () { which = 'b'; show(); });
  show();
});
"""


def _percent(value: float | None) -> str:
    return "n/a" if value is None else terms.percent(value)


def is_report_folder(folder: str | Path) -> bool:
    """True when ``folder`` holds a report this tool wrote (its index.html says so)."""
    index = Path(folder) / "index.html"
    try:
        with open(index, "rb") as f:
            head = f.read(4096)
    except OSError:
        return False
    return b'<meta name="generator" content="crtfilter' in head


def build_report(presets: list[Preset], images: list[Path], out: str | Path, *, force: bool = False,
                 on_step: Callable[[], None] | None = None) -> Path:
    """Render every preset on every image into ``out`` and write ``out/index.html``.

    Per image: a thumbnail per preset linking to the full-size output, the
    figures (light kept, local error, mask contrast at 18 % grey), the energy
    map, and a 1:1 crop where the first two presets differ most, with a toggle between two
    presets. Per preset: its curve plot. Every file is planned before any
    work: ``out`` must be new, empty, or (with ``force``) a report written
    before, and nothing in it may be one of the images. Presets of the same
    name get folders of their own (``look``, ``look-2``).

    Returns
    -------
    Path
        The HTML file.

    Raises
    ------
    InputError
        When ``out`` exists and holds something else, or exists without
        ``force``, or a planned file would be one of the images.
    """
    from .plots import plot_curves

    if not presets:
        raise SettingsError("name at least one preset")
    if not images:
        raise SettingsError("no images to report on")
    out = Path(out)
    writes = WritePlan(force=force)
    writes.protect(*images)
    writes.add_folder(out, "report folder")
    if out.is_dir() and any(out.iterdir()):
        if not is_report_folder(out):
            raise InputError(f"{out}: holds files that are not a crtfilter report (choose a new or empty folder)")
        if not force:
            raise InputError(f"{out}: exists (use --force to replace the report in it)")
    folders = unique_names([slug(p.name) for p in presets])
    stems = unique_stems(images)
    plots = [f"curves/{folder}.png" for folder in folders]
    for plot in plots:
        writes.add(out / plot, "curve plot")
    for image_path, stem in zip(images, stems, strict=True):
        for folder in folders:
            for kind, rel in (("render", f"renders/{folder}/{stem}.png"), ("energy map", f"maps/{folder}/{stem}-energy.png"),
                              ("thumbnail", f"thumbs/{folder}/{stem}.png"), ("crop", f"crops/{folder}/{stem}.png")):
                writes.add(out / rel, f"{kind} of {image_path}")
    index = writes.add(out / "index.html", "page")
    preset_rows = []
    for preset, plot in zip(presets, plots, strict=True):
        geometry = plan_geometry(*REFERENCE_SOURCE, preset.settings.picture_geometry)
        pairs = solve_channels(build_mask(geometry, preset.settings.mask).mean, preset.settings.tone,
                               headroom=preset.settings.encoding.headroom)
        plot_curves(pairs, out / plot, title=f"{preset.name}: lift and cut curves", write=writes.write)
        preset_rows.append((preset, plot, mask_contrast(preset.settings)))
    sections = []
    for image_path, stem in zip(images, stems, strict=True):
        image = read_image(image_path)
        rows, crops, rendered = [], {}, []
        for (preset, _plot, contrast), folder in zip(preset_rows, folders, strict=True):
            full = f"renders/{folder}/{stem}.png"
            energy = f"maps/{folder}/{stem}-energy.png"
            report = render_file(image_path, out / full, preset=preset, force=force, energy_map=out / energy)
            codes = read_png_codes(out / full)
            g = Geometry(*report["geometry"]["source"], *report["geometry"]["output"],
                         *report["geometry"]["picture"])
            rendered.append((codes, g, preset.settings.encoding))
            rows.append((preset, report, contrast, full, f"thumbs/{folder}/{stem}.png", energy))
            if on_step:
                on_step()
        # the A/B crop shows where the first two presets differ most (one preset: where its mask shows most)
        crop = choose_crop(rendered[:2], linearise(image.codes, preset_rows[0][0].settings.decode, image.alpha))
        for (preset, _report, _contrast, _full, thumb, _energy), (codes, g, enc), folder in zip(
                rows, rendered, folders, strict=True):
            writes.write(out / thumb, encode_png(overview(codes, *THUMB, enc)))
            x, y, w, h = crop_box(g, crop)
            crop_file = f"crops/{folder}/{stem}.png"
            writes.write(out / crop_file, encode_png(sdr_view(codes[y:y + h, x:x + w], enc)))
            crops[folder] = (preset.name, crop_file)
        sections.append(_image_section(image_path, stem, rows, crops, crop))
    page = _page(preset_rows, sections, len(images))
    writes.write(index, page.encode("utf-8"))
    return index


def _image_section(path: Path, stem: str, rows, crops: dict, crop) -> str:
    e = html.escape
    body = []
    for preset, report, contrast, full, thumb, energy in rows:
        lum, local = report["luminance"], report["local"]
        body.append(
            f"<tr><td>{e(preset.name)}</td>"
            f'<td><a href="{e(full)}"><img class="thumb" src="{e(thumb)}" alt="{e(preset.name)} on {e(path.name)}"></a></td>'
            f'<td class="num">{_percent(lum["ratio"])}</td>'
            f'<td class="num">{_percent(lum["plain_multiply_ratio"])}</td>'
            f'<td class="num">{_percent(local["p50"])} / {_percent(local["p99"])} / {_percent(local["max"])}</td>'
            f'<td class="num">{terms.contrast(contrast)}</td>'
            f'<td><a href="{e(energy)}"><img class="thumb" src="{e(energy)}" alt="energy map"></a></td></tr>')
    names = list(crops)  # folder names: distinct even where two presets share a name
    labels = {k: name if k == slug(name) else f"{name} ({k})" for k, (name, _file) in crops.items()}

    def options(chosen: int) -> str:
        return "".join(f'<option value="{e(k)}"{" selected" if i == chosen else ""}>{e(labels[k])}</option>'
                       for i, k in enumerate(names))

    options_a, options_b = options(0), options(min(1, len(names) - 1))
    files = {k: f for k, (_name, f) in crops.items()}
    x, y, w, h = crop
    why = CROP_REASON[len(names) > 1] if len(names) <= 2 else "where the first two presets differ most"
    return f"""
<section class="image" id="{e(stem)}">
<h2>{e(stem if stem != slug(path.stem) else path.name)}</h2>
<table>
<tr><th>preset</th><th>output (click for full size)</th><th>light kept</th><th>plain multiply would keep</th>
<th>local error p50 / p99 / max</th><th>mask contrast at 18 % grey</th><th>energy map</th></tr>
{"".join(body)}
</table>
<div class="toggle" data-crops="{e(json.dumps(files))}">
<label>A <select class="a">{options_a}</select></label>
<label>B <select class="b">{options_b}</select></label>
<button type="button">show B</button><span class="shown"></span>
<div class="note">1:1 crop of source pixels {x},{y} {terms.size(w, h)}, chosen {e(why)}; view the page at
100 % zoom.</div>
<img class="crop" src="{e(files[names[0]])}" alt="1:1 crop">
</div>
</section>"""


def _page(preset_rows, sections: list[str], n_images: int) -> str:
    e = html.escape
    cards = "".join(
        f'<div class="preset"><h3>{e(p.name)}</h3><p>{e(p.description)}</p>'
        f"<p>mask contrast at 18 % grey: {contrast:.3f}</p>"
        f'<a href="{e(plot)}"><img src="{e(plot)}" alt="curves of {e(p.name)}"></a></div>'
        for p, plot, contrast in preset_rows)
    return f"""<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta name="generator" content="crtfilter {e(__version__)}">
<title>crtfilter report</title>
<style>{_CSS}</style>
</head>
<body>
<h1>crtfilter report</h1>
<p class="note">{len(preset_rows)} presets on {n_images} images, crtfilter {e(__version__)}.
Light kept is the output's mean luminance over the input's, measured from the written files;
local error compares them over each mask cell.</p>
<h2>Presets and their curves</h2>
<div class="presets">{cards}</div>
{"".join(sections)}
<script>{_SCRIPT}</script>
</body>
</html>
"""
