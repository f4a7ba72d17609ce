"""The examples in the package's docstrings run and print what they show (doctest)."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import eddyhop


def _modules():
    for info in pkgutil.walk_packages(eddyhop.__path__, "eddyhop."):
        if not info.name.endswith("__main__"):
            yield info.name


@pytest.mark.parametrize("name", sorted(_modules()))
def test_docstring_examples(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples failed in {name}"
