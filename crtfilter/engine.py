"""The route chooser: one render, by the fast path where it can serve (numba there, or a route
that needs none), else the reference.

The reference path (:mod:`crtfilter.pipeline`) and the fast path
(:mod:`crtfilter.fast`) compute the same render from the same plan
(:mod:`crtfilter.plan`); this module, above both, picks one.
"""

from __future__ import annotations

import numpy as np

from .capture import cut, doubled_lines
from .errors import check_choice
from .plan import Render, Settings, check_pixels, render_warnings

#: How a render may be computed: ``auto`` and ``fast`` take the fast path where
#: numba is available, ``reference`` the NumPy specification.
ENGINES = ("auto", "fast", "reference")


def render_codes(codes: np.ndarray, settings: Settings = Settings(), *,
                 alpha: np.ndarray | None = None, engine: str = "auto", figures: bool = True) -> Render:
    """Render source code values into the output picture.

    Parameters
    ----------
    codes : numpy.ndarray
        uint8 or uint16, shape (H, W, 3): source code values (a frame:
        ``settings.capture`` cuts the picture out of it first, see
        :mod:`crtfilter.capture`; the routes render what is left).
    settings : Settings
    alpha : numpy.ndarray, optional
        float32 (H, W) coverage. Composited over the backdrop colour of
        ``settings.decode.alpha``, or with ``"keep"`` upscaled and written as
        a fourth channel (transparent outside the picture).
    engine : str
        One of :data:`ENGINES`.
    figures : bool
        Compute the light figures (source, plain multiply, per-cell sums);
        the pixels are the same either way.

    Returns
    -------
    Render
        ``codes`` has 4 channels when alpha is kept; ``warnings`` says what
        the render did that may not have been meant (see
        :func:`crtfilter.plan.render_warnings`).
    """
    check_choice("engine", engine, ENGINES)
    check_pixels(codes)
    doubled = not settings.capture.line_doubled and doubled_lines(codes)
    codes, alpha = cut(codes, alpha, settings.capture)
    render = None
    if engine != "reference":
        from .fast import render_fast

        render = render_fast(codes, settings, alpha=alpha, figures=figures)
    if render is None:
        from .pipeline import render_reference

        render = render_reference(codes, settings, alpha=alpha)
    render.warnings = render_warnings(render.geometry, settings, doubled=doubled)
    return render


def render_rows(codes: np.ndarray, settings: Settings = Settings(), first: int = 0, stop: int | None = None, *,
                alpha: np.ndarray | None = None, engine: str = "auto") -> np.ndarray:
    """The output codes of :func:`render_codes`, with rows ``first..stop`` of it exact and
    possibly no others: what a view of part of the picture needs, at a fraction of the
    work where the fast path can render bands alone (:func:`crtfilter.fast.render_rows`);
    else the whole frame, without its figures.

    Returns
    -------
    numpy.ndarray
        The whole output canvas; the rows outside ``first..stop`` may be black.
    """
    check_choice("engine", engine, ENGINES)
    check_pixels(codes)
    if engine != "reference" and alpha is None:
        from .fast import render_rows as fast_rows

        part = fast_rows(cut(codes, None, settings.capture)[0], settings, first,
                         stop if stop is not None else 1 << 30)
        if part is not None:
            return part[0]
    return render_codes(codes, settings, alpha=alpha, engine=engine, figures=False).codes
