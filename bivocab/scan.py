"""First pass over the corpus: clean, segment and assign splits, block by block.

Each block is turned into compact arrays (token type ids, sentence lengths, splits, line
numbers).  Python-level segmentation runs once per distinct whitespace-separated chunk of the
corpus per worker, not once per token: every worker process keeps, per language, a
:class:`ChunkTable` of the chunks it has seen (their tokens as worker-local type ids), so a
block costs a dictionary encode (pyarrow), one dictionary look-up per distinct chunk of the
block, numpy gathers, and one keyed hash per sentence for its split.

Determinism: a result carries the token types its worker had not reported before, in the
order the worker first met them.  The parent merges each language's results in input order,
so every type is numbered by its first occurrence in that language's inputs, whatever the
number of jobs and whichever worker ran a block.
"""

from __future__ import annotations

import gc
import multiprocessing
import os
import queue
import time
from collections import Counter, deque
from dataclasses import dataclass
from itertools import repeat
from typing import Callable, Iterable, Iterator, TypeVar

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from .arrow import bool_numpy, int64_array, numpy_view
from .clean import clean_block, clean_block_bytes
from .errors import BivocabError
from .processes import worker_context
from .recipe import CleanSpec
from .segment import LATIN_LETTERS, segment
from .sources import Block, FileSpan
from .splits import assign_splits_utf8


class WorkerError(BivocabError):
    """A worker process died (killed, out of memory) instead of returning a result."""

    exit_code = 1


T = TypeVar("T")
R = TypeVar("R")

# Chunks that need no regex: ASCII punctuation or symbols, then a word of letters of the Latin-1
# and Latin Extended-A blocks (all of them ALetter, each its own grapheme cluster) or a number of
# ASCII digits joined across "." or "," between digits, then ASCII punctuation or symbols.
# segment() returns the word or number as one token and every mark as one token.
_MARKS = r"!-/:-@\[-`{-~"
_SIMPLE_CHUNK = (f"^(?P<before>[{_MARKS}]*)(?P<core>[{LATIN_LETTERS}]+|[0-9]+(?:[.,][0-9]+)*)"
                 f"(?P<after>[{_MARKS}]*) $")

# A worker forgets its chunks (not its types) beyond this many, so memory stays bounded on
# corpora with very many distinct chunks; forgotten chunks are segmented again when met.
MAX_CHUNKS = 2_000_000


@dataclass(frozen=True)
class ScanTask:
    block: Block | FileSpan     # a span is read by the worker itself
    display: str
    language: str
    clean: CleanSpec
    seed: int
    thresholds: tuple[int, int]
    session: str                # one value per build: workers reset their tables when it changes
    keep_text: bool = True


@dataclass(frozen=True)
class ScanResult:
    file_index: int
    language: str
    worker: int                 # process id of the worker; its type ids are local to it
    new_types: list[str]        # surfaces of worker type ids not reported before, in id order
    tokens: np.ndarray          # uint32 worker type ids, all kept sentences concatenated
    lengths: np.ndarray         # int64 tokens per kept sentence
    splits: np.ndarray          # uint8 split index per kept sentence
    line_numbers: np.ndarray    # int64 1-based line of each kept sentence
    text: str                   # kept normalised sentences, LF-joined ("" unless keep_text)
    counters: Counter
    seconds: dict[str, float]   # worker time per step: clean, segment, splits
    bytes_read: int             # size of the block's raw data
    span_lines: int | None = None   # for a span: its lines, numbered from 1 in line_numbers


class _Growing:
    """A numpy array that grows by doubling (amortised O(1) appends of slices)."""

    def __init__(self, dtype: type) -> None:
        self.data = np.zeros(1024, dtype=dtype)
        self.size = 0

    def extend(self, values: np.ndarray) -> None:
        end = self.size + len(values)
        if end > len(self.data):
            grown = np.zeros(max(end, 2 * len(self.data)), dtype=self.data.dtype)
            grown[:self.size] = self.data[:self.size]
            self.data = grown
        self.data[self.size:end] = values
        self.size = end


