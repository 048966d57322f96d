"""A static HTML report: presets side by side on a folder of images, with their figures.

Everything it needs sits in the output folder (pictures, plots, one HTML file
with its own CSS and a little JavaScript); nothing is fetched from a network.
"""

from __future__ import annotations

import html
import json
from collections.abc import Callable
from pathlib import Path

from . import __version__
from .audit import REFERENCE_SOURCE, grey_field_contrast
from .compare import choose_crop
from .errors import SettingsError
from .files import encode_png, read_image, read_png_codes, write_atomic
from .job import render_file
from .masks import build_mask
from .pictures import crop_box, overview, sdr_view
from .plan import linearise
from .presets import Preset
from .scale import Geometry, plan_geometry
from .tone import solve_channels

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
  function show() {
    var name = which === 'a' ? a.value : b.value;
    img.src = crops[name];
    img.alt = '1:1 crop, ' + name;
    shown.textContent = name;
    button.textContent = 'show ' + (which === 'a' ? b.value : a.value);
  }
  button.addEventListener('click', function () { which = which === 'a' ? 'b' : 'a'; show(); });
  a.addEventListener('change', function () { which = 'a'; show(); });
  b.addEventListener('change', function () { which = 'b'; show(); });
  show();
});
"""


def _slug(text: str) -> str:
    return "".join(c if c.isalnum() or c in "-_" else "-" for c in text)


def _unique_stems(images: list[Path]) -> list[str]:
    """A distinct file-name stem per image: its path below the images' common folder, as a slug."""
    import os

    root = Path(os.path.commonpath([str(p.resolve().parent) for p in images]))
    stems, seen = [], set()
    for p in images:
        rel = p.resolve().relative_to(root).with_suffix("")
        stem = _slug("-".join(rel.parts))
        base, n = stem, 2
        while stem in seen:  # names that the slug made equal
            stem, n = f"{base}-{n}", n + 1
        seen.add(stem)
        stems.append(stem)
    return stems


def _percent(value: float | None, digits: int = 2) -> str:
    return "n/a" if value is None else f"{100 * value:.{digits}f} %"


def build_report(presets: list[Preset], images: list[Path], out: str | Path, *,
                 on_step: Callable[[], None] | None = None) -> Path:
    """Render every preset on every image into ``out`` and write ``out/index.html``.

    Per image: a thumbnail per preset linking to the full-size output, the
    figures (light kept, local error, mask contrast at 18 % grey), the energy
    map, and a 1:1 crop of the busiest region with a toggle between two
    presets. Per preset: its curve plot.

    Returns
    -------
    Path
        The HTML file.
    """
    from .plots import plot_curves

    if not presets:
        raise SettingsError("name at least one preset")
    if not images:
        raise SettingsError("no images to report on")
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    (out / "curves").mkdir(exist_ok=True)
    preset_rows = []
    for preset in presets:
        geometry = plan_geometry(*REFERENCE_SOURCE, preset.settings.geometry)
        pairs = solve_channels(build_mask(geometry, preset.settings.mask).mean, preset.settings.tone,
                               headroom=preset.settings.encoding.headroom)
        plot = f"curves/{_slug(preset.name)}.png"
        plot_curves(pairs, out / plot, title=f"{preset.name}: lift and cut curves")
        preset_rows.append((preset, plot, grey_field_contrast(preset.settings)))
    sections = []
    for image_path, stem in zip(images, _unique_stems(images), strict=True):
        image = read_image(image_path)
        rows, crops = [], {}
        crop = None
        for preset, _plot, contrast in preset_rows:
            folder = _slug(preset.name)
            full = f"renders/{folder}/{stem}.png"
            energy = f"maps/{folder}/{stem}-energy.png"
            for sub in (full, energy):
                (out / sub).parent.mkdir(parents=True, exist_ok=True)
            report = render_file(image_path, out / full, preset=preset, force=True, energy_map=out / energy)
            codes = read_png_codes(out / full)
            g = Geometry(*report["geometry"]["source"], *report["geometry"]["output"],
                         *report["geometry"]["picture"])
            if crop is None:
                source = linearise(image.codes, preset.settings.decode, image.alpha)
                crop = choose_crop(source, g.pic_h / g.src_h)
            thumb = f"thumbs/{folder}/{stem}.png"
            (out / thumb).parent.mkdir(parents=True, exist_ok=True)
            enc = preset.settings.encoding
            write_atomic(out / thumb, encode_png(overview(codes, *THUMB, enc)))
            x, y, w, h = crop_box(g, crop)
            crop_file = f"crops/{folder}/{stem}.png"
            (out / crop_file).parent.mkdir(parents=True, exist_ok=True)
            write_atomic(out / crop_file, encode_png(sdr_view(codes[y:y + h, x:x + w], enc)))
            crops[preset.name] = crop_file
            rows.append((preset, report, contrast, full, thumb, energy))
            if on_step:
                on_step()
        sections.append(_image_section(image_path, stem, rows, crops, crop))
    page = _page(preset_rows, sections, len(images))
    index = out / "index.html"
    write_atomic(index, page.encode("utf-8"))
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
            f'<td class="num">{_percent(lum["plain_multiply_ratio"], 1)}</td>'
            f'<td class="num">{_percent(local["p50"])} / {_percent(local["p99"])} / {_percent(local["max"])}</td>'
            f'<td class="num">{contrast:.3f}</td>'
            f'<td><a href="{e(energy)}"><img class="thumb" src="{e(energy)}" alt="energy map"></a></td></tr>')
    names = list(crops)
    options_a = "".join(f'<option{" selected" if i == 0 else ""}>{e(n)}</option>' for i, n in enumerate(names))
    options_b = "".join(f'<option{" selected" if i == min(1, len(names) - 1) else ""}>{e(n)}</option>'
                        for i, n in enumerate(names))
    x, y, w, h = crop
    return f"""
<section class="image" id="{e(stem)}">
<h2>{e(stem if stem != _slug(path.stem) else path.name)}</h2>
<table>
<tr><th>preset</th><th>output (click for full size)</th><th>light kept</th><th>plain multiply would keep</th>
<th>local error p50 / p99 / max</th><th>mask contrast, 18 % grey</th><th>energy map</th></tr>
{"".join(body)}
</table>
<div class="toggle" data-crops="{e(json.dumps(crops))}">
<label>A <select class="a">{options_a}</select></label>
<label>B <select class="b">{options_b}</select></label>
<button type="button">show B</button><span class="shown"></span>
<div class="note">1:1 crop of source pixels {x},{y} {w}x{h}; view the page at 100 % zoom.</div>
<img class="crop" src="{e(crops[names[0]])}" alt="1:1 crop">
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
