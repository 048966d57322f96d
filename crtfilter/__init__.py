"""crtfilter: a cathode-ray-tube look for low-resolution frames, with the light held.

The Python API mirrors the command line:

>>> import numpy as np, crtfilter
>>> frame = np.full((24, 32, 3), 118, np.uint8)
>>> crtfilter.render(frame, scale=3).shape
(72, 96, 3)
"""

__version__ = "0.1.0"

from .errors import CrtfilterError, InputError, RenderWarning, SettingsError  # noqa: E402


def render(pixels, *, preset=None, size=None, scale=None, **options):
    """Render an 8-bit sRGB frame with a preset and return the output.

    Parameters
    ----------
    pixels : numpy.ndarray
        uint8, shape (H, W, 3), sRGB code values.
    preset : str or Preset, optional
        Shipped preset name or preset file path; default :data:`DEFAULT_PRESET`.
    size : str or (int, int), optional
        ``"WxH"`` or (width, height): output exactly this size, picture
        whole-scaled inside and centred (``whole_scale=False``: as large as fits).
    scale : float, optional
        Output rows per source line.
    **options
        Each replaces the preset's setting (see
        :meth:`crtfilter.presets.Preset.with_options`): ``pixel_aspect``
        (e.g. ``"8:7"``) or ``display_aspect`` (e.g. ``"4:3"``), ``transfer``
        (``"srgb"``, ``"gamma-2.2"``, ``"bt1886"``), ``whole_scale`` (False:
        fill the size at a fractional scale), ``kernel``, ``phosphor``,
        ``triad_pitch``, ``scanline_strength``, ``beam_width``, ``softness``,
        and for captures ``crop`` (``"X,Y,W,H"``), ``line_doubled``,
        ``overscan`` (percent).

    Returns
    -------
    numpy.ndarray
        uint8, shape (out_h, out_w, 3), sRGB code values.

    Warns
    -----
    RenderWarning
        When the picture is shrunk, scanlines get fewer than 2 rows per
        source line, the source has over 1000 lines, or every row is drawn
        twice and ``line_doubled`` was not given.

    Examples
    --------
    >>> import numpy as np
    >>> frame = np.full((24, 32, 3), 118, np.uint8)          # 18 % grey
    >>> render(frame, preset="slot-coarse-within-1080p", size=(640, 480)).shape
    (480, 640, 3)
    >>> render(frame, triad_pitch=4.5, whole_scale=False, size="300x200").shape
    (200, 300, 3)
    """
    from .job import render_array

    return render_array(pixels, preset=preset, size=size, scale=scale, **options)


def render_file(input_path, output_path, *, preset=None, force=False, **options):
    """Render one image file to a PNG and return its report (a dict).

    ``options``: ``size``, ``scale``, and those of :func:`render`, and
    ``depth``, ``fmt``, ``quality``; see :func:`crtfilter.job.render_file`.
    The report's ``warnings`` list what :func:`render` warns of.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from crtfilter.charts import bundled_samples
    >>> scene = next(p for p in bundled_samples() if p.name == "scene-160x144.png")
    >>> out = pathlib.Path(tempfile.mkdtemp()) / "scene.png"
    >>> report = render_file(scene, out, preset="scanlines-only-within-1080p")
    >>> report["geometry"]["output"], abs(report["luminance"]["ratio"] - 1) < 0.01
    ([1120, 1008], True)
    """
    from .job import render_file as _render_file

    return _render_file(input_path, output_path, preset=preset, force=force, **options)


def load_preset(name_or_path=None):
    """Return a shipped preset by name or a preset file by path; see :mod:`crtfilter.presets`.

    Examples
    --------
    >>> load_preset().name
    'aperture-fine-within-4k'
    >>> load_preset("dots-fine-within-4k").settings.mask.phosphor
    'dots'
    """
    from .presets import load_preset as _load

    return _load(name_or_path)


DEFAULT_PRESET = "aperture-fine-within-4k"

__all__ = [
    "__version__", "render", "render_file", "load_preset", "DEFAULT_PRESET",
    "CrtfilterError", "InputError", "SettingsError", "RenderWarning",
]
