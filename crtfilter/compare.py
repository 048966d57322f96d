"""Comparison sheets: several presets side by side at 1:1 on one picture."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np

from .audit import mask_contrast, measure_codes
from .errors import SettingsError
from .files import read_image
from .pictures import SHEET_OVERVIEW, Panel, busiest_region, crop_box, overview, sdr_view, sheet_picture
from .engine import render_codes
from .pipeline import reference_codes
from .plan import linearise
from .presets import Preset

#: The automatic crop aims at about this many output pixels at the largest scale.
CROP_TARGET = (420, 315)


def parse_crop(text: str) -> tuple[int, int, int, int]:
    """Parse ``"X,Y,W,H"`` (source pixels)."""
    try:
        x, y, w, h = (int(v) for v in str(text).split(","))
    except ValueError:
        raise SettingsError(f"crop must look like X,Y,W,H in source pixels, e.g. 40,60,48,36 (got {text!r})") from None
    if x < 0 or y < 0 or w < 1 or h < 1:
        raise SettingsError(f"crop must have x, y >= 0 and w, h >= 1 (got {text!r})")
    return x, y, w, h


def choose_crop(linear: np.ndarray, scale: float) -> tuple[int, int, int, int]:
    """The busiest region of the source whose 1:1 crop at ``scale`` is about CROP_TARGET."""
    w = max(4, round(CROP_TARGET[0] / scale))
    h = max(3, round(CROP_TARGET[1] / scale))
    return busiest_region(linear, w, h)


def _cut(codes: np.ndarray, geometry, crop) -> np.ndarray:
    x, y, w, h = crop_box(geometry, crop)
    return codes[y:y + h, x:x + w]


def compare_sheet(path: str | Path, presets: list[Preset], crop: tuple[int, int, int, int] | None = None,
                  *, on_step: Callable[[], None] | None = None) -> tuple[np.ndarray, dict]:
    """Render ``presets`` on one picture and lay the results out side by side.

    The sheet starts with two references at the first preset's geometry - a
    plain nearest-neighbour upscale, and a plain multiply by the first preset's
    mask - then one panel per preset: a 1:1 crop of the output (the same
    source region for all, ``crop`` or the busiest one), a whole-frame
    overview averaged in linear light, and the preset's name, light kept and
    mask contrast at 18 % grey.

    Returns
    -------
    sheet : numpy.ndarray
        uint8 (h, w, 3) sRGB.
    figures : dict
        ``crop`` and, per panel, ``name``, ``ratio``, ``contrast``.
    """
    if not presets:
        raise SettingsError("name at least one preset")
    image = read_image(path)
    source = linearise(image.codes, presets[0].settings.decode, image.alpha)
    renders = []
    for preset in presets:
        renders.append(render_codes(image.codes, preset.settings, alpha=image.alpha))
        if on_step:
            on_step()
    g0 = renders[0].geometry
    if crop is None:
        scale = max(r.geometry.pic_h / r.geometry.src_h for r in renders)
        crop = choose_crop(source, scale)
    x, y, w, h = crop
    if x + w > g0.src_w or y + h > g0.src_h:
        raise SettingsError(f"crop {x},{y},{w},{h} reaches past the {g0.src_w}x{g0.src_h} source")
    source_y = renders[0].source_luminance

    def ratio(codes, geometry, encoding) -> float | None:
        out = measure_codes(codes, geometry, encoding).luminance
        return out / source_y if source_y > 0 else None

    def kept(value) -> str:
        return "light kept: n/a (black)" if value is None else f"light kept: {100 * value:.1f} %"

    panels, figures = [], []
    for kind, title in (("nearest", "plain nearest upscale"),
                        ("multiply", f"plain multiply by {presets[0].name}'s mask")):
        codes, g = reference_codes(image.codes, presets[0].settings, kind=kind, alpha=image.alpha)
        enc = renders[0].encoding
        r = ratio(codes, g, enc)
        panels.append(Panel(_cut(sdr_view(codes, enc), g, crop), overview(codes, *SHEET_OVERVIEW, enc),
                            (title, kept(r), "reference: no tone pair")))
        figures.append({"name": title, "ratio": r, "contrast": None})
    for preset, render in zip(presets, renders, strict=True):
        enc = render.encoding
        r = ratio(render.codes, render.geometry, enc)
        contrast = mask_contrast(preset.settings)
        g = render.geometry
        hdr = f"; HDR, headroom {enc.headroom:.1f}, shown clipped at white" if enc.hdr else ""
        panels.append(Panel(_cut(sdr_view(render.codes, enc), g, crop), overview(render.codes, *SHEET_OVERVIEW, enc),
                            (preset.name, kept(r), f"mask contrast at 18 % grey: {contrast:.2f}{hdr}")))
        figures.append({"name": preset.name, "ratio": r, "contrast": contrast})
        if on_step:
            on_step()
    title = f"{Path(path).name}: crop {x},{y} {w}x{h} source px, shown 1:1"
    return sheet_picture(panels, title), {"crop": list(crop), "panels": figures}
