"""First pass over the corpus: clean, segment and assign splits, block by block.

Each block is turned into compact arrays (token type ids, sentence lengths, splits, line
numbers); Python-level segmentation runs once per distinct whitespace-separated chunk of the
block, not once per token.  Blocks may be processed in parallel; :class:`TypeTable` merges
their local type ids in block order, so the result is the same whatever the number of jobs.
"""

from __future__ import annotations

from collections import Counter
from concurrent.futures import Future, ProcessPoolExecutor
from dataclasses import dataclass
import multiprocessing
from typing import Callable, Iterable, Iterator, TypeVar

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from .clean import clean_block
from .recipe import CleanSpec
from .segment import segment
from .sources import Block
from .splits import assign_splits

T = TypeVar("T")
R = TypeVar("R")


@dataclass(frozen=True)
class ScanTask:
    block: Block
    display: str
    clean: CleanSpec
    seed: int
    thresholds: tuple[int, int]
    keep_text: bool = True


@dataclass(frozen=True)
class ScanResult:
    file_index: int
    local_types: list[str]      # surfaces, indexed by the block-local type id
    tokens: np.ndarray          # uint32 local type ids, all kept sentences concatenated
    lengths: np.ndarray         # int64 tokens per kept sentence
    splits: np.ndarray          # uint8 split index per kept sentence
    line_numbers: np.ndarray    # int64 1-based line of each kept sentence
    text: str                   # kept normalised sentences, LF-joined ("" unless keep_text)
    counters: Counter


_chunk_cache: dict[str, tuple[str, ...]] = {}


def _segment_chunk(chunk: str) -> tuple[str, ...]:
    tokens = _chunk_cache.get(chunk)
    if tokens is None:
        if len(_chunk_cache) > 2_000_000:
            _chunk_cache.clear()
        tokens = _chunk_cache[chunk] = tuple(segment(chunk))
    return tokens


def ragged_gather(starts: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """Indices ``starts[i] + 0 .. lengths[i]-1`` for every i, concatenated (int64).

    >>> ragged_gather(np.array([5, 0]), np.array([2, 3])).tolist()
    [5, 6, 0, 1, 2]
    """
    lengths = np.asarray(lengths, dtype=np.int64)
    total = int(lengths.sum())
    if total == 0:
        return np.zeros(0, dtype=np.int64)
    ends = np.cumsum(lengths)
    shift = np.asarray(starts, dtype=np.int64) - (ends - lengths)
    return np.arange(total, dtype=np.int64) + np.repeat(shift, lengths)


def scan_block(task: ScanTask) -> ScanResult:
    """Clean and segment one block into arrays (see the module docstring)."""
    cleaned = clean_block(task.block, task.clean, task.display)
    lines = cleaned.lines
    counters = cleaned.counters
    local: dict[str, int] = {}
    if not lines:
        empty = np.zeros(0, dtype=np.int64)
        return ScanResult(task.block.file_index, [], np.zeros(0, np.uint32), empty,
                          np.zeros(0, np.uint8), empty, "", counters)
    pieces = pc.split_pattern(pa.array(lines, type=pa.large_string()), " ")
    per_line_chunks = np.diff(pieces.offsets.to_numpy())
    encoded = pc.dictionary_encode(pieces.flatten())
    chunk_index = encoded.indices.to_numpy(zero_copy_only=False)
    seg_ids: list[int] = []
    seg_len = np.empty(len(encoded.dictionary), dtype=np.int64)
    for i, chunk in enumerate(encoded.dictionary.to_pylist()):
        tokens = _segment_chunk(chunk)
        seg_len[i] = len(tokens)
        for token in tokens:
            seg_ids.append(local.setdefault(token, len(local)))
    seg_start = np.concatenate(([0], np.cumsum(seg_len)[:-1])) if len(seg_len) else seg_len
    seg_array = np.asarray(seg_ids, dtype=np.uint32)
    occ_len = seg_len[chunk_index]
    tokens = seg_array[ragged_gather(seg_start[chunk_index], occ_len)]
    line_starts = np.concatenate(([0], np.cumsum(per_line_chunks)[:-1]))
    lengths = np.add.reduceat(occ_len, line_starts) if len(occ_len) else np.zeros(len(lines), np.int64)
    numbers = np.asarray(cleaned.line_numbers, dtype=np.int64)

    spec = task.clean
    keep = lengths >= spec.min_tokens
    if spec.max_tokens:
        keep &= lengths <= spec.max_tokens
    if not keep.all():
        counters["too_few_tokens_dropped"] += int((lengths < spec.min_tokens).sum())
        if spec.max_tokens:
            counters["too_many_tokens_dropped"] += int((lengths > spec.max_tokens).sum())
        tokens = tokens[np.repeat(keep, lengths)]
        lengths, numbers = lengths[keep], numbers[keep]
        lines = [line for line, k in zip(lines, keep) if k]
    counters["sentences_kept"] += len(lines)
    counters["tokens_kept"] += int(lengths.sum())
    splits = assign_splits(lines, task.seed, task.thresholds)
    text = "\n".join(lines) if task.keep_text else ""
    return ScanResult(task.block.file_index, list(local), tokens, lengths.astype(np.int64),
                      splits, numbers, text, counters)


class TypeTable:
    """Distinct token surfaces of one language, numbered in first-seen order of the corpus."""

    def __init__(self) -> None:
        self.index: dict[str, int] = {}
        self.surfaces: list[str] = []

    def __len__(self) -> int:
        return len(self.surfaces)

    def merge(self, local_types: list[str]) -> np.ndarray:
        """Intern a block's local types; return the local -> global id lookup table."""
        index, surfaces = self.index, self.surfaces
        lut = np.empty(len(local_types), dtype=np.uint32)
        for i, surface in enumerate(local_types):
            gid = index.get(surface)
            if gid is None:
                gid = index[surface] = len(surfaces)
                surfaces.append(surface)
            lut[i] = gid
        return lut


def _context() -> multiprocessing.context.BaseContext:
    """Workers come from a fork server: cheap to start, and never a fork of a parent whose
    library thread pools (pyarrow, tokenizers) are already running."""
    ctx = multiprocessing.get_context("forkserver")
    ctx.set_forkserver_preload(["bivocab.scan"])
    return ctx


def ordered_map(fn: Callable[[T], R], items: Iterable[T], jobs: int) -> Iterator[R]:
    """``map(fn, items)`` over ``jobs`` worker processes, in input order, with a bounded window
    of pending items so that a large corpus is never queued in memory."""
    if jobs <= 1:
        yield from map(fn, items)
        return
    with ProcessPoolExecutor(max_workers=jobs, mp_context=_context()) as pool:
        pending: list[Future] = []
        for item in items:
            pending.append(pool.submit(fn, item))
            if len(pending) >= 2 * jobs:
                yield pending.pop(0).result()
        for future in pending:
            yield future.result()
