"""Every example in the package's docstrings runs and prints what it says (doctest)."""

from __future__ import annotations

import doctest
import importlib
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


def test_the_public_api_shows_an_example_each():
    for name in ("render", "render_file", "load_preset"):
        doc = getattr(crtfilter, name).__doc__
        assert "Examples" in doc and ">>> " in doc, name
