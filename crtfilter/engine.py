"""The route chooser: one render, by the fast path where numba is there, else the reference.

The reference path (:mod:`crtfilter.pipeline`) and the fast path
(:mod:`crtfilter.fast`) compute the same render from the same plan
(:mod:`crtfilter.plan`); this module, above both, picks one.
"""

from __future__ import annotations

import numpy as np

from .errors import check_choice
from .plan import Render, Settings, check_pixels

#: How a render may be computed: ``auto`` and ``fast`` take the fast path where
#: numba is available, ``reference`` the NumPy specification.
ENGINES = ("auto", "fast", "reference")


def render_codes(codes: np.ndarray, settings: Settings = Settings(), *,
                 alpha: np.ndarray | None = None, engine: str = "auto", figures: bool = True) -> Render:
    """Render source code values into the output picture.

    Parameters
    ----------
    codes : numpy.ndarray
        uint8 or uint16, shape (H, W, 3): source code values.
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
        ``codes`` has 4 channels when alpha is kept.
    """
    check_choice("engine", engine, ENGINES)
    check_pixels(codes)
    if engine != "reference":
        from .fast import render_fast

        fast = render_fast(codes, settings, alpha=alpha, figures=figures)
        if fast is not None:
            return fast
    from .pipeline import render_reference

    return render_reference(codes, settings, alpha=alpha)
