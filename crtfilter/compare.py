"""Comparison sheets: several presets side by side at 1:1 on one picture."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np

from . import terms
from .audit import mask_contrast, measure_codes
from .capture import parse_crop  # noqa: F401  (the crop parser, named here for compare's callers)
from .errors import SettingsError
from .files import read_image
from .pictures import (SHEET_OVERVIEW, Panel, busiest_region, crop_box, differing_region, overview, sdr_view,
                       sheet_picture, source_structure)
from .engine import render_codes
from .pipeline import reference_codes
from .plan import linearise
from .presets import Preset

#: The automatic crop aims at about this many output pixels at the largest scale.
CROP_TARGET = (420, 315)


def choose_crop(renders: list, linear: np.ndarray | None = None) -> tuple[int, int, int, int]:
    """The region of the source, its 1:1 crop about CROP_TARGET at the largest scale, where
    the renders (:class:`crtfilter.plan.Render`, or (codes, geometry, encoding)) differ
    most (:func:`crtfilter.pictures.differing_region`); the busiest region of
    ``linear`` when their sources differ in size."""
    parts = [(r.codes, r.geometry, r.encoding) if hasattr(r, "codes") else r for r in renders]
    scale = max(g.pic_h / g.src_h for _c, g, _e in parts)
    w = max(4, round(CROP_TARGET[0] / scale))
    h = max(3, round(CROP_TARGET[1] / scale))
    if len({(g.src_w, g.src_h) for _c, g, _e in parts}) > 1 and linear is not None:
        return busiest_region(linear, w, h)
    return differing_region([source_structure(c, g, e) for c, g, e in parts], w, h)


#: Why the crop shows what it shows, for captions.
CROP_REASON = {True: "where these presets differ most", False: "where its mask shows most"}


def _cut(codes: np.ndarray, geometry, crop) -> np.ndarray:
    x, y, w, h = crop_box(geometry, crop)
    return codes[y:y + h, x:x + w]


def compare_sheet(path: str | Path, presets: list[Preset], crop: tuple[int, int, int, int] | None = None,
                  *, on_step: Callable[[], None] | None = None) -> tuple[np.ndarray, dict]:
    """Render ``presets`` on one picture and lay the results out side by side.

    The sheet starts with two references at the first preset's geometry - a
    plain nearest-neighbour upscale, and a plain multiply by the first preset's
    mask - then one panel per preset: a 1:1 crop of the output (the same
    source region for all, ``crop`` or where the presets differ most), a whole-frame
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
    chosen = crop is None
    if chosen:
        crop = choose_crop(renders, source)
    x, y, w, h = crop
    if x + w > g0.src_w or y + h > g0.src_h:
        raise SettingsError(f"crop {x},{y},{w},{h} reaches past the {g0.src_w}x{g0.src_h} source")
    source_y = renders[0].source_luminance

    def ratio(codes, geometry, encoding) -> float | None:
        out = measure_codes(codes, geometry, encoding).luminance
        return out / source_y if source_y > 0 else None

    def kept(value) -> str:
        return f"light kept: {terms.percent(value)}"

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
                            (preset.name, kept(r), f"mask contrast at 18 % grey: {terms.contrast(contrast)}{hdr}")))
        figures.append({"name": preset.name, "ratio": r, "contrast": contrast})
        if on_step:
            on_step()
    why = f", chosen {CROP_REASON[len(presets) > 1]}" if chosen else ""
    title = f"{Path(path).name}: crop {x},{y} {terms.size(w, h)} source px{why}, shown 1:1"
    return sheet_picture(panels, title), {"crop": list(crop), "crop_reason": CROP_REASON[len(presets) > 1]
                                          if chosen else "given", "panels": figures}
