"""Every path a command will write, checked before any work, and written one way.

A command makes one :class:`WritePlan`: it names the files it reads
(:meth:`WritePlan.protect`, :meth:`WritePlan.protect_folder`) and every path it
will write (:meth:`WritePlan.add`) before it renders anything. The plan refuses,
with one line:

- a path that is one of the inputs - by name, through a symlink, a hard link or
  ``..`` (files are compared by device and inode, paths after resolving);
- two things that would be written to one path;
- a path that exists, unless the command was given ``--force`` (and never an
  input, even then);
- a path that is a folder, or whose folder is a file.

Files are then written with :meth:`WritePlan.write`, through
:func:`crtfilter.files.write_atomic`: whole or not at all, never through a
symlink, and without ``--force`` linked into place so that a file another run
wrote in the meantime is refused rather than replaced.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

from .errors import InputError
from .files import write_atomic


def _identity(path: Path) -> tuple[int, int] | None:
    try:
        st = os.stat(path)  # through symlinks: the file that would be written over
    except (OSError, ValueError):
        return None
    return st.st_dev, st.st_ino


def _name_key(path: Path) -> str:
    """The path with its folder resolved and its own name kept (a link there is not followed)."""
    return os.path.join(os.path.realpath(path.parent), path.name)


class WritePlan:
    """The files one command reads and writes, checked against each other.

    Parameters
    ----------
    force : bool
        Existing outputs may be replaced (never an input).
    """

    def __init__(self, *, force: bool = False):
        self.force = force
        self._inputs: dict[tuple[int, int], Path] = {}
        self._input_paths: dict[str, Path] = {}
        self._outputs: dict[str, tuple[Path, str]] = {}

    # -- what is read ------------------------------------------------------

    def protect(self, *paths: str | os.PathLike) -> None:
        """Files this command reads: nothing may be written over them."""
        for p in paths:
            p = Path(p)
            ident = _identity(p)
            if ident is not None:
                self._inputs.setdefault(ident, p)
            self._input_paths.setdefault(os.path.realpath(p), p)

    def protect_folder(self, folder: str | os.PathLike) -> None:
        """Every file in ``folder`` and below (symlinked files too)."""
        for root, _dirs, files in os.walk(folder):
            self.protect(*(Path(root) / f for f in files))

    def input_of(self, path: str | os.PathLike) -> Path | None:
        """The protected file ``path`` would write over, or None."""
        path = Path(path)
        ident = _identity(path)
        if ident is not None and ident in self._inputs:
            return self._inputs[ident]
        return self._input_paths.get(os.path.realpath(path))

    # -- what is written ---------------------------------------------------

    def add(self, path: str | os.PathLike, what: str = "output") -> Path:
        """Plan to write ``path`` (``what`` names it in messages); raise InputError if it may not be."""
        path = Path(path)
        source = self.input_of(path)
        if source is not None:
            raise InputError(f"{path}: the {what} would overwrite the input {source}"
                             if Path(source) != path else f"{path}: the {what} would overwrite the input")
        key = _name_key(path)
        if key in self._outputs:
            other, other_what = self._outputs[key]
            raise InputError(f"{path}: both the {other_what} and the {what} would be written here")
        if os.path.isdir(path) and not os.path.islink(path):
            raise InputError(f"{path}: is a folder; the {what} must be a file")
        try:
            mode = os.lstat(path).st_mode
        except OSError:
            mode = None
        if mode is not None and not (stat.S_ISREG(mode) or stat.S_ISLNK(mode)):
            raise InputError(f"{path}: is not a regular file (a device, pipe or socket); the {what} must be one")
        parent = self._existing_parent(path)
        if parent is not None and not parent.is_dir():
            raise InputError(f"{path}: {parent} is not a folder")
        if os.path.lexists(path) and not self.force:
            raise InputError(f"{path}: exists (use --force to replace it)")
        self._outputs[key] = (path, what)
        return path

    def add_folder(self, folder: str | os.PathLike, what: str = "output folder") -> Path:
        """Plan a folder the command fills: it may not be, hold or lie inside an input's place."""
        folder = Path(folder)
        if os.path.lexists(folder) and not os.path.isdir(folder):
            raise InputError(f"{folder}: the {what} is a file, not a folder")
        source = self.input_of(folder)
        if source is not None:
            raise InputError(f"{folder}: the {what} would overwrite the input {source}")
        return folder

    @staticmethod
    def _existing_parent(path: Path) -> Path | None:
        for parent in path.absolute().parents:
            if os.path.lexists(parent):
                return parent
        return None

    def planned(self) -> list[Path]:
        """Every path planned, in the order added."""
        return [p for p, _what in self._outputs.values()]

    def write(self, path: str | os.PathLike, data: bytes) -> None:
        """Write a planned path whole, making its folders; OSError becomes one line."""
        path = Path(path)
        if _name_key(path) not in self._outputs:
            self.add(path)
        make_folder(path.parent)
        try:
            write_atomic(path, data, replace=self.force)
        except OSError as exc:
            raise InputError(f"{path}: cannot write ({exc.strerror or exc})") from None


def make_folder(folder: str | os.PathLike) -> None:
    """Make ``folder`` and its parents; a file in the way or a refusal becomes one line."""
    folder = Path(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except FileExistsError:
        raise InputError(f"{folder}: is a file, not a folder") from None
    except OSError as exc:
        raise InputError(f"{folder}: cannot make this folder ({exc.strerror or exc})") from None


def slug(text: str) -> str:
    """``text`` with everything but letters, digits, ``-`` and ``_`` turned into ``-``."""
    return "".join(c if c.isalnum() or c in "-_" else "-" for c in text)


def unique_names(names: list[str]) -> list[str]:
    """The names, made distinct by a ``-2``, ``-3``... where they repeat (case folded)."""
    seen: set[str] = set()
    result = []
    for name in names:
        candidate, n = name, 2
        while candidate.casefold() in seen:
            candidate, n = f"{name}-{n}", n + 1
        seen.add(candidate.casefold())
        result.append(candidate)
    return result


def unique_stems(paths: list[Path]) -> list[str]:
    """A distinct file-name stem per path: its place below the paths' common folder, as a slug
    (``a.png`` and ``a.jpg``, or ``x/a.png`` and ``y/a.png``, get different stems)."""
    if not paths:
        return []
    root = Path(os.path.commonpath([str(p.resolve().parent) for p in paths]))
    return unique_names([slug("-".join(p.resolve().relative_to(root).with_suffix("").parts)) for p in paths])
