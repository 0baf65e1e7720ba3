"""Split assignment: a sentence's split depends only on its normalised text and the seed.

Exact duplicates therefore always land in the same split (no train/test leakage through
repeated sentences), and appending sentences to a corpus never moves an old sentence.
"""

from __future__ import annotations

import functools
import hashlib
from typing import Iterable

import numpy as np

from .recipe import SPLITS, SplitSpec

_SCALE = 1 << 64


def split_thresholds(spec: SplitSpec) -> tuple[int, int]:
    """Integer cut points on the 64-bit hash range: hash < t0 -> train, < t1 -> valid, else test."""
    # Fractions may not add up to exactly 1.0 in floating point: an empty split stays empty.
    t0 = _SCALE if spec.valid == 0 and spec.test == 0 else int(spec.train * _SCALE)
    t1 = _SCALE if spec.test == 0 else int((spec.train + spec.valid) * _SCALE)
    return t0, t1


def sentence_hash(text: str, seed: int) -> int:
    """64-bit keyed BLAKE2b hash of the UTF-8 text; the key is the recipe seed."""
    key = seed.to_bytes(16, "little", signed=True)
    return int.from_bytes(hashlib.blake2b(text.encode("utf-8"), digest_size=8, key=key).digest(), "little")


def assign_split(text: str, seed: int, spec: SplitSpec) -> str:
    """Name of the split of one normalised sentence.

    >>> assign_split("The ferry is late.", 7, SplitSpec(1.0, 0.0, 0.0))
    'train'
    """
    return SPLITS[int(assign_splits([text], seed, split_thresholds(spec))[0])]


def assign_splits(texts: Iterable[str], seed: int, thresholds: tuple[int, int]) -> np.ndarray:
    """Split index (0 train, 1 valid, 2 test) of each text, as uint8.

    >>> assign_splits(["a", "b"], 7, (0, 1 << 64)).tolist()
    [1, 1]
    """
    return assign_splits_utf8([text.encode("utf-8") for text in texts], seed, thresholds)


def assign_splits_utf8(texts: Iterable[bytes], seed: int, thresholds: tuple[int, int]) -> np.ndarray:
    """:func:`assign_splits` of texts already encoded as UTF-8.

    >>> assign_splits_utf8([b"a", b"b"], 7, (0, 1 << 64)).tolist()
    [1, 1]
    """
    keyed = functools.partial(hashlib.blake2b, digest_size=8, key=seed.to_bytes(16, "little", signed=True))
    digests = b"".join(map(hashlib.blake2b.digest, map(keyed, texts)))
    hashes = np.frombuffer(digests, dtype="<u8")
    t0, t1 = thresholds
    # A threshold of 2**64 (an empty later split) does not fit in uint64: every hash is below it.
    below_t0 = np.ones(len(hashes), bool) if t0 >= _SCALE else hashes < np.uint64(t0)
    below_t1 = np.ones(len(hashes), bool) if t1 >= _SCALE else hashes < np.uint64(t1)
    return np.where(below_t0, 0, np.where(below_t1, 1, 2)).astype(np.uint8)
