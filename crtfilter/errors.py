"""Errors a user can cause, and the close-match suggestion they carry."""

from __future__ import annotations

import difflib
from collections.abc import Iterable


class CrtfilterError(Exception):
    """Base of every error caused by input or settings; the CLI prints it as one line."""


class SettingsError(CrtfilterError, ValueError):
    """A setting or preset value is unknown, out of range or inadmissible."""


class InputError(CrtfilterError):
    """An input file is missing, unreadable or not an image, or an output is refused."""


#: Words people use for a choice under another name (common practice, no source):
#: "6500k" for the D65 white, "shadow" for a dot mask, and kernel names other tools use.
ALIASES = {
    "6500k": "d65", "6500": "d65", "d6500": "d65", "9300": "9300k", "shadow": "dots", "shadow-mask": "dots",
    "delta": "dots", "dot": "dots", "grille": "aperture", "aperture-grille": "aperture", "stripes": "aperture",
    "slots": "slot", "bicubic": "cubic", "lanczos": "lanczos3", "linear": "bilinear", "point": "nearest",
    "box": "sharp", "area": "sharp", "srgb-gamma": "srgb", "2.2": "gamma-2.2", "gamma22": "gamma-2.2",
}


def suggest(word: str, choices: Iterable[str]) -> str:
    """Return ``"; did you mean 'x'?"`` for the choice meant: by a name the trade uses for it
    (:data:`ALIASES`), by the start of its name (several: all of them), or by spelling;
    ``""`` when nothing is close.

    >>> suggest("6500k", ["d65", "9300k", "C"])
    "; did you mean 'd65'?"
    >>> suggest("slot", ["slot-coarse-within-1080p", "slot-medium-within-4k", "dots-fine-within-4k"])
    "; did you mean 'slot-coarse-within-1080p' or 'slot-medium-within-4k'?"
    """
    choices = list(choices)
    text = str(word)
    alias = ALIASES.get(text.lower())
    if alias in choices:
        return f"; did you mean {alias!r}?"
    starts = [c for c in choices if c.lower().startswith(text.lower())] if len(text) >= 2 else []
    if starts:
        shown = [repr(c) for c in starts[:4]]
        more = f" (and {len(starts) - 4} more)" if len(starts) > 4 else ""
        return f"; did you mean {' or '.join(shown) if len(shown) <= 2 else ', '.join(shown)}{more}?"
    close = difflib.get_close_matches(text, choices, n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""


def check_choice(what: str, value, choices: Iterable[str]) -> None:
    """Raise SettingsError unless ``value`` is one of ``choices``, suggesting the closest.

    The message reads ``unknown kernel 'cubc'; did you mean 'cubic'? allowed: ...``.
    """
    choices = list(choices)
    if value not in choices:
        hint = suggest(value, choices)
        raise SettingsError(
            f"unknown {what} {value!r}{hint}{' ' if hint else '; '}allowed: {', '.join(choices)}"
        )


def printable(text: object) -> str:
    """``text`` as one safe terminal line: control and format characters, and bytes
    of file names that are not UTF-8, shown as escapes (``\\x1b``, ``\\n``, ``\\u202e``)."""
    import unicodedata

    out = []
    for ch in str(text):
        code = ord(ch)
        if 0xDC80 <= code <= 0xDCFF:  # an undecodable byte of a file name (surrogateescape)
            out.append(f"\\x{code - 0xDC00:02x}")
        elif unicodedata.category(ch) in ("Cc", "Cf", "Cs", "Zl", "Zp"):
            out.append(ch.encode("unicode_escape").decode("ascii"))
        else:
            out.append(ch)
    return "".join(out)


class RenderWarning(UserWarning):
    """A render went ahead but did something its user may not have meant (shrinking the
    picture, scanlines without room to show, a source too tall for the look)."""
