"""What every render route shares: the settings, the result, and the plan of one render.

The reference path (:mod:`crtfilter.pipeline`) and the fast path
(:mod:`crtfilter.fast`) both build on this module, and neither imports the
other; :mod:`crtfilter.engine` chooses between them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from . import color
from .capture import CaptureSettings
from .color import DecodeSettings
from .errors import SettingsError, check_choice
from .masks import Mask, MaskSettings, build_mask
from .glow import GlowSettings
from .rounding import ROUNDINGS
from .scale import Geometry, GeometrySettings, check_kernel, plan_geometry
from .tone import OPEN_MASK, TonePair, ToneSettings, solve_channels


@dataclass(frozen=True)
class Settings:
    """Every setting of one render, resolved.

    Parameters
    ----------
    decode, geometry, mask, tone, capture, glow
        The stages' own settings (``capture``: the part of the frame that is
        the picture, see :mod:`crtfilter.capture`; ``glow``: light spread in
        the face glass, see :mod:`crtfilter.glow`).
    kernel : str
        A key of :data:`crtfilter.scale.KERNELS`.
    depth : int
        Output bits per sample for standard range, 8 or 16 (HDR output is
        always 16; see :attr:`output_depth`).
    dither : str
        A key of :data:`crtfilter.color.DITHERS`, applied when rounding to codes.
    rounding : str
        At 8 bits without dither, how samples are rounded to codes: ``"cell-light"``
        holds each mask cell's light to the nearest the codes allow
        (:mod:`crtfilter.rounding`), ``"nearest"`` rounds each sample alone.
    output_range : str
        ``"sdr"`` (sRGB, BT.709) or ``"hdr"`` (PQ, BT.2020).
    peak, reference_white : float
        HDR only: the brightest output and where input white lands, in cd/m².
    """

    decode: DecodeSettings = field(default_factory=DecodeSettings)
    geometry: GeometrySettings = field(default_factory=GeometrySettings)
    kernel: str = "sharp"
    mask: MaskSettings = field(default_factory=MaskSettings)
    tone: ToneSettings = field(default_factory=ToneSettings)
    depth: int = 8
    dither: str = "none"
    rounding: str = "cell-light"
    output_range: str = "sdr"
    peak: float = 1000.0
    reference_white: float = 203.0
    capture: CaptureSettings = field(default_factory=CaptureSettings)
    glow: GlowSettings = field(default_factory=GlowSettings)

    def __post_init__(self):
        check_kernel(self.kernel)
        check_choice("dither", self.dither, color.DITHERS)
        check_choice("rounding", self.rounding, ROUNDINGS)
        if self.depth not in (8, 16):
            raise SettingsError(f"depth must be 8 or 16 (got {self.depth!r})")
        self.encoding  # validates

    @property
    def picture_geometry(self) -> GeometrySettings:
        """The geometry settings for the picture the capture stage leaves: a line-doubled
        frame's source pixels are twice as tall as the frame's, so its pixel aspect halves
        (a display aspect, the whole picture's shape, stays as it is)."""
        g = self.geometry
        if not self.capture.line_doubled or g.display_aspect is not None:
            return g
        from dataclasses import replace

        from .scale import parse_ratio

        par = parse_ratio(g.pixel_aspect, "pixel aspect") / 2
        return replace(g, pixel_aspect=f"{par.numerator}:{par.denominator}")

    @property
    def output_depth(self) -> int:
        """Bits per sample actually written: PQ in 8 bits would band, so HDR is always 16."""
        return 16 if self.output_range == "hdr" else self.depth

    @property
    def holds_cell_light(self) -> bool:
        """Whether codes are settled per mask cell (:mod:`crtfilter.rounding`): 8-bit standard
        range without dither (a 16-bit code is too small a share of any cell's light to matter)."""
        return self.rounding == "cell-light" and self.dither == "none" and self.output_depth == 8

    @property
    def encoding(self) -> color.Encoding:
        """How the output is encoded."""
        return color.Encoding(self.output_range, float(self.peak), float(self.reference_white),
                              float(self.tone.light_share))

    @property
    def colour_matrix(self) -> np.ndarray | None:
        """The source display's linear RGB to the output's (None: nothing to convert)."""
        d = self.decode
        return color.source_matrix(d.primaries, d.white, self.output_range, adaptation=d.white_adaptation)


@dataclass
class Render:
    """The result of one render.

    Attributes
    ----------
    codes : numpy.ndarray
        uint8 or uint16, shape (out_h, out_w, 3 or 4): the encoded output.
    geometry : Geometry
    mask : Mask
    pairs : tuple of TonePair
        One per channel.
    source_luminance : float
        Mean relative luminance of the source at its own resolution (linear).
    plain_multiply_luminance : float
        Mean relative luminance of the upscaled picture multiplied by the mask,
        without the tone pair, over the picture area.
    source_channels : numpy.ndarray
        float64 (3,): mean linear R, G, B of the source, in the output's
        primaries (after any source-display colour conversion).
    balance_removed : float
        Share of the tone pair's total deviation that cell balancing took
        away (0 when the picture is constant over every cell).
    input_luminance : numpy.ndarray or None
        float32 (pic_h, pic_w): relative luminance of the upscaled picture
        before the mask, per pixel (the reference path only).
    encoding : crtfilter.color.Encoding
    gamut_clipped : float
        Share of source pixels the colour conversion clipped.
    input_tile_sums : numpy.ndarray or None
        float64 grid: relative luminance of the upscaled picture before the
        mask, summed over each whole mask cell (window ``tile``) - the input
        side of the local energy audit.
    tile : (rows, columns)
        The cell those sums are taken over (cut to the picture if larger).
    route : str
        Which path computed it: ``"reference"``, ``"table"`` or ``"fused"``.
    code_counts, output_tile_sums : numpy.ndarray or None
        When the route measured its output on the way: how often each code
        occurs per channel over the picture area, int64 (3, 2**bits), and the
        output's luminance summed per cell - the same numbers as measuring
        ``codes`` afterwards.
    output_channel_sums : numpy.ndarray or None
        float64 (3,): the decoded output summed per channel over the picture
        area, where the route measured that instead of counting codes.
    """

    codes: np.ndarray
    geometry: Geometry
    mask: Mask
    pairs: tuple[TonePair, ...]
    source_luminance: float
    plain_multiply_luminance: float
    source_channels: np.ndarray
    balance_removed: float = 0.0
    input_luminance: np.ndarray | None = None
    encoding: color.Encoding = field(default_factory=color.Encoding)
    gamut_clipped: float = 0.0
    input_tile_sums: np.ndarray | None = None
    tile: tuple[int, int] = (1, 1)
    route: str = "reference"
    code_counts: np.ndarray | None = None
    output_tile_sums: np.ndarray | None = None
    output_channel_sums: np.ndarray | None = None
    warnings: list[str] = field(default_factory=list)


#: A source with more lines than this is no frame of the kind the look is for.
MAX_SOURCE_LINES = 1000


def render_warnings(geometry: Geometry, settings: Settings, *, doubled: bool = False) -> list[str]:
    """What a render did that its user may not have meant: each a short sentence.

    Parameters
    ----------
    geometry : Geometry
    settings : Settings
    doubled : bool
        Every row pair of the frame is the same (see
        :func:`crtfilter.capture.doubled_lines`) and it was not taken as
        line-doubled.
    """
    g, out = geometry, []
    if g.pic_w < g.src_w or g.pic_h < g.src_h:
        out.append(f"the picture is shrunk ({g.src_w}x{g.src_h} to {g.pic_w}x{g.pic_h}): source pixels merge "
                   "and the mask cannot show them")
    period = g.pic_h / g.src_h if settings.mask.orientation == "horizontal" else g.pic_w / g.src_w
    if settings.mask.scanlines and period < 2:
        out.append(f"{period:.2g} output rows per source line: scanlines need at least 2 to show "
                   "(a larger size or scale gives them room)")
    lines = g.src_h if settings.mask.orientation == "horizontal" else g.src_w
    if lines > MAX_SOURCE_LINES:
        out.append(f"the source has {lines} lines, more than a tube's picture drew: is it a render, "
                   "a screenshot of a large screen, or line-doubled?")
    if doubled:
        out.append("every row is drawn twice: if this is a line-doubled capture, --line-doubled takes each "
                   "pair as one source line")
    return out


@dataclass(frozen=True)
class RenderPlan:
    """What a render of one source size with one set of settings needs, whatever the route.

    Attributes
    ----------
    geometry : Geometry
    mask : Mask
    pairs : tuple of TonePair
    encoding : crtfilter.color.Encoding
    cell : (rows, columns)
        The mask's period cell: the tiles the deviations are balanced over
        and the window the local energy audit measures.
    tile : (rows, columns)
        ``cell`` cut to the picture where the picture is smaller.
    """

    geometry: Geometry
    mask: Mask
    pairs: tuple[TonePair, ...]
    encoding: color.Encoding
    cell: tuple[int, int]
    tile: tuple[int, int]


@lru_cache(maxsize=16)
def plan_render(settings: Settings, src_w: int, src_h: int) -> RenderPlan:
    """The geometry, mask and tone pairs of a render, cached per settings and source size."""
    geometry = plan_geometry(src_w, src_h, settings.picture_geometry)
    mask = build_mask(geometry, settings.mask)
    encoding = settings.encoding
    pairs = solve_channels(mask.mean, settings.tone, headroom=encoding.headroom)
    rows, cols = mask.cell
    return RenderPlan(geometry, mask, pairs, encoding, (rows, cols),
                      (min(rows, geometry.pic_h), min(cols, geometry.pic_w)))


def mask_weights(mask_values: np.ndarray, mean: np.ndarray) -> np.ndarray:
    """Return k = (m - mu) / (1 - mu) per channel; 0 where the mask is fully open (mu = 1).

    Returns
    -------
    numpy.ndarray
        float32, same shape as ``mask_values``, range [-mu / (1 - mu), 1].
    """
    mu = np.asarray(mean, dtype=np.float64)
    closed = 1.0 - mu
    # A mask open to within OPEN_MASK gets the identity pair; its weights are 0.
    inv = np.divide(1.0, closed, out=np.zeros_like(closed), where=mu < OPEN_MASK)
    return ((mask_values - mu.astype(np.float32)) * inv.astype(np.float32)).astype(np.float32)


def linearise(codes: np.ndarray, settings: DecodeSettings, alpha: np.ndarray | None = None) -> np.ndarray:
    """Decode code values to linear light, compositing over the backdrop where there is alpha.

    With ``settings.alpha == "keep"`` the colour is returned as it is.

    Returns
    -------
    numpy.ndarray
        float32, shape (H, W, 3), range [0, 1].
    """
    lin = color.decode(codes, settings)
    backdrop = color.backdrop_code(settings.alpha)
    if alpha is not None and backdrop is not None:
        under = color.decode(np.array(backdrop, np.uint8), DecodeSettings("srgb"))
        a = alpha[..., None]
        lin = lin * a + under * (1 - a)
    return lin


def source_linear(codes: np.ndarray, settings: Settings, alpha: np.ndarray | None = None) -> tuple[np.ndarray, float]:
    """The source in linear light in the output's primaries, at its own resolution.

    Decodes, composites any alpha, and converts from the source display's
    primaries and white to BT.709 (standard range) or BT.2020 (HDR), clipping
    what falls outside.

    Returns
    -------
    linear : numpy.ndarray
        float32, shape (H, W, 3), range [0, 1].
    clipped : float
        Share of pixels the colour conversion had to clip.
    """
    return color.convert_gamut(linearise(codes, settings.decode, alpha), settings.colour_matrix)


def check_pixels(codes: np.ndarray) -> None:
    """Refuse anything but an (H, W, 3) array of 8- or 16-bit codes."""
    if codes.ndim != 3 or codes.shape[2] != 3:
        raise SettingsError(f"pixels must have shape (H, W, 3) (got {codes.shape})")
    if codes.dtype not in (np.uint8, np.uint16):
        raise SettingsError(f"code values must be uint8 or uint16 (got {codes.dtype})")


def output_canvas(geometry: Geometry, depth: int, alpha_up: np.ndarray | None = None) -> np.ndarray:
    """The zeroed output (black borders), with the kept alpha plane filled in if any.

    Returns
    -------
    numpy.ndarray
        uint8 or uint16 by ``depth``, shape (out_h, out_w, 3 or 4).
    """
    g = geometry
    channels = 3 if alpha_up is None else 4
    out = np.zeros((g.out_h, g.out_w, channels), np.uint8 if depth == 8 else np.uint16)
    if alpha_up is not None:
        out[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w, 3] = \
            (alpha_up * np.float32(2**depth - 1) + np.float32(0.5)).astype(out.dtype)
    return out
