"""One image and a starting preset, as the tuning page works on them.

A *view* is rows of the render, cut to the columns on screen: the fast path
renders only the bands that hold those rows (:func:`crtfilter.engine.render_rows`),
so it comes back in a fraction of a whole frame's time, byte for byte what a file
rendered with the same settings holds there. The *figures* are the whole
frame's: light kept, mask contrast on 18 % and 90 % grey, local error p99, and
the mask cell and the curves to draw. Requests of each kind wait in a
:class:`Newest` queue, which drops a request once a newer one of its kind has come.
"""

from __future__ import annotations

import base64
import io
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import color
from ..audit import grey_code, light_figures, mask_contrast, measure_render, michelson, render_local_energy
from ..engine import render_codes, render_rows
from ..files import DEFAULT_MAX_PIXELS, read_image
from ..presets import Preset
from .controls import preset_from_values

#: The grey levels (linear) whose mask contrast the page shows.
GREYS = {"18": 0.18, "90": 0.90}


class Stale(Exception):
    """A newer request of the same kind came while this one waited: it is dropped."""


class Newest:
    """One request at a time, newest first: a request that is still waiting when a newer
    one of its kind arrives is dropped (:class:`Stale`). A kind is any key: the server
    uses (what, which page), since each page load counts its requests from 1."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._turn = threading.Lock()
        self._newest: dict = {}
        self.dropped = 0

    def run(self, kind, seq: int, work):
        with self._lock:
            if seq < self._newest.get(kind, -1):
                self.dropped += 1
                raise Stale(kind)
            self._newest[kind] = seq
        with self._turn:  # one render at a time: the cores are shared by every kind
            with self._lock:
                if seq < self._newest[kind]:
                    self.dropped += 1
                    raise Stale(kind)
            return work()


@dataclass
class Session:
    """The image the page was started on, and its starting preset."""

    path: Path
    start: Preset
    codes: np.ndarray = field(repr=False)
    alpha: np.ndarray | None = field(repr=False)
    queue: Newest = field(default_factory=Newest, repr=False)
    _last: tuple | None = field(default=None, repr=False)
    _lock: threading.Lock = field(default_factory=threading.Lock, repr=False)

    @classmethod
    def open(cls, path: str | Path, start: Preset, max_pixels: int | None = DEFAULT_MAX_PIXELS) -> Session:
        image = read_image(Path(path), max_pixels=max_pixels)
        return cls(Path(path), start, image.codes, image.alpha)

    def preset(self, values: dict | None) -> Preset:
        return self.start if not values else preset_from_values(self.start, values)

    def _whole(self, settings):
        """The whole frame's render with its figures; the last one is kept, so that the
        figures after a view of the whole frame (glow, kept alpha) do not render it again."""
        with self._lock:
            last = self._last
        if last is not None and last[0] == settings:
            return last[1]
        render = render_codes(self.codes, settings, alpha=self.alpha)
        with self._lock:
            self._last = (settings, render)
        return render

    def view(self, values: dict | None, top: int, bottom: int, left: int, right: int) -> tuple[dict, bytes]:
        """Rows ``top..bottom`` and columns ``left..right`` of the render, as 8-bit RGBA
        (16-bit output shown by its high byte: HDR as its PQ codes).

        Returns the part's place and the output's size, and its bytes.
        """
        settings = self.preset(values).settings
        started = time.perf_counter()
        if settings.glow.on or self.alpha is not None:  # the whole frame, kept for the figures
            codes = self._whole(settings).codes
        else:
            codes = render_rows(self.codes, settings, max(0, top), max(0, bottom))
        out_h, out_w = codes.shape[:2]
        top, bottom = max(0, min(top, out_h)), max(0, min(bottom, out_h))
        left, right = max(0, min(left, out_w)), max(0, min(right, out_w))
        part = codes[top:bottom, left:right]
        if part.dtype == np.uint16:
            part = (part >> 8).astype(np.uint8)
        rgba = np.empty(part.shape[:2] + (4,), np.uint8)
        rgba[..., :3] = part[..., :3]
        rgba[..., 3] = part[..., 3] if part.shape[2] == 4 else 255
        head = {"width": out_w, "height": out_h, "top": top, "left": left,
                "rows": bottom - top, "columns": right - left,
                "ms": round((time.perf_counter() - started) * 1000, 1)}
        return head, rgba.tobytes()

    def figures(self, values: dict | None) -> dict:
        """The whole frame's figures, and the mask cell and curves to draw."""
        from ..pictures import mask_preview
        from ..plots import curve_data

        preset = self.preset(values)
        settings = preset.settings
        started = time.perf_counter()
        render = self._whole(settings)
        light = light_figures(render.source_luminance, measure_render(render),
                              render.plain_multiply_luminance, render.source_channels,
                              render.encoding)["luminance"]
        source = (render.geometry.src_w, render.geometry.src_h)
        local = render_local_energy(render)
        contrast = {name: grey_field_contrast(settings, source, grey_code(level)) for name, level in GREYS.items()}
        from PIL import Image

        png = io.BytesIO()
        Image.fromarray(mask_preview(render.mask, zoom=8)).save(png, format="PNG", compress_level=1)
        g = render.geometry
        return {
            "output": [g.out_w, g.out_h], "picture": [g.pic_x, g.pic_y, g.pic_w, g.pic_h],
            "source": list(source), "cell": list(render.mask.cell),
            "light_kept": light["ratio"], "target": light["target"],
            "plain_multiply": light["plain_multiply_ratio"],
            "contrast_18": contrast["18"], "contrast_90": contrast["90"],
            "local_p99": local.p99 if local.measured > 0 else None,
            "mask_mean": [float(m) for m in render.mask.mean],
            "curves": curve_data(render.pairs, samples=129),
            "mask_png": "data:image/png;base64," + base64.b64encode(png.getvalue()).decode("ascii"),
            "route": render.route, "warnings": list(render.warnings),
            "ms": round((time.perf_counter() - started) * 1000, 1),
        }


def grey_field_contrast(settings, source: tuple[int, int], code: int) -> float:
    """:func:`crtfilter.audit.mask_contrast` on a uniform field of ``code``, taken from the
    field's first cell row as the fast path renders it (every cell row of a uniform field
    is alike): the same figure, in a few milliseconds where the reference rounding that
    holds each cell's light would take a second. With glow, the whole field
    (``mask_contrast`` itself: glow spreads light over many cells)."""
    if settings.glow.on:
        return mask_contrast(settings, source, code=code)
    from ..plan import plan_render

    plan = plan_render(settings, *source)
    g, rows = plan.geometry, plan.cell[0]
    field = np.full((source[1], source[0], 3), code, np.uint8)
    codes = render_rows(field, settings, g.pic_y, g.pic_y + rows)
    picture = plan.encoding.decode(codes[g.pic_y:g.pic_y + rows, g.pic_x:g.pic_x + g.pic_w, :3])
    return michelson(color.luminance(picture, plan.encoding.luma))
