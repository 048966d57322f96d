"""Measurements: how much light a render held, and how visible its mask is.

All figures are relative luminance Y = 0.2126 R + 0.7152 G + 0.0722 B of
linear values (ITU-R BT.709 primaries, D65), accumulated in float64. The
output is measured from the written file's bytes, decoded back to linear
light, over the picture area (borders, if any, are left out and said so).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from . import color
from .masks import Mask
from .plan import mask_weights
from .scale import Geometry, whole_cell_sums
from .tone import TonePair

#: The grey level (linear) at which mask visibility is quoted.
REFERENCE_GREY = 0.18


@dataclass(frozen=True)
class Measured:
    """Mean light of an sRGB-encoded picture.

    Attributes
    ----------
    luminance : float
        Mean relative luminance over the picture area, linear.
    channels : tuple of float
        Mean linear R, G, B over the picture area.
    frame_luminance : float
        Mean relative luminance over the whole frame, borders included.
    """

    luminance: float
    channels: tuple[float, float, float]
    frame_luminance: float


def measure_codes(codes: np.ndarray, geometry: Geometry | None = None,
                  encoding: color.Encoding = color.Encoding()) -> Measured:
    """Measure encoded code values (uint8 or uint16, shape (H, W, 3+)).

    ``encoding`` says how to decode them: sRGB (default) or PQ, whose values
    come back relative to the reference white, with the primaries' own
    luminance coefficients.

    Returns
    -------
    Measured
    """
    # Counting the codes and weighting each by its light is exact and needs no
    # full-size float array.
    table = encoding.table(16 if codes.dtype == np.uint16 else 8)

    def channel_sums(block: np.ndarray) -> np.ndarray:
        from .fast import code_histograms

        return code_histograms(block) @ table

    if geometry is None:
        pic = codes
    else:
        g = geometry
        pic = codes[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w]
    channels = channel_sums(pic) / (pic.shape[0] * pic.shape[1])
    luminance = float(channels @ encoding.luma)
    if pic.shape[:2] == codes.shape[:2]:
        frame = luminance
    else:
        frame = float(channel_sums(codes) @ encoding.luma) / (codes.shape[0] * codes.shape[1])
    return Measured(luminance=luminance, channels=tuple(float(c) for c in channels), frame_luminance=frame)


def measure_render(render) -> Measured:
    """:func:`measure_codes` of a render's output, from what its route measured on the way if it did."""
    enc = render.encoding
    n = render.geometry.pic_w * render.geometry.pic_h
    if render.code_counts is not None:
        channels = render.code_counts @ enc.table(8 if render.code_counts.shape[1] == 256 else 16) / n
    elif render.output_channel_sums is not None:
        channels = render.output_channel_sums / n
    else:
        return measure_codes(render.codes, render.geometry, enc)
    luminance = float(channels @ enc.luma)
    g = render.geometry
    if (g.out_w, g.out_h) == (g.pic_w, g.pic_h):
        frame = luminance
    else:  # the borders are black: the frame holds the same light over more pixels
        frame = luminance * n / (g.out_w * g.out_h)
    return Measured(luminance=luminance, channels=tuple(float(c) for c in channels), frame_luminance=frame)


def light_levels(codes: np.ndarray, geometry: Geometry, encoding: color.Encoding) -> tuple[float, float]:
    """MaxCLL and MaxFALL of an HDR picture, in cd/m².

    MaxCLL is the brightest pixel's brightest component; MaxFALL the mean over
    the frame of each pixel's brightest component (one frame here).
    """
    from .fast import brightest_code_counts

    g = geometry
    picture = codes[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w, :3]
    # PQ rises with the code, so a pixel's brightest component is its largest code:
    # counting those is exact and needs no full-size float array
    counts = brightest_code_counts(picture)
    nits = encoding.table(16) * encoding.reference_white
    used = np.flatnonzero(counts)
    # the frame's mean includes its black borders, as a display would show them
    area = g.out_w * g.out_h
    return float(nits[used[-1]]) if used.size else 0.0, float(counts @ nits / area)


