"""Small builds for the audit tests: a generated Kellhaven corpus in two languages whose tokens
are separated by single spaces, so a test can count them with ``str.split`` alone."""

from __future__ import annotations

import random
from pathlib import Path

import numpy as np

import bivocab

# Invented harbour-town vocabulary. Shared spellings, planted case / diacritic variants and
# near-homographs, plus per-language words; random letter strings give a long tail.
SHARED = ["Hotel", "Radio", "Kellhaven", "also", "bald", "hell", "Taxi", "Pier"]
EN_ONLY = ["the", "harbour", "boat", "net", "tide", "rope", "anchor", "quay", "kind", "cafe", "uber", "gift",
           "house", "ship", "lamp", "fish", "crane"]
DE_ONLY = ["der", "Hafen", "Boot", "Netz", "Flut", "Seil", "Anker", "Kai", "Kind", "café", "Über", "Gift",
           "Haus", "Schiff", "Lampe", "fisch", "Kran", "über", "Straße"]
PUNCT = [".", ",", "!", "?", "«", "»", "\""]
SYMBOLS = ["€", "+", "§"]
NUMBERS = ["7", "12", "1,50", "3.20", "1990"]

RECIPE = """\
[build]
name = "kellhaven-audit"
seed = 11

[languages.en]
inputs = ["corpus/en/*.txt"]

[languages.de]
inputs = ["corpus/de/*.txt"]

[splits]
train = {train}
valid = {valid}
test = {test}

[[condition]]
name = "shared"
policy = "shared"

[[condition]]
name = "word-tagged"
policy = "word-tagged"

[[condition]]
name = "fully-tagged"
policy = "fully-tagged"

[[condition]]
name = "capped"
policy = "shared"
max_size = 60
min_count = 2

[[condition]]
name = "custom"
policy = "word-tagged"
classes = {{ number = "shared" }}
share = ["Hotel"]
separate = ["."]
unknown = "per-language"
eos = "none"
pad = false
"""


def _random_word(rng: random.Random) -> str:
    return "".join(rng.choice("abcdefghik") for _ in range(rng.randint(2, 7)))


def write_corpus(root: Path, lines: int = 600, seed: int = 3) -> None:
    """Two files per language; token frequencies fall off roughly like Zipf's law."""
    rng = random.Random(seed)
    for tag, own in (("en", EN_ONLY), ("de", DE_ONLY)):
        pool = SHARED + own
        weights = [1 / (i + 1) for i in range(len(pool))]
        rng.shuffle(pool)
        folder = root / "corpus" / tag
        folder.mkdir(parents=True, exist_ok=True)
        for part in range(2):
            out = []
            for _ in range(lines // 2):
                tokens = []
                for _ in range(rng.randint(2, 14)):
                    roll = rng.random()
                    if roll < 0.62:
                        tokens.append(rng.choices(pool, weights)[0])
                    elif roll < 0.85:
                        tokens.append(_random_word(rng))
                    elif roll < 0.92:
                        tokens.append(rng.choice(NUMBERS))
                    elif roll < 0.96:
                        tokens.append(rng.choice(SYMBOLS))
                    else:
                        tokens.append(rng.choice(PUNCT[1:]))
                out.append(" ".join(tokens + ["."]))
            (folder / f"part{part}.txt").write_text("\n".join(out) + "\n", encoding="utf-8")


def make_build(root: Path, lines: int = 600, splits: tuple[float, float, float] = (0.8, 0.1, 0.1),
               recipe_text: str | None = None) -> Path:
    """Write the corpus and recipe under ``root`` and build into ``root/build``."""
    write_corpus(root, lines)
    recipe = root / "recipe.toml"
    train, valid, test = splits
    recipe.write_text(recipe_text or RECIPE.format(train=train, valid=valid, test=test), encoding="utf-8")
    out = root / "build"
    bivocab.build(recipe, out)
    return out


def split_of_lines(out: Path) -> dict[tuple[int, int], str]:
    """(input index, line) -> split, read from the build's provenance shards."""
    result = {}
    for split in ("train", "valid", "test"):
        for path in sorted((out / "provenance" / split).glob("shard-*.npy")):
            for entry in np.load(path):
                result[(int(entry["input"]), int(entry["line"]))] = split
    return result
