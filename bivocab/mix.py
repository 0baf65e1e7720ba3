"""Language mixing: which sentences of the two languages enter each split, and in what order.

The order is computed once per split over (language, sentence) offsets, never over strings,
and every condition of a build uses the same order.  Balancing resamples each language to a
target size given by exponent-smoothed sampling (docs/mixing.md).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .recipe import SPLITS, MixSpec


@dataclass(frozen=True)
class SplitOrder:
    """Sentences of one split in shard order: language index and the sentence's row in that
    language's scan arrays (a row appears more than once when a language is upsampled)."""

    split: str
    langs: np.ndarray     # uint8
    rows: np.ndarray      # int64
    sampling: dict | None = None   # what balancing did (None when the split was not balanced)


def smoothed_probabilities(sizes: list[float] | np.ndarray, alpha: float) -> np.ndarray:
    """q_i = p_i^alpha / sum_j p_j^alpha with p_i = n_i / sum_j n_j (Lample & Conneau 2019).

    >>> smoothed_probabilities([900, 100], 0.5).round(6).tolist()
    [0.75, 0.25]
    """
    n = np.asarray(sizes, dtype=np.float64)
    p = n / n.sum()
    powered = np.where(p > 0, p ** alpha, 0.0)
    return powered / powered.sum()


def sampling_targets(sizes: list[float] | np.ndarray, alpha: float, resample: str) -> np.ndarray:
    """Target size of each language so that the sizes are in the ratio of the smoothed
    probabilities: ``down`` keeps the language with the smallest n_i / q_i whole and
    downsamples the others; ``up`` keeps the one with the largest whole and upsamples.

    >>> sampling_targets([900, 100], 0.5, "down").round(6).tolist()
    [300.0, 100.0]
    >>> sampling_targets([900, 100], 0.5, "up").round(6).tolist()
    [900.0, 300.0]
    """
    n = np.asarray(sizes, dtype=np.float64)
    q = smoothed_probabilities(n, alpha)
    ratios = n[q > 0] / q[q > 0]
    total = ratios.min() if resample == "down" else ratios.max()
    return q * total


def _rng(seed: int, *path: int) -> np.random.Generator:
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence([seed, *path])))


def _resample_rows(rows: np.ndarray, lengths: np.ndarray, target: float, unit: str,
                   rng: np.random.Generator) -> np.ndarray:
    """Rows of one language resampled to ``target`` sentences or tokens: whole copies of the
    language, then a seeded random subset for the remainder (rows keep their input order
    inside each copy; the final order is set later)."""
    size = len(rows) if unit == "sentences" else int(lengths.sum())
    if size == 0:
        return rows
    whole = int(target // size) if target >= size else 0
    rest = target - whole * size
    perm = rng.permutation(len(rows))
    if unit == "sentences":
        count = min(len(rows), int(np.floor(rest + 0.5)))
    else:
        # The longest prefix of the permutation whose tokens do not exceed the remainder.
        count = int(np.searchsorted(np.cumsum(lengths[perm]), rest + 0.5, side="right"))
    chosen = np.sort(perm[:count])
    return np.concatenate([np.tile(rows, whole), rows[chosen]])


def mix_split(split_index: int, rows_per_lang: list[np.ndarray], spec: MixSpec, seed: int,
              lengths_per_lang: list[np.ndarray]) -> SplitOrder:
    """Balance (when asked, for this split) and order the sentences of one split.

    ``rows_per_lang[i]`` are language i's sentences in this split (rows of its scan arrays,
    in input order); ``lengths_per_lang[i]`` the token count of every row of language i.  Random choices use numpy PCG64 seeded with
    ``[seed, split_index, ...]``, so they do not depend on the condition.
    """
    split = SPLITS[split_index]
    rows_per_lang = [np.asarray(r, dtype=np.int64) for r in rows_per_lang]
    sampling = None
    if spec.balance != "none" and split in spec.balance_splits and all(len(r) for r in rows_per_lang):
        lengths = [np.asarray(lengths_per_lang[i], dtype=np.int64)[r] for i, r in enumerate(rows_per_lang)]
        sizes = [len(r) if spec.balance == "sentences" else int(l.sum()) for r, l in zip(rows_per_lang, lengths)]
        targets = sampling_targets(sizes, spec.alpha, spec.resample)
        if spec.resample == "down":
            targets = np.minimum(targets, sizes)   # the whole language, not a rounding above it
        else:
            targets = np.maximum(targets, sizes)
        resampled = [_resample_rows(r, l, float(t), spec.balance, _rng(seed, split_index, 1, i))
                     for i, (r, l, t) in enumerate(zip(rows_per_lang, lengths, targets))]
        sampling = {"unit": spec.balance, "alpha": spec.alpha, "resample": spec.resample,
                    "available": [int(s) for s in sizes],
                    "probabilities": [round(float(p), 6) for p in smoothed_probabilities(sizes, spec.alpha)],
                    "target": [round(float(t), 3) for t in targets],
                    "sentences": [len(r) for r in resampled],
                    "tokens": [int(np.asarray(lengths_per_lang[i])[r].sum()) for i, r in enumerate(resampled)]}
        rows_per_lang = resampled
    langs = np.concatenate([np.full(len(r), i, dtype=np.uint8) for i, r in enumerate(rows_per_lang)])
    rows = np.concatenate(rows_per_lang) if rows_per_lang else np.zeros(0, np.int64)
    if spec.order == "shuffled":
        perm = _rng(seed, split_index).permutation(len(rows))
        return SplitOrder(split, langs[perm], rows[perm], sampling)
    if spec.within_language == "shuffled":
        rows_per_lang = [r[_rng(seed, split_index, 2, i).permutation(len(r))] for i, r in enumerate(rows_per_lang)]
        rows = np.concatenate(rows_per_lang)
    if spec.order == "alternating":
        # One sentence of each language in turn (recipe order); the rest of the larger follows.
        rank = np.concatenate([np.arange(len(r)) for r in rows_per_lang])
        perm = np.lexsort((langs, rank))
        return SplitOrder(split, langs[perm], rows[perm], sampling)
    return SplitOrder(split, langs, rows, sampling)   # blocked: all of one language, then the other