def michelson(values: np.ndarray, low: float = 1.0, high: float = 99.0) -> float:
    """Return (p_high - p_low) / (p_high + p_low) of the values, 0 for an all-black set.

    Percentiles instead of the extremes keep a stray pixel from deciding it. They are
    taken without interpolation (the inverted distribution function), so one period
    cell of a repeating pattern gives the same figure as any whole number of cells.
    """
    lo, hi = np.percentile(np.asarray(values, dtype=np.float64), [low, high], method="inverted_cdf")
    return float((hi - lo) / (hi + lo)) if hi + lo > 0 else 0.0


def grey_contrast(mask: Mask, pairs: tuple[TonePair, ...], level: float = REFERENCE_GREY,
                  *, channel: int | None = 1, depth: int = 8,
                  encoding: color.Encoding = color.Encoding(), hold: bool = False,
                  width: int | None = None, run: int = 1) -> float:
    """Mask visibility on a uniform grey field, as the output file would show it.

    One period cell of the mask is rendered at linear grey ``level``, encoded
    to ``depth`` bits (``hold``: with each cell's light held, as
    :mod:`crtfilter.rounding` does, carried on over runs of ``run`` cells) and
    decoded back, and the Michelson contrast (p1 to p99) is taken of one channel
    (``channel`` 0, 1, 2) or of luminance (None). ``width``: a strip of one cell
    row that many columns wide instead of one cell (where held light is carried
    along the row, cells of a row differ; every cell row of a grey field is alike).

    Returns
    -------
    float
        In [0, 1].
    """
    rows, cols = mask.cell
    m = mask.pixels(rows=slice(0, rows), columns=slice(0, width or cols))
    k = mask_weights(m, mask.mean)
    x = np.full(m.shape, level, np.float32)
    y = np.empty_like(x)
    for c, pair in enumerate(pairs):
        y[..., c] = pair.apply(x[..., c], k[..., c])
    y *= np.float32(encoding.gain)  # a light share's headroom, under display white
    codes = encoding.encode(y, depth)
    if hold:  # as a render rounds it
        from .rounding import hold_cell_light

        codes = hold_cell_light(y, codes, encoding.table(depth), (rows, cols), run=run)
    back = encoding.decode(codes)
    values = color.luminance(back, encoding.luma) if channel is None else back[..., channel]
    return michelson(values)


def light_figures(source_luminance: float, output: Measured, plain_multiply_luminance: float,
                  source_channels: np.ndarray, encoding: color.Encoding = color.Encoding()) -> dict:
    """The report's ``luminance`` and ``channels`` entries.

    Returns
    -------
    dict
        ``{"luminance": {"input", "output", "ratio", "target", "plain_multiply_ratio"},
        "channels": {"input": [r, g, b], "output": [r, g, b]}}``; ratios are
        None where the input is black; ``target`` is the light kept the render
        aims for (1, or a light share below it). Luminance is relative (input white = 1);
        for HDR output ``input_nits`` and ``output_nits`` give it in cd/m².
    """
    def ratio(a: float) -> float | None:
        return a / source_luminance if source_luminance > 0 else None

    light = {
        "input": source_luminance,
        "output": output.luminance,
        "ratio": ratio(output.luminance),
        "target": encoding.gain,
        "plain_multiply_ratio": ratio(plain_multiply_luminance),
    }
    if encoding.hdr:
        light["input_nits"] = source_luminance * encoding.reference_white
        light["output_nits"] = output.luminance * encoding.reference_white
    return {
        "luminance": light,
        "channels": {
            "input": [float(c) for c in source_channels],
            "output": list(output.channels),
        },
    }


#: The source size at which a preset's mask figures are quoted in listings.
REFERENCE_SOURCE = (320, 240)

#: Source sizes whose output size preset listings give: a 256- and a 320-pixel-wide
#: frame of the kind games drew, and a 640x480 one (common practice, no source).
COMMON_SOURCES = ("256x224", "320x240", "640x480")


