"""Gathering each shard's type ids from the pass-1 token files with memory flat in corpus size.

The mixed order of a split picks sentences from all over a language's token file, so reading
them straight from a memory map would touch (and keep resident) the whole file for every shard.
Instead, one sequential pass per split and language copies every sentence's tokens into a
bucket file where each shard's sentences lie together (in row order); writing a shard then
reads one region per language.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np

from .scan import ragged_gather

# Tokens read from the token file at a time during the copy into buckets (each chunk costs
# about 16 bytes per token while it is copied, and two languages are copied at a time).
CHUNK_TOKENS = 1 << 20


class ShardBuckets:
    """Per-language bucket files of one split: ``tokens(li, shard, rows, lengths)`` returns the
    type ids of the given rows (a shard's sentences of language ``li``, in any order)."""

    def __init__(self, work: Path, split: str, langs: np.ndarray, rows: np.ndarray, shard_of: np.ndarray,
                 token_paths: list[Path], lengths: list[np.ndarray], starts: list[np.ndarray],
                 threads: int = 1) -> None:
        """``threads``: languages whose buckets are filled at the same time (numpy sorts and
        gathers and the file reads and writes release the GIL)."""
        n_shards = int(shard_of.max()) + 1 if len(shard_of) else 0

        def fill(li: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, Path]:
            # Entries by (shard, row): by row first (one sort), then a stable sort by shard
            # (a radix sort of small integers); the second permutation also leads from the
            # bucket order back to file order, which the copy needs. Temporaries are dropped
            # as soon as they are used: this runs for two languages at once on the largest split.
            mine = np.flatnonzero(langs == li)
            lang_rows = rows[mine]
            lang_shards = shard_of[mine].astype(np.uint16 if n_shards <= 1 << 16 else np.uint32)
            del mine
            by_row = np.argsort(lang_rows)
            to_bucket = np.argsort(lang_shards[by_row], kind="stable")
            order = by_row[to_bucket]
            del by_row
            position = np.int32 if len(order) < 1 << 31 else np.int64
            in_file_order = np.empty(len(order), dtype=position)
            in_file_order[to_bucket] = np.arange(len(order), dtype=position)
            del to_bucket
            sorted_rows = lang_rows[order]
            del lang_rows
            bounds = np.searchsorted(lang_shards[order], np.arange(n_shards + 1))
            del order, lang_shards
            sizes = np.asarray(lengths[li])[sorted_rows].astype(np.int64)
            local = np.zeros(len(sizes) + 1, dtype=np.int64)
            np.cumsum(sizes, out=local[1:])
            bucket = work / f"bucket.{split}.{li}.bin"
            _copy_into_bucket(token_paths[li], bucket, sorted_rows, local[:-1], sizes, np.asarray(starts[li]),
                              in_file_order)
            return sorted_rows, bounds, local, bucket

        if threads > 1 and len(token_paths) > 1:
            with ThreadPoolExecutor(max_workers=threads, thread_name_prefix="bivocab-buckets") as pool:
                filled = list(pool.map(fill, range(len(token_paths))))
        else:
            filled = [fill(li) for li in range(len(token_paths))]
        self._rows = [f[0] for f in filled]        # per language: rows sorted by (shard, row)
        self._bounds = [f[1] for f in filled]      # per language: first index of each shard in _rows
        self._local = [f[2] for f in filled]       # per language: bucket offset of each sorted row, and the end
        self._paths = [f[3] for f in filled]

    def tokens(self, li: int, shard: int, rows: np.ndarray, lengths: np.ndarray) -> np.ndarray:
        lo, hi = int(self._bounds[li][shard]), int(self._bounds[li][shard + 1])
        if lo == hi:
            return np.zeros(0, dtype=np.uint32)
        first, last = int(self._local[li][lo]), int(self._local[li][hi])
        region = np.fromfile(self._paths[li], dtype=np.uint32, count=last - first, offset=4 * first)
        # ``rows`` are all of the shard's rows of this language, which the bucket holds sorted:
        # each row's place there is its rank among them.
        at = np.empty(len(rows), dtype=np.int64)
        at[np.argsort(rows)] = np.arange(lo, hi)
        return region[ragged_gather(self._local[li][at] - first, lengths)]

    def remove(self) -> None:
        for path in self._paths:
            path.unlink(missing_ok=True)


def _copy_into_bucket(token_path: Path, bucket: Path, rows: np.ndarray, local: np.ndarray, sizes: np.ndarray,
                      starts: np.ndarray, by_row: np.ndarray) -> None:
    """Write each entry's tokens (``rows[i]``, ``sizes[i]`` tokens) at bucket offset ``local[i]``,
    reading the token file once, in order, a chunk at a time; ``by_row`` lists the entries in
    file order (ascending rows)."""
    file_starts = starts[rows[by_row]]
    with open(bucket, "wb") as out:
        out.truncate(4 * int(sizes.sum()))
        begin = 0
        while begin < len(by_row):
            end = max(begin + 1, int(np.searchsorted(file_starts, file_starts[begin] + CHUNK_TOKENS)))
            lo = int(file_starts[begin])
            hi = int(file_starts[end - 1] + sizes[by_row[end - 1]])
            chunk = np.fromfile(token_path, dtype=np.uint32, count=hi - lo, offset=4 * lo)
            # The chunk's entries in bucket order: each shard's part is one contiguous run.
            entries = np.sort(by_row[begin:end])
            part = chunk[ragged_gather(starts[rows[entries]] - lo, sizes[entries])]
            breaks = np.flatnonzero(np.diff(entries) != 1) + 1
            bounds = np.concatenate(([0], breaks, [len(entries)]))
            within = np.concatenate(([0], np.cumsum(sizes[entries])))
            for a, b in zip(bounds[:-1].tolist(), bounds[1:].tolist()):
                out.seek(4 * int(local[entries[a]]))
                out.write(part[within[a]:within[b]].tobytes())
            begin = end
