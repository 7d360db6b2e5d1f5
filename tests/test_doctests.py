"""The examples in the docstrings of every module of diagnose are run and must hold."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import diagnose

MODULES = sorted(m.name for m in pkgutil.walk_packages(diagnose.__path__, "diagnose.")
                 if not m.name.endswith("__main__"))


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert result.failed == 0, f"{result.failed} example(s) of {name} failed"


def test_the_examples_are_many():
    """A guard against a walk that finds nothing: the project's docstrings hold examples."""
    attempted = sum(doctest.testmod(importlib.import_module(n)).attempted for n in MODULES)
    assert attempted >= 100
