"""The figures crtfilter quotes, each with one name, one definition and one way of showing it.

Every command and page takes its labels and its formatting from here, so that the same
figure reads the same everywhere: on screens light kept is a percentage with two
decimals and mask contrast a number with three; in JSON both are plain ratios. The
README's glossary lists the same terms (a test holds the two together).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Term:
    """A figure: its name on screens, its key in JSON, and what it means."""

    name: str
    key: str
    meaning: str


#: The figures, in the order the README's glossary lists them.
GLOSSARY = (
    Term("light kept", "luminance.ratio",
         "the output's mean relative luminance over the picture, as a share of the input's, both in "
         "linear light (BT.709 weights; BT.2020 for HDR) and measured on the written file; 100 % is "
         "held exactly"),
    Term("plain multiply", "luminance.plain_multiply_ratio",
         "the light kept by multiplying the upscaled picture by the same mask without the tone pair: "
         "the darkening crtfilter avoids"),
    Term("mask mean", "mask_mean",
         "the share of light the mask lets through, averaged over one period cell, per channel"),
    Term("mask contrast", "contrast",
         "how plainly the mask shows: the Michelson contrast (1st to 99th percentile) of linear "
         "luminance of the output for a uniform 18 % grey input (sRGB code 118); the green channel's, "
         "higher, is shown only where labelled"),
    Term("local error", "local",
         "per mask period cell, the output's mean luminance against the input's, relative; quoted "
         "as its 50th and 99th percentiles and maximum, where the input is not black"),
    Term("period cell", "cell",
         "the smallest rectangle over which the mask repeats: where its mean is taken and the light "
         "is held; shown as width x height in output pixels, in JSON (and local.window) as [rows, "
         "columns], the way arrays index it"),
    Term("headroom", "hdr.headroom",
         "HDR only: how many times brighter than the input's white the output may go (peak over "
         "reference white), room for the lift to keep the mask in highlights"),
)


def term(name: str) -> Term:
    """The glossary entry named ``name``."""
    for t in GLOSSARY:
        if t.name == name:
            return t
    raise KeyError(name)


def percent(ratio: float | None) -> str:
    """Light kept (or any ratio) as people read it: ``99.99 %``; a black input has none.

    >>> percent(0.99987)
    '99.99 %'
    >>> percent(None)
    'n/a (black input)'
    """
    return "n/a (black input)" if ratio is None else f"{100 * ratio:.2f} %"


def contrast(value: float | None) -> str:
    """Mask contrast as people read it: three decimals.

    >>> contrast(0.66843)
    '0.668'
    """
    return "n/a" if value is None else f"{value:.3f}"


def size(width: int, height: int) -> str:
    """A size as people read it, width first, as ``--size`` takes it.

    >>> size(2880, 2160)
    '2880x2160'
    """
    return f"{int(width)}x{int(height)}"


def cell(rows_columns) -> str:
    """A period cell, given as (rows, columns) the way arrays hold it, shown width first.

    >>> cell((18, 9))
    '9x18 px'
    """
    rows, columns = rows_columns
    return f"{size(columns, rows)} px"