def output_size(settings, width: int, height: int) -> tuple[int, int]:
    """The output size a preset gives a source of ``width`` x ``height``."""
    from .scale import plan_geometry

    g = plan_geometry(width, height, settings.picture_geometry)
    return g.out_w, g.out_h


def preset_figures(settings, source: tuple[int, int] = REFERENCE_SOURCE) -> dict:
    """A preset's mask and curve figures for a source of the given size.

    Parameters
    ----------
    settings : crtfilter.plan.Settings
    source : (width, height)

    Returns
    -------
    dict
        ``output`` [w, h], ``mask_mean`` [r, g, b], ``cell`` [rows, columns],
        ``curves`` (one description per channel), ``slope`` and ``degree``
        (0 for families without one) per channel, and
        ``contrast`` (:func:`mask_contrast`, luminance) and ``contrast_green``
        (the green channel's).
    """
    from .masks import build_mask
    from .scale import plan_geometry
    from .tone import solve_channels

    geometry = plan_geometry(*source, settings.picture_geometry)
    mask = build_mask(geometry, settings.mask)
    encoding = settings.encoding
    pairs = solve_channels(mask.mean, settings.tone, headroom=encoding.headroom)
    return {
        "source": list(source),
        "output": [geometry.out_w, geometry.out_h],
        "mask_mean": [float(m) for m in mask.mean],
        "cell": list(mask.cell),
        "curves": [p.describe() for p in pairs],
        "slope": [p.slope for p in pairs],
        "degree": [p.degree for p in pairs],
        "headroom": encoding.headroom,
        "contrast": mask_contrast(settings, source),
        "contrast_green": mask_contrast(settings, source, channel=1),
    }


#: Where a window's input mean is below this (linear), its relative error is not
#: counted: near black a code value's step is a large share of the light.
BLACK_LEVEL = 0.005


@dataclass(frozen=True)
class LocalEnergy:
    """How well light is held window by window, each window one mask cell.

    Attributes
    ----------
    window : (rows, columns)
    p50, p99, max : float
        Of |relative error| over every window whose input mean is at least
        :data:`BLACK_LEVEL` (0 when there is none).
    measured : float
        Share of windows that were counted.
    grid : numpy.ndarray
        float32, signed relative error of each window (NaN where the input
        is black): the data of an energy map.
    """

    window: tuple[int, int]
    p50: float
    p99: float
    max: float
    measured: float
    grid: np.ndarray

    def figures(self) -> dict:
        """The report's ``local`` entry."""
        return {"window": list(self.window), "p50": self.p50, "p99": self.p99, "max": self.max,
                "measured": self.measured}


def local_energy(input_y: np.ndarray, output_y: np.ndarray, window: tuple[int, int]) -> LocalEnergy:
    """Compare the light of input and output window by window.

    The windows tile the picture from its top-left corner, which is the mask's
    origin, so each holds whole periods of the mask (a window that slides to
    other phases mostly measures the mask's own structure at edges).

    Parameters
    ----------
    input_y, output_y : numpy.ndarray
        Relative luminance (linear), shape (H, W): the upscaled input before
        the mask, and the output, over the same picture area.
    window : (rows, columns)
        Usually one mask period cell, or a whole number of them.

    Returns
    -------
    LocalEnergy
    """
    h, w = input_y.shape
    window = (min(window[0], h), min(window[1], w))
    return local_energy_from_sums(whole_cell_sums(input_y, window), whole_cell_sums(output_y, window), window)


def local_energy_from_sums(box_in: np.ndarray, box_out: np.ndarray, window: tuple[int, int]) -> LocalEnergy:
    """:func:`local_energy` from the windows' sums of input and output luminance."""
    rows, cols = window
    lit = box_in >= BLACK_LEVEL * rows * cols
    error = np.divide(box_out - box_in, box_in, out=np.full_like(box_in, np.nan), where=lit)
    counted = np.abs(error[lit])
    if counted.size:
        p50, p99 = np.percentile(counted, [50, 99])
        top = float(counted.max())
    else:
        p50 = p99 = top = 0.0
    return LocalEnergy((rows, cols), float(p50), float(p99), top, float(lit.mean()) if lit.size else 0.0,
                       error.astype(np.float32))


