"""Getting numba and the compiled kernels: where the cache lives, and a first compile said aloud.

numba compiles each kernel of :mod:`crtfilter.fast.kernels` for its listed
signatures when a route first needs it (:func:`ready`) and keeps the machine
code in a disk cache; later processes load it from there. Where the package folder is read-only,
:func:`prepare_numba_cache` points numba at a user cache folder (or a
temporary one) before numba is imported: numba's own import fails when no
cache location is writable.
"""

from __future__ import annotations

import os
import sys
import tempfile
import threading
import time
from pathlib import Path

_NUMBA = None
_KERNELS = None

#: Seconds after which loading the kernels is taken to be a compile, and said so.
_SLOW = 1.5


def _writable(folder: Path) -> bool:
    try:
        folder.mkdir(parents=True, exist_ok=True)
        probe = folder / f".crtfilter-probe-{os.getpid()}"
        probe.write_bytes(b"")
        probe.unlink()
        return True
    except OSError:
        return False


def prepare_numba_cache() -> str | None:
    """Choose where numba caches compiled code, before numba is imported.

    Honours a ``NUMBA_CACHE_DIR`` already set. Otherwise, when the package
    folder (numba's default) cannot be written, uses ``$XDG_CACHE_HOME``
    or ``~/.cache`` + ``crtfilter/numba``, and failing that a folder in the
    system's temporary directory. ``CRTFILTER_READONLY_PACKAGE=1`` in the
    environment treats the package folder as read-only.

    Returns
    -------
    str or None
        The folder set, or None when numba's default is kept.
    """
    if os.environ.get("NUMBA_CACHE_DIR"):
        return os.environ["NUMBA_CACHE_DIR"]
    package = Path(__file__).resolve().parent
    # CRTFILTER_READONLY_PACKAGE=1 makes the package folder count as read-only
    # (root can write anywhere, so tests need another way to get there)
    if not os.environ.get("CRTFILTER_READONLY_PACKAGE") and _writable(package / "__pycache__"):
        return None
    base = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache")
    for folder in (base / "crtfilter" / "numba",
                   Path(tempfile.gettempdir()) / f"crtfilter-numba-{os.getuid()}"):
        if _writable(folder):
            os.environ["NUMBA_CACHE_DIR"] = str(folder)
            return str(folder)
    return None


_ABSENT = object()


def numba_module():
    """Import numba (after :func:`prepare_numba_cache`), or return None if it cannot be had."""
    global _NUMBA
    if _NUMBA is None:
        prepare_numba_cache()
        # colour-science stands a placeholder in for a missing SciPy, which numba's
        # import then takes for SciPy and fails on: hide it while numba loads.
        hidden = {k: v for k, v in sys.modules.items()
                  if (k == "scipy" or k.startswith("scipy.")) and not hasattr(v, "__file__")}
        for name in hidden:
            del sys.modules[name]
        # The kernels call no C through cffi, and numba's cffi support costs a C
        # parser's import (about 50 ms a process) wherever cffi is installed: let
        # numba see none while it loads. cffi itself imports normally afterwards.
        cffi_entry = sys.modules.get("cffi", _ABSENT)
        if cffi_entry is _ABSENT:
            sys.modules["cffi"] = None
        try:
            import numba
            import numba.core.typing.cffi_utils  # noqa: F401  (loaded later otherwise, cffi and all)
        except Exception:  # missing, or broken by its environment: the reference path still works
            _NUMBA = False
        else:
            _NUMBA = numba
        finally:
            sys.modules.update(hidden)
            if cffi_entry is _ABSENT and sys.modules.get("cffi", _ABSENT) is None:
                del sys.modules["cffi"]
    return _NUMBA or None


def kernels_module():
    """The kernels module (:mod:`crtfilter.fast.kernels`, nothing compiled yet), or None without numba."""
    global _KERNELS
    if _KERNELS is None:
        if numba_module() is None:
            _KERNELS = False
            return None
        try:
            from . import kernels
        except Exception as exc:  # a broken numba install: the reference path still works
            _KERNELS = False
            sys.stderr.write(f"crtfilter: the fast path is not available ({exc}); using the reference path\n")
            return None
        _KERNELS = kernels
    return _KERNELS or None


_READY: set = set()


def ready(*wanted: tuple[str, int], quiet: bool = False) -> bool:
    """Make sure these kernels are compiled (or loaded from the cache); False without numba.

    Each of ``wanted`` is (name, variant): a key of
    :data:`crtfilter.fast.kernels.SIGNATURES` and the index of its signature
    (0: 8-bit output, 1: 16-bit). What the cache does not hold for this
    machine and version is compiled now (once; up to about 20 s for all of
    them on two cores) and said in one line on stderr with the time it took,
    unless ``quiet``; on a terminal the line starts when the wait does.
    """
    todo = [w for w in wanted if w not in _READY]
    if not todo:  # nothing to load: numba is not even imported
        return True
    kernels = kernels_module()
    if kernels is None:
        return False
    started = time.perf_counter()
    said = threading.Event()
    tty = not quiet and sys.stderr.isatty()

    def start_line():
        sys.stderr.write("crtfilter: compiling the fast path for this machine, once ... ")
        sys.stderr.flush()
        said.set()

    timer = threading.Timer(_SLOW, start_line) if tty else None
    if timer is not None:
        timer.daemon = True
        timer.start()
    compiled = 0
    try:
        for name, variant in todo:
            fn = getattr(kernels, name)
            before = sum(fn.stats.cache_misses.values())
            try:
                fn.compile(kernels.SIGNATURES[name][variant])
            except OSError:
                # the cache could not be written (a full disk, a file-size limit): keep the
                # compiled code in this process only, and render on
                from numba.core.caching import NullCache
                from numba.core.dispatcher import Dispatcher

                for helper in list(vars(kernels).values()) + [fn]:  # the kernels and what they call
                    if isinstance(helper, Dispatcher):
                        helper._cache = NullCache()
                fn.compile(kernels.SIGNATURES[name][variant])
            compiled += sum(fn.stats.cache_misses.values()) - before
            _READY.add((name, variant))
    finally:
        if timer is not None:
            timer.cancel()
            timer.join()  # no thread may be left running when a batch forks its workers
    seconds = time.perf_counter() - started
    if said.is_set():
        sys.stderr.write(f"done in {seconds:.1f} s\n")
    elif compiled and not quiet:
        sys.stderr.write(f"crtfilter: compiled the fast path for this machine in {seconds:.1f} s "
                         f"(once: later runs load it from the cache)\n")
    return True


def warm(quiet: bool = True) -> dict:
    """Compile (or load) every kernel of every route now, as ``crtfilter compile`` does.

    Returns
    -------
    dict
        ``available`` (bool), ``compiled`` (how many signatures were compiled
        rather than loaded), ``loaded``, ``seconds``, ``cache`` (the folder).
    """
    started = time.perf_counter()
    kernels = kernels_module()
    if kernels is None:
        return {"available": False, "compiled": 0, "loaded": 0, "seconds": 0.0, "cache": None}
    ready(*[(name, i) for name, sigs in kernels.SIGNATURES.items() for i in range(len(sigs))], quiet=quiet)
    functions = [getattr(kernels, name) for name in kernels.SIGNATURES]
    compiled = sum(sum(f.stats.cache_misses.values()) for f in functions)
    loaded = sum(sum(f.stats.cache_hits.values()) for f in functions)
    return {"available": True, "compiled": compiled, "loaded": loaded,
            "seconds": time.perf_counter() - started, "cache": str(Path(kernels.fused.stats.cache_path))}