class ChunkTable:
    """One worker's memory of one language: distinct chunks -> tokens (worker type ids), and
    the worker's type table (surface -> worker type id)."""

    def __init__(self) -> None:
        self.types: dict[str, int] = {}
        self.surfaces: list[str] = []
        self.reported = 0
        self.forget_chunks()

    def forget_chunks(self) -> None:
        self.chunks: dict[str, int] = {}
        self.starts = _Growing(np.int64)
        self.lengths = _Growing(np.int64)
        self.flat = _Growing(np.uint32)

    def add(self, chunks: pa.Array) -> np.ndarray:
        """Segment chunks not seen before (distinct, each ending with one space); return their
        chunk ids.  New types are numbered in the order of their first token, chunk by chunk."""
        texts = chunks.to_pylist()
        first = len(self.chunks)
        self.chunks.update(zip(texts, range(first, first + len(texts))))
        parts = pc.extract_regex(chunks, _SIMPLE_CHUNK)     # null where the chunk has another shape
        valid = parts.is_valid()
        simple = bool_numpy(valid)
        other = np.flatnonzero(~simple)
        segmented = [segment(texts[i]) for i in other.tolist()]
        parts = parts.filter(valid)
        before, core, after = (parts.field(name) for name in ("before", "core", "after"))
        marks_before = numpy_view(pc.binary_length(before)).astype(np.int64)   # ASCII: bytes are characters
        marks_after = numpy_view(pc.binary_length(after)).astype(np.int64)
        lengths = np.empty(len(texts), dtype=np.int64)
        lengths[simple] = marks_before + 1 + marks_after
        lengths[other] = [len(tokens) for tokens in segmented]
        starts = np.cumsum(lengths) - lengths
        tokens = np.empty(int(lengths.sum()), dtype=object)
        core_at = starts[simple] + marks_before
        tokens[ragged_gather(starts[simple], marks_before)] = list("".join(before.to_pylist()))
        tokens[core_at] = core.to_pylist()
        tokens[ragged_gather(core_at + 1, marks_after)] = list("".join(after.to_pylist()))
        tokens[ragged_gather(starts[other], lengths[other])] = [t for ts in segmented for t in ts]
        types = self.types
        ids = np.fromiter(map(types.get, tokens, repeat(-1)), dtype=np.int64, count=len(tokens))
        unknown = np.flatnonzero(ids < 0)
        if len(unknown):
            new = list(dict.fromkeys(tokens[unknown].tolist()))
            types.update(zip(new, range(len(self.surfaces), len(self.surfaces) + len(new))))
            self.surfaces += new
            ids[unknown] = np.fromiter(map(types.__getitem__, tokens[unknown]), dtype=np.int64, count=len(unknown))
        self.starts.extend(self.flat.size + starts)
        self.lengths.extend(lengths)
        self.flat.extend(ids)
        return np.arange(first, first + len(texts), dtype=np.int64)

    def unreported(self) -> list[str]:
        """Surfaces of the types added since the last call, in type id order."""
        new = self.surfaces[self.reported:]
        self.reported = len(self.surfaces)
        return new


_tables: dict[str, ChunkTable] = {}
_session = ""


def _table(task: ScanTask) -> ChunkTable:
    global _session
    if task.session != _session:
        _tables.clear()
        _session = task.session
    table = _tables.get(task.language)
    if table is None:
        table = _tables[task.language] = ChunkTable()
    return table


def release_tables() -> None:
    """Drop this process's chunk tables (a build that scanned in-process calls it when done)."""
    global _session
    _tables.clear()
    _session = ""