def render_local_energy(render) -> LocalEnergy:
    """:func:`local_energy` of a render's encoded output against its upscaled input, per mask cell."""
    from .fast import tile_luminance_sums

    g = render.geometry
    if render.output_tile_sums is not None:
        out = render.output_tile_sums
    else:
        picture = render.codes[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w, :3]
        out = tile_luminance_sums(picture, render.encoding, render.tile)
    # against what the render aims for: the input's light times the share it holds
    gain = render.encoding.gain
    return local_energy_from_sums(render.input_tile_sums * gain if gain != 1.0 else render.input_tile_sums,
                                  out, render.tile)


#: sRGB code of the uniform grey that mask visibility is measured on:
#: 118 decodes to 0.1812, the nearest 8-bit code to linear 0.18 (IEC 61966-2-1).
GREY_CODE = 118


def grey_code(level: float) -> int:
    """The 8-bit sRGB code whose decoded linear light is nearest ``level`` (IEC 61966-2-1).

    >>> grey_code(0.18), grey_code(0.90)
    (118, 243)
    """
    return int(np.argmin(np.abs(color.decode(np.arange(256, dtype=np.uint8)) - level)))


@lru_cache(maxsize=4)
def _grey_field(settings, source: tuple[int, int], code: int = GREY_CODE) -> tuple[np.ndarray, np.ndarray]:
    """A uniform grey field of :data:`GREY_CODE` rendered and decoded to linear light, over the
    picture, with the output's luminance weights: rendered once for every channel asked of it."""
    from .engine import render_codes

    r = render_codes(np.full((source[1], source[0], 3), code, np.uint8), settings)
    g = r.geometry
    picture = r.encoding.decode(r.codes[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w, :3])
    picture.flags.writeable = False
    return picture, r.encoding.luma


def mask_contrast(settings, source: tuple[int, int] = REFERENCE_SOURCE, *, channel: int | None = None,
                  code: int = GREY_CODE) -> float:
    """Mask contrast: how plainly a preset's mask shows, the one figure every screen quotes.

    The Michelson contrast (1st to 99th percentile) of linear luminance over one
    period cell (one cell row of the picture, where the rounding carries held light
    along it: its cells differ by a code here and there) of the encoded output of a
    uniform grey field of sRGB code ``code`` (:data:`GREY_CODE`, 18 % grey, unless
    another is given: :func:`grey_code`), for a source of ``source`` size; ``channel``
    0, 1 or 2 takes that channel instead of luminance (labelled wherever shown).
    Luminance is what a viewer sees; a single channel's stripes show more
    contrast than their sum.

    Returns
    -------
    float
        In [0, 1].

    Examples
    --------
    >>> from crtfilter.presets import load_preset
    >>> round(mask_contrast(load_preset("aperture-fine-within-4k").settings), 2)
    0.67
    """
    from .plan import plan_render

    plan = plan_render(settings, *source)
    grey = float(color.decode(np.array([code], np.uint8))[0])
    if settings.glow.on:
        # the glow spreads light over many cells: take the whole grey field, rendered as a file would be
        picture, luma = _grey_field(settings, tuple(source), code)
        return michelson(color.luminance(picture, luma) if channel is None else picture[..., channel])
    from .rounding import carry_run

    hold = settings.holds_cell_light
    run = carry_run(plan.geometry, plan.cell)
    # held light is carried along a cell row: then one cell row of the picture, else one cell
    width = plan.geometry.pic_w if hold and run != 1 else None
    return grey_contrast(plan.mask, plan.pairs, grey, channel=channel, depth=settings.output_depth,
                         encoding=plan.encoding, hold=hold, width=width, run=run)
