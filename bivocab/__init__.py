"""bivocab: controlled, measured and reproducible vocabularies for bilingual language models.

>>> import bivocab
>>> sorted(bivocab.POLICIES)
['fully-tagged', 'shared', 'word-tagged']
"""

from __future__ import annotations

import importlib
import sys
import types
from typing import Any

__version__ = "0.1.0"

# Public name -> module that defines it.  Modules are imported on first use, so that a worker
# process (which needs only the scan) or a short command does not pay for the whole package.
_EXPORTS = {
    "AuditResult": "audit", "audit_build": "audit", "run_audit": "audit",
    "BuildResult": "build", "build": "build",
    "BivocabError": "errors", "CheckFailed": "errors", "InputError": "errors", "OutputError": "errors",
    "RecipeError": "errors",
    "POLICIES": "recipe", "Recipe": "recipe", "load_recipe": "recipe",
    "segment": "segment", "token_class": "segment",
    "ShardReader": "shards", "open_shards": "shards", "torch_dataset": "shards",
}

__all__ = sorted([*_EXPORTS, "__version__"])


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'bivocab' has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted([*globals(), *_EXPORTS])


class _Package(types.ModuleType):
    """The package module: a public function named like its module (``build``, ``segment``)
    stays the function when the submodule is imported (the import system would otherwise set
    the package attribute to the submodule)."""

    def __setattr__(self, name: str, value: Any) -> None:
        if isinstance(value, types.ModuleType) and _EXPORTS.get(name) == name:
            return
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package