def ragged_gather(starts: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """Indices ``starts[i] + 0 .. lengths[i]-1`` for every i, concatenated (int64).

    >>> ragged_gather(np.array([5, 0, 9]), np.array([2, 3, 0])).tolist()
    [5, 6, 0, 1, 2]
    """
    lengths = np.asarray(lengths, dtype=np.int64)
    starts = np.asarray(starts, dtype=np.int64)
    if len(lengths) and not lengths.min():
        starts, lengths = starts[lengths > 0], lengths[lengths > 0]
    total = int(lengths.sum())
    if total == 0:
        return np.zeros(0, dtype=np.int64)
    # Steps of one inside a run, and a jump to the next run's start at each run's first index.
    steps = np.ones(total, dtype=np.int64)
    steps[0] = starts[0]
    steps[np.cumsum(lengths[:-1])] = starts[1:] - starts[:-1] - lengths[:-1] + 1
    return np.cumsum(steps, out=steps)


def _chunk_array(data: bytes, separators: np.ndarray | None = None) -> tuple[pa.Array, np.ndarray]:
    """The space-separated chunks of LF-joined lines as an arrow string array (each chunk keeps
    the one space or line end after it, turned into a space), and the chunk count per line.
    ``separators``: the offsets of every space and LF in data, when already known."""
    raw = np.frombuffer(data, dtype=np.uint8)
    if separators is None:
        separators = np.flatnonzero((raw == 32) | (raw == 10))
    buffer = np.empty(len(raw) + 1, dtype=np.uint8)
    buffer[:-1] = raw
    buffer[-1] = 32
    line_ends = np.flatnonzero(raw[separators] == 10)
    buffer[separators] = 32
    large = len(buffer) >= 1 << 31
    offsets = np.empty(len(separators) + 2, dtype=np.int64 if large else np.int32)
    offsets[0], offsets[1:-1], offsets[-1] = 0, separators + 1, len(buffer)
    kind = pa.LargeStringArray if large else pa.StringArray
    chunks = kind.from_buffers(len(offsets) - 1, pa.py_buffer(offsets), pa.py_buffer(buffer))
    return chunks, np.diff(line_ends, prepend=-1, append=len(offsets) - 2)


def _lines_of(block: Block, clean: CleanSpec, display: str) -> tuple[bytes, np.ndarray | None, str | None, np.ndarray,
                                                                     Counter]:
    """The cleaned block: its kept lines' UTF-8 (LF-joined), the offsets of its spaces and LFs
    (None when not computed), its text when known, the lines' numbers, and the counters."""
    fast = clean_block_bytes(block, clean)
    if fast is not None:
        return fast.data, fast.separators, None, fast.line_numbers, fast.counters
    cleaned = clean_block(block, clean, display)
    text = "\n".join(cleaned.lines)
    return (text.encode("utf-8"), None, text, np.asarray(cleaned.line_numbers, dtype=np.int64),
            cleaned.counters)


def _size(block: Block | FileSpan) -> int:
    return block.end - block.start if isinstance(block, FileSpan) else len(block.data)


def scan_block(task: ScanTask) -> ScanResult:
    """Clean and segment one block into arrays (see the module docstring)."""
    started = time.perf_counter()
    table = _table(task)
    if len(table.chunks) > MAX_CHUNKS:
        table.forget_chunks()
    if isinstance(task.block, FileSpan):
        block = task.block.read()
        span_lines: int | None = block.line_count
    else:
        block, span_lines = task.block, None
    data, separators, text, numbers, counters = _lines_of(block, task.clean, task.display)
    cleaned_at = time.perf_counter()
    if not len(numbers):
        empty = np.zeros(0, dtype=np.int64)
        return ScanResult(block.file_index, task.language, os.getpid(), table.unreported(),
                          np.zeros(0, np.uint32), empty, np.zeros(0, np.uint8), empty, "", counters,
                          {"clean": cleaned_at - started}, _size(task.block), span_lines)
    chunks, chunks_per_line = _chunk_array(data, separators)
    encoded = pc.dictionary_encode(chunks)
    distinct = encoded.dictionary.to_pylist()
    chunk_ids = np.fromiter(map(table.chunks.get, distinct, repeat(-1)), dtype=np.int64, count=len(distinct))
    missing = np.flatnonzero(chunk_ids < 0)
    if len(missing):
        # In first-seen order, so that new types get worker ids in corpus order.
        gc_was_enabled = gc.isenabled()
        gc.disable()  # many small objects and no cycles: the collector would only add time
        try:
            chunk_ids[missing] = table.add(encoded.dictionary.take(int64_array(missing)))
        finally:
            if gc_was_enabled:
                gc.enable()
    # The tokens of the block's distinct chunks, then of every occurrence (gathers from the
    # small per-block arrays rather than from the worker's whole table).
    distinct_lengths = table.lengths.data[chunk_ids]
    distinct_tokens = table.flat.data[ragged_gather(table.starts.data[chunk_ids], distinct_lengths)]
    distinct_starts = np.cumsum(distinct_lengths) - distinct_lengths
    indices = numpy_view(encoded.indices)
    occurrence_lengths = distinct_lengths[indices]
    tokens = distinct_tokens[ragged_gather(distinct_starts[indices], occurrence_lengths)]
    line_starts = np.cumsum(chunks_per_line) - chunks_per_line
    lengths = np.add.reduceat(occurrence_lengths, line_starts)
    segmented_at = time.perf_counter()
    lines = data.split(b"\n")
    splits = assign_splits_utf8(lines, task.seed, task.thresholds)

    spec = task.clean
    keep = lengths >= spec.min_tokens
    if spec.max_tokens:
        keep &= lengths <= spec.max_tokens
    if not keep.all():
        counters["too_few_tokens_dropped"] += int((lengths < spec.min_tokens).sum())
        if spec.max_tokens:
            counters["too_many_tokens_dropped"] += int((lengths > spec.max_tokens).sum())
        tokens = tokens[np.repeat(keep, lengths)]
        lengths, numbers, splits = lengths[keep], numbers[keep], splits[keep]
        if task.keep_text:
            text = b"\n".join(line for line, k in zip(lines, keep.tolist()) if k).decode("utf-8")
    if task.keep_text and text is None:
        text = data.decode("utf-8")
    counters["sentences_kept"] += len(lengths)
    counters["tokens_kept"] += int(lengths.sum())
    done = time.perf_counter()
    return ScanResult(block.file_index, task.language, os.getpid(), table.unreported(), tokens,
                      lengths.astype(np.int64), splits, numbers, text if task.keep_text else "", counters,
                      {"clean": cleaned_at - started, "segment": segmented_at - cleaned_at,
                       "splits": done - segmented_at}, _size(task.block), span_lines)


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
        # Usually none of a worker's new types is known yet (a worker per language): add them
        # all at once.  (A worker reports each of its types once, so ``local_types`` are distinct.)
        if index.keys().isdisjoint(local_types):
            first = len(surfaces)
            index.update(zip(local_types, range(first, first + len(local_types))))
            surfaces += local_types
            return np.arange(first, first + len(local_types), dtype=np.uint32)
        lut = np.empty(len(local_types), dtype=np.uint32)
        for i, surface in enumerate(local_types):
            gid = index.get(surface)
            if gid is None:
                gid = index[surface] = len(surfaces)
                surfaces.append(surface)
            lut[i] = gid
        return lut


class WorkerTypeMaps:
    """Per (worker, language): the lookup table from worker type ids to the language's
    :class:`TypeTable` ids, extended with each result's new types."""

    def __init__(self) -> None:
        self._luts: dict[tuple[int, str], np.ndarray] = {}

    def global_ids(self, result: ScanResult, table: TypeTable) -> np.ndarray:
        key = (result.worker, result.language)
        lut = self._luts.get(key, np.zeros(0, dtype=np.uint32))
        if result.new_types:
            lut = self._luts[key] = np.concatenate((lut, table.merge(result.new_types)))
        return lut[result.tokens] if len(result.tokens) else np.zeros(0, np.uint32)


def _serve(fn: Callable[[T], R], inbox: multiprocessing.Queue, outbox: multiprocessing.Queue,
           parent: int) -> None:
    """Worker process: apply ``fn`` to each item of ``inbox`` in order until ``None`` arrives,
    or until the process ``parent`` that feeds it is gone (a killed build leaves no worker behind)."""
    while True:
        try:
            item = inbox.get(timeout=1.0)
        except queue.Empty:
            try:
                os.kill(parent, 0)
            except ProcessLookupError:
                return
            continue
        if item is None:
            return
        try:
            outbox.put((True, fn(item)))
        except BaseException as exc:  # handed to the parent, which raises it
            outbox.put((False, exc))


# Items queued per worker: enough to keep it busy while the parent merges, few enough that a
# large corpus is never queued in memory.
WINDOW = 2


def ordered_map(fn: Callable[[T], R], items: Iterable[T], jobs: int,
                affinity: Callable[[T], int] | None = None) -> Iterator[R]:
    """``map(fn, items)`` over ``jobs`` worker processes, yielding results in input order, with
    at most WINDOW items queued per worker.

    ``affinity(item)`` names a preferred worker (modulo ``jobs``): items with the same affinity
    go to the same worker while it keeps up, so its per-process caches stay warm; an item
    whose worker is busy goes to the least busy one instead.  Which worker ran an item never
    changes a result (see the module docstring).
    """
    if jobs <= 1:
        yield from map(fn, items)
        return
    ctx = worker_context()
    inboxes = [ctx.Queue() for _ in range(jobs)]
    outboxes = [ctx.Queue() for _ in range(jobs)]
    workers = [ctx.Process(target=_serve, args=(fn, inboxes[w], outboxes[w], os.getpid()), daemon=True)
               for w in range(jobs)]
    for worker in workers:
        worker.start()
    load = [0] * jobs
    order: deque[int] = deque()

    def oldest() -> R:
        w = order.popleft()
        while True:
            try:
                ok, value = outboxes[w].get(timeout=0.5)
                break
            except queue.Empty:
                if not workers[w].is_alive():
                    raise WorkerError(f"worker process {workers[w].pid} stopped unexpectedly "
                                      f"(exit code {workers[w].exitcode}); the build was not completed") from None
        load[w] -= 1
        if not ok:
            raise value
        return value

    finished = False
    try:
        for item in items:
            home = affinity(item) % jobs if affinity is not None else min(range(jobs), key=load.__getitem__)
            while True:
                free = [w for w in range(jobs) if load[w] < WINDOW]
                if free:
                    break
                yield oldest()
            w = home if home in free else min(free, key=load.__getitem__)
            inboxes[w].put(item)
            load[w] += 1
            order.append(w)
        while order:
            yield oldest()
        finished = True
    finally:
        for inbox, worker in zip(inboxes, workers):
            if finished:
                inbox.put(None)
            else:
                inbox.cancel_join_thread()
                worker.terminate()
        for worker in workers:
            worker.join()
        for box in outboxes:
            box.cancel_join_thread()
