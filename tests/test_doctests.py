"""The examples in the package's docstrings are run as tests (they document behaviour a reader relies on)."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import bivocab

MODULES = sorted(m.name for m in pkgutil.iter_modules(bivocab.__path__, "bivocab.") if m.name != "bivocab.__main__")


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name: str) -> None:
    if name == "bivocab.torchdata":
        pytest.importorskip("torch")
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert result.failed == 0, f"{result.failed} docstring example(s) of {name} failed"
