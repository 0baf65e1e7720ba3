"""Language mixing: the order of the two languages' sentences within each split.

The order is computed once per split over (language, sentence) offsets, never over strings,
and every condition of a build uses the same order.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .recipe import SPLITS, MixSpec


@dataclass(frozen=True)
class SplitOrder:
    """Sentences of one split in shard order: language index and the sentence's row in that
    language's scan arrays."""

    split: str
    langs: np.ndarray     # uint8
    rows: np.ndarray      # int64


def mix_split(split_index: int, rows_per_lang: list[np.ndarray], spec: MixSpec, seed: int) -> SplitOrder:
    """Order the sentences of one split. ``shuffled``: a seeded uniform permutation of both
    languages together (numpy PCG64 seeded with ``[seed, split_index]``)."""
    langs = np.concatenate([np.full(len(r), i, dtype=np.uint8) for i, r in enumerate(rows_per_lang)])
    rows = np.concatenate([np.asarray(r, dtype=np.int64) for r in rows_per_lang])
    if spec.order == "shuffled":
        rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence([seed, split_index])))
        perm = rng.permutation(len(rows))
        langs, rows = langs[perm], rows[perm]
    return SplitOrder(SPLITS[split_index], langs, rows)
