"""Shared fixtures: small generated corpora and builds, and the bundled sample corpus."""

from __future__ import annotations

import random
import shutil
from pathlib import Path

import pytest

import bivocab

ROOT = Path(__file__).resolve().parent.parent
SAMPLE_RECIPE = ROOT / "recipes" / "three-conditions.toml"

# Invented demo vocabulary (not a reference): enough shared and language-specific spellings,
# numbers and punctuation to exercise every policy.
EN_WORDS = ("the ferry is late and the wind is cold a gift for the kind man also rock hand name "
            "market school harbour fish bread rain tide boat").split()
DE_WORDS = ("die Fähre ist spät und der Wind ist kalt ein Gift für das Kind also bald hell Hand Name "
            "Markt Schule Hafen Fisch Brot Regen Boot rat").split()
OTHER = [",", ".", "!", "?", "(", ")", "–", "3,50", "1887", "€", "%", "„", "“"]


def write_corpus(root: Path, sentences: int = 600, seed: int = 1) -> None:
    rng = random.Random(seed)
    for tag, words in (("en", EN_WORDS), ("de", DE_WORDS)):
        folder = root / tag
        folder.mkdir(parents=True, exist_ok=True)
        lines = []
        for _ in range(sentences):
            n = rng.randint(2, 14)
            tokens = [rng.choice(words) if rng.random() < 0.8 else rng.choice(OTHER) for _ in range(n)]
            lines.append(" ".join(tokens))
        (folder / "part.txt").write_text("\n".join(lines) + "\n", encoding="utf-8")


RECIPE_TEMPLATE = """\
[build]
name = "tiny"
seed = 3

[languages.en]
inputs = ["en/*.txt"]

[languages.de]
inputs = ["de/*.txt"]

{extra}

[[condition]]
name = "shared"
policy = "shared"

[[condition]]
name = "word-tagged"
policy = "word-tagged"

[[condition]]
name = "fully-tagged"
policy = "fully-tagged"
"""


def write_recipe(root: Path, extra: str = "") -> Path:
    path = root / "recipe.toml"
    path.write_text(RECIPE_TEMPLATE.format(extra=extra), encoding="utf-8")
    return path


@pytest.fixture
def tiny(tmp_path: Path) -> Path:
    """A directory with a small generated two-language corpus and a three-condition recipe."""
    write_corpus(tmp_path)
    write_recipe(tmp_path)
    return tmp_path


@pytest.fixture(scope="session")
def sample_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The bundled sample corpus built under recipes/three-conditions.toml (once per session)."""
    out = tmp_path_factory.mktemp("sample") / "build"
    bivocab.build(SAMPLE_RECIPE, out)
    return out


def copy_tree(src: Path, dst: Path) -> Path:
    shutil.copytree(src, dst)
    return dst
