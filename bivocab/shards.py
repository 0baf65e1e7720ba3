"""Token shards: writing them (npy) and reading them back for training code.

Layout of one shard ``DIR/<condition>/<split>/shard-NNNNN``:
``.tokens.npy`` flat token ids (uint16 when the vocabulary fits, else uint32),
``.offsets.npy`` int64 sentence offsets (length sentences + 1), ``.langs.npy`` uint8 language
index (recipe order).  ``DIR/provenance/<split>/shard-NNNNN.npy`` holds, for the same
sentences in the same order, the input file index (into build.json ``inputs``) and line number.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

import numpy as np

from .errors import BivocabError
from .manifest import atomic_open, complete_manifest

PROVENANCE_DTYPE = np.dtype([("input", "<u4"), ("line", "<i8")])


def shard_stem(split: str, index: int) -> str:
    return f"{split}/shard-{index:05d}"


def write_npy(path: Path, array: np.ndarray) -> None:
    with atomic_open(path) as handle:
        np.save(handle, np.ascontiguousarray(array), allow_pickle=False)


@dataclass(frozen=True)
class Shard:
    tokens: np.ndarray
    offsets: np.ndarray
    langs: np.ndarray

    def __len__(self) -> int:
        return len(self.langs)

    def sentence(self, i: int) -> np.ndarray:
        return self.tokens[self.offsets[i]:self.offsets[i + 1]]


class ShardReader:
    """Memory-mapped view of one condition and split of a build.

    >>> # reader = open_shards("build", "shared", "train")
    >>> # for lang, ids in reader.sentences(): ...
    """

    def __init__(self, out: str | Path, condition: str, split: str):
        self.out = Path(out)
        manifest = complete_manifest(self.out)  # refuses an incomplete (killed or running) build
        conditions = manifest["conditions"]
        if condition not in conditions:
            raise BivocabError(f"{self.out}: no condition {condition!r} (have: {', '.join(sorted(conditions))})")
        shards = conditions[condition]["shards"]
        if split not in shards:
            raise BivocabError(f"{self.out}: no split {split!r} (have: {', '.join(shards)})")
        self.tags: tuple[str, ...] = tuple(lang["tag"] for lang in manifest["recipe"]["languages"])
        self.paths: list[str] = list(shards[split])
        self.shards: list[Shard] = [self._load(stem) for stem in self.paths]

    def _load(self, stem: str) -> Shard:
        load = lambda suffix: np.load(self.out / f"{stem}.{suffix}.npy", mmap_mode="r")
        return Shard(load("tokens"), load("offsets"), load("langs"))

    def __len__(self) -> int:
        return sum(len(s) for s in self.shards)

    def sentences(self, lang: str | None = None) -> Iterator[tuple[str, np.ndarray]]:
        """Yield ``(language tag, token ids)`` for every sentence, optionally of one language."""
        want = None if lang is None else self.tags.index(lang)
        for shard in self.shards:
            offsets, langs = np.asarray(shard.offsets), np.asarray(shard.langs)
            for i in range(len(langs)):
                if want is None or langs[i] == want:
                    yield self.tags[langs[i]], shard.tokens[offsets[i]:offsets[i + 1]]

    def token_stream(self) -> np.ndarray:
        """All token ids of the split, concatenated in shard order (a copy)."""
        if not self.shards:
            return np.zeros(0, dtype=np.uint32)
        return np.concatenate([np.asarray(s.tokens) for s in self.shards])


def open_shards(out: str | Path, condition: str, split: str) -> ShardReader:
    """Open the shards of ``condition`` and ``split`` in build directory ``out``."""
    return ShardReader(out, condition, split)
