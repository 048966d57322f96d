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


def suggest(word: str, choices: Iterable[str]) -> str:
    """Return ``"; did you mean 'x'?"`` for the closest choice, or ``""``."""
    close = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""


def check_choice(what: str, value, choices: Iterable[str]) -> None:
    """Raise SettingsError unless ``value`` is one of ``choices``, suggesting the closest.

    The message reads ``unknown kernel 'cubc'; did you mean 'cubic'? allowed: ...``.
    """
    choices = list(choices)
    if value not in choices:
        raise SettingsError(
            f"unknown {what} {value!r}{suggest(value, choices)}; allowed: {', '.join(choices)}"
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
