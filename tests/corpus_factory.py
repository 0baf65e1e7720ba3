"""Small generated corpora and recipes for the build-safety tests (invented Kellhaven text)."""

from __future__ import annotations

import os
import random
from pathlib import Path

EN_WORDS = ("the harbour ferry is late again and the fish market opens at dawn while gulls circle "
            "over Kellhaven quay lighthouse keeper nets tide storm boat rope").split()
DE_WORDS = ("die Fähre im Hafen ist wieder spät und der Fischmarkt öffnet bei Tagesanbruch über "
            "Kellhaven Kai Leuchtturm Wärter Netze Flut Sturm Boot Tau").split()


def write_corpus(root: Path, sentences: int = 400, files_per_language: int = 2, seed: int = 3) -> None:
    """``root/en/*.txt`` and ``root/de/*.txt``, one generated sentence per line."""
    rng = random.Random(seed)
    for lang, words in (("en", EN_WORDS), ("de", DE_WORDS)):
        (root / lang).mkdir(parents=True, exist_ok=True)
        for f in range(files_per_language):
            lines = [" ".join(rng.choice(words) for _ in range(rng.randint(3, 12))) + f" {i}."
                     for i in range(sentences)]
            (root / lang / f"part{f}.txt").write_text("\n".join(lines) + "\n", encoding="utf-8")


def write_recipe(root: Path, name: str = "kellhaven-safety", max_tokens: int = 1000, extra: str = "",
                 en: str = "en/*.txt", de: str = "de/*.txt") -> Path:
    """A three-condition recipe over ``root``'s corpus with small shards (several per split)."""
    root.mkdir(parents=True, exist_ok=True)
    path = root / "recipe.toml"
    path.write_text(f'''[build]
name = "{name}"
seed = 11

[languages.en]
inputs = ["{en}"]

[languages.de]
inputs = ["{de}"]

[shards]
max_tokens = {max_tokens}

[[condition]]
name = "shared"
policy = "shared"

[[condition]]
name = "word-tagged"
policy = "word-tagged"

[[condition]]
name = "fully-tagged"
policy = "fully-tagged"
{extra}''', encoding="utf-8")
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
