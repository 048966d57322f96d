"""Every example in the package's docstrings runs and prints what it says (doctest)."""

from __future__ import annotations

import doctest
import importlib
import inspect
import pkgutil

import pytest

import crtfilter

MODULES = ["crtfilter"] + sorted(m.name for m in pkgutil.walk_packages(crtfilter.__path__, "crtfilter.")
                 if not m.name.endswith("__main__"))


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0, name
    if name in ("crtfilter", "crtfilter.terms", "crtfilter.errors"):
        assert result.attempted > 0, name  # the examples are there and were run


@pytest.mark.parametrize("module", ["crtfilter", "crtfilter.presets"])
def test_every_public_function_shows_an_example(module):
    # the public API: the functions each module names in __all__
    mod = importlib.import_module(module)
    functions = [n for n in mod.__all__ if inspect.isfunction(getattr(mod, n))]
    assert functions
    for name in functions:
        doc = getattr(mod, name).__doc__ or ""
        assert "Examples" in doc and ">>> " in doc, f"{module}.{name}"
