"""Recipes with small shards over conftest's generated corpus, for the build-safety tests."""

from __future__ import annotations

import json
import os
from pathlib import Path

from conftest import RECIPE_TEMPLATE, write_corpus

__all__ = ["tree_bytes", "write_corpus", "write_recipe"]


def write_recipe(root: Path, max_tokens: int = 1000, extra: str = "", en: str = "en/*.txt",
                 de: str = "de/*.txt") -> Path:
    """conftest's three-condition recipe with ``max_tokens`` per shard (several shards per split)
    and the given input globs."""
    root.mkdir(parents=True, exist_ok=True)
    text = RECIPE_TEMPLATE.format(extra=f"[shards]\nmax_tokens = {max_tokens}\n\n{extra}")
    text = text.replace('["en/*.txt"]', json.dumps([en])).replace('["de/*.txt"]', json.dumps([de]))
    path = root / "recipe.toml"
    path.write_text(text, encoding="utf-8")
    return path


def tree_bytes(out: Path) -> dict[str, bytes]:
    """Every file of a build directory (except the lock file, which holds no data) with its bytes."""
    files = {}
    for dirpath, _dirs, names in os.walk(out):
        for name in names:
            full = Path(dirpath) / name
            rel = full.relative_to(out).as_posix()
            if rel != ".bivocab.lock":
                files[rel] = full.read_bytes()
    return files
