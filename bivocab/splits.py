"""Split assignment: a sentence's split depends only on its normalised text and the seed.

Exact duplicates therefore always land in the same split (no train/test leakage through
repeated sentences), and appending sentences to a corpus never moves an old sentence.

The 64-bit hash of a sentence is built from its space-separated chunks: each distinct chunk
gets a keyed BLAKE2b hash (the key is the seed), and the chunk hashes of a sentence are mixed
with their positions and summed with numpy.  Normalised text has single spaces and no spaces at
the ends, so the chunk sequence is the text itself.  A corpus repeats its chunks far more than
its sentences, so the pass over the corpus hashes each distinct chunk once and does the rest
with whole-array arithmetic (see :func:`line_hashes`).
"""

from __future__ import annotations

import hashlib
from typing import Iterable

import numpy as np

from .recipe import SPLITS, SplitSpec

_SCALE = 1 << 64
# Constants of the splitmix64 finaliser (Steele, Lea & Flood 2014, "Fast splittable
# pseudorandom number generators", OOPSLA; from memory) and the 64-bit golden ratio.
_M1, _M2, _GOLDEN = np.uint64(0xBF58476D1CE4E5B9), np.uint64(0x94D049BB133111EB), np.uint64(0x9E3779B97F4A7C15)


def split_thresholds(spec: SplitSpec) -> tuple[int, int]:
    """Integer cut points on the 64-bit hash range: hash < t0 -> train, < t1 -> valid, else test."""
    # Fractions may not add up to exactly 1.0 in floating point: an empty split stays empty.
    t0 = _SCALE if spec.valid == 0 and spec.test == 0 else int(spec.train * _SCALE)
    t1 = _SCALE if spec.test == 0 else int((spec.train + spec.valid) * _SCALE)
    return t0, t1


def chunk_hashes(chunks: Iterable[str], seed: int) -> list[int]:
    """64-bit keyed BLAKE2b hash of each space-free chunk's UTF-8 bytes; the key is the seed."""
    key = seed.to_bytes(16, "little", signed=True)
    blake, from_bytes = hashlib.blake2b, int.from_bytes
    return [from_bytes(blake(c.encode("utf-8"), digest_size=8, key=key).digest(), "little") for c in chunks]


def _mix(z: np.ndarray) -> np.ndarray:
    z = (z ^ (z >> np.uint64(30))) * _M1
    z = (z ^ (z >> np.uint64(27))) * _M2
    return z ^ (z >> np.uint64(31))


def line_hashes(occurrence_hashes: np.ndarray, chunks_per_line: np.ndarray) -> np.ndarray:
    """Sentence hashes (uint64) from the chunk hashes of all sentences concatenated in order and
    the number of chunks of each sentence (every sentence has at least one)."""
    counts = np.asarray(chunks_per_line, dtype=np.int64)
    if len(counts) == 0:
        return np.zeros(0, dtype=np.uint64)
    starts = np.cumsum(counts) - counts
    position = (np.arange(int(counts.sum()), dtype=np.int64) - np.repeat(starts, counts) + 1).astype(np.uint64)
    with np.errstate(over="ignore"):
        mixed = _mix(np.asarray(occurrence_hashes, dtype=np.uint64) + position * _GOLDEN)
        total = np.add.reduceat(mixed, starts)
        return _mix(total ^ counts.astype(np.uint64))


def splits_of_hashes(hashes: np.ndarray, thresholds: tuple[int, int]) -> np.ndarray:
    """Split index (0 train, 1 valid, 2 test) of each sentence hash, as uint8."""
    t0, t1 = thresholds
    out = np.full(len(hashes), 2, dtype=np.uint8)
    if t1 >= _SCALE:
        out[:] = 1
    else:
        out[hashes < np.uint64(t1)] = 1
    if t0 >= _SCALE:
        out[:] = 0
    else:
        out[hashes < np.uint64(t0)] = 0
    return out


def assign_split(text: str, seed: int, spec: SplitSpec) -> str:
    """Name of the split of one normalised sentence.

    >>> assign_split("The ferry is late.", 7, SplitSpec(1.0, 0.0, 0.0))
    'train'
    >>> assign_split("The ferry is late.", 7, SplitSpec(0.0, 0.0, 1.0))
    'test'
    """
    return SPLITS[int(assign_splits([text], seed, split_thresholds(spec))[0])]


def assign_splits(texts: Iterable[str], seed: int, thresholds: tuple[int, int]) -> np.ndarray:
    """Split index (0 train, 1 valid, 2 test) of each normalised text, as uint8.

    This is the definition of the split; the corpus pass computes the same thing from its
    cached chunk hashes (``bivocab.scan``), and a test holds the two equal.
    """
    known: dict[str, int] = {}
    occurrences: list[int] = []
    counts: list[int] = []
    for text in texts:
        chunks = text.split(" ")
        counts.append(len(chunks))
        for chunk in chunks:
            occurrences.append(known.setdefault(chunk, len(known)))
    hashes_of_known = np.array(chunk_hashes(known, seed), dtype=np.uint64)
    hashes = line_hashes(hashes_of_known[np.array(occurrences, dtype=np.int64)], np.array(counts, dtype=np.int64))
    return splits_of_hashes(hashes, thresholds)
