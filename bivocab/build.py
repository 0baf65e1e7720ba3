"""The build: recipe -> scan -> vocabularies -> mixed shards -> build.json.

One pass over the text segments every sentence into per-language type ids (kept on disk in a
work directory); every word-level condition is then a lookup table applied with numpy.
"""

from __future__ import annotations

import contextlib
import dataclasses
import functools
import gc
import os
import shutil
import time
import uuid
from collections import Counter
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator

import numpy as np

from . import __version__
from .errors import BivocabError, LineError, OutputError
from .hygiene import prepare_hygiene
from .manifest import (CONTENT_SCHEME, CONTROL_FILES, INCOMPLETE, LOCK, MANIFEST, WORK, atomic_open,
                       atomic_write_text, background_digests, build_lock, canonical_json, check_inputs_unchanged,
                       checkpoint, deferred_syncs, environment, file_record, fsync_dir, read_manifest,
                       remove_temp_files, sha256_file, start_hashing_inputs, sync_files, write_error)
from .memory import release_free_memory
from .mix import SplitOrder, mix_split
from .recipe import SPLITS, Recipe, load_recipe
from .gather import ShardBuckets
from .progress import BuildMeter
from .processes import start_worker_server
from .scan import (ScanResult, ScanTask, TypeTable, WorkerTypeMaps, ordered_map, ragged_gather, release_tables,
                   scan_block)
from .resume import ShardJournal, build_fingerprint
from .shards import PROVENANCE_DTYPE, ShardWriter, shard_stem, write_npy
from .sources import COMPRESSION_SUFFIXES, InputFile, input_format, read_blocks, text_spans
from .splits import split_thresholds
from .subword import (SentenceText, SubwordCondition, build_subword_condition, model_path, tokenizer_path,
                      unigram_tokenizer_json)
from .vocab import (TypeIndex, Vocabulary, build_vocabulary, index_types, language_types_tsv,
                    same_tokenizer_for_every_language, tokenizer_json, vocab_tsv)


# Bytes of text per scan block.  Larger blocks repeat more of their chunks, so a worker looks
# up fewer distinct chunks per token (16 MiB: about a fifth faster than 4 MiB, at the price of
# a few hundred MB of working memory per worker).
SCAN_BLOCK_BYTES = 16 << 20


@dataclass
class LanguageScan:
    """Everything pass 1 learned about one language; the big arrays live in the work dir."""

    tag: str
    table: TypeTable = field(default_factory=TypeTable)
    split_counts: np.ndarray = field(default_factory=lambda: np.zeros((3, 0), dtype=np.int64))
    sentences: int = 0
    tokens: int = 0


@dataclass(frozen=True)
class SplitSummary:
    sentences: int
    tokens: int                       # without end-of-sentence tokens
    oov: tuple[int, ...]              # tokens mapped to an unknown id, per language
    tokens_per_lang: tuple[int, ...]


@dataclass(frozen=True)
class ConditionSummary:
    name: str
    policy: str
    size: int
    splits: dict[str, SplitSummary]


@dataclass(frozen=True)
class BuildResult:
    out: Path
    manifest: dict[str, Any]
    summaries: tuple[ConditionSummary, ...]
    reused_shards: tuple[str, ...] = ()   # shards that --resume took over, hash-checked
    total_shards: int = 0
    was_incomplete: bool = False          # ``out`` held an interrupted (or failed) build before


# A meter (timings, bars), or a function called with the name of each stage as it starts.
Progress = BuildMeter | Callable[[str], None]


def _quiet(_: str) -> None:
    pass


def input_files(recipe: Recipe) -> list[InputFile]:
    base = recipe.base_dir
    return [InputFile(base / f, f, lang.tag, lang.read) for lang in recipe.languages for f in lang.files]


def check_output_dir(out: Path, recipe: Recipe, force: bool) -> None:
    """Refuse to write into a directory that holds something other than a build of this recipe."""
    if not out.exists():
        return
    if not out.is_dir():
        raise OutputError(f"{out}: exists and is not a directory")
    names = {p.name for p in out.iterdir()} - {LOCK, WORK}
    if not names or force:
        return
    marker = out / INCOMPLETE
    if marker.exists():
        if _marker_lines(marker)[:1] == [recipe.name]:
            return
        raise OutputError(f"{out}: holds an incomplete build of another recipe; choose another --out "
                          "or pass --force to replace it")
    manifest = read_manifest(out)
    if manifest is not None and manifest.get("recipe", {}).get("name") == recipe.name:
        return
    what = (f"a build of recipe '{manifest['recipe']['name']}'" if manifest and "recipe" in manifest
            else "files that are not a bivocab build of this recipe")
    raise OutputError(f"{out}: directory holds {what}; choose another --out or pass --force to replace it")


def build(recipe: Recipe | str | os.PathLike[str], out: str | os.PathLike[str], jobs: int = 1,
          force: bool = False, progress: Progress = _quiet, resume: bool = False) -> BuildResult:
    """Build every condition of ``recipe`` into directory ``out`` and return the summary.

    Crash safety: every file goes to a temporary name and is renamed into place; from the
    first write until ``build.json`` (written last) is in place, ``out`` holds the incomplete
    marker, so a killed build never leaves a directory that looks complete.  With ``resume``
    the shards an interrupted build of the same recipe, inputs and versions completed are
    reused after their hashes are checked (see :mod:`bivocab.resume`).
    """
    if not isinstance(recipe, Recipe):
        recipe = load_recipe(recipe)
    if jobs < 1:
        raise BivocabError(f"--jobs must be >= 1, got {jobs}")
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out}: exists and is not a directory")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{out}: cannot create output directory: {exc.strerror}") from None
    if not os.access(out, os.W_OK):
        raise OutputError(f"{out}: output directory is not writable")
    try:
        with build_lock(out):
            return _build_locked(recipe, out, jobs, force, progress, resume)
    except OSError as exc:
        raise write_error(out, exc) from None


def _build_locked(recipe: Recipe, out: Path, jobs: int, force: bool, progress: Progress,
                  resume: bool) -> BuildResult:
    work = out / WORK
    try:
        check_output_dir(out, recipe, force)
        was_incomplete = (out / INCOMPLETE).exists()
        journal = ShardJournal(out, resume)
        stale = _known_files(out, journal)
        # From here until build.json is renamed into place the directory is incomplete. The
        # marker lists the files of earlier builds, so that a rerun after a kill still removes them.
        atomic_write_text(out / INCOMPLETE, "\n".join([recipe.name, *sorted(stale)]) + "\n")
        fsync_dir(out)
        with contextlib.suppress(FileNotFoundError):
            (out / MANIFEST).unlink()
        remove_temp_files(out)
        shutil.rmtree(work, ignore_errors=True)
        work.mkdir()

        meter = progress if isinstance(progress, BuildMeter) else BuildMeter(on_stage=progress)
        meter.stage_hooks.insert(0, lambda stage: checkpoint(f"stage:{stage}"))
        with background_digests(jobs > 1), deferred_syncs(), contextlib.ExitStack() as background:
            result = _build_into(recipe, out, work, jobs, meter, journal, background)
        meter.begin("finish")   # stale files, file and directory syncs, build.json
        _remove_stale(out, stale, result.manifest)
        # Output files were renamed into place without waiting for the disk; they all reach it
        # here, before build.json vouches for them (a shard the journal lists is hash-checked
        # before --resume reuses it, so the journal needs no synced shard either).
        sync_files(out / f["path"] for f in result.manifest["files"])
        for directory in {(out / f["path"]).parent for f in result.manifest["files"]}:
            fsync_dir(directory)
        checkpoint("manifest")
        atomic_write_text(out / MANIFEST, canonical_json(result.manifest))
        fsync_dir(out)
        checkpoint("finish")
        journal.remove()
        (out / INCOMPLETE).unlink()
        fsync_dir(out)
        meter.end()
        return dataclasses.replace(result, was_incomplete=was_incomplete)
    finally:
        shutil.rmtree(work, ignore_errors=True)


def _marker_lines(marker: Path) -> list[str]:
    try:
        return marker.read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError):
        return []


def _known_files(out: Path, journal: ShardJournal) -> set[str]:
    """Files of earlier builds in ``out``: the last complete build.json, the list an interrupted
    build carried in its marker, and the shards it journaled."""
    known = set(_marker_lines(out / INCOMPLETE)[1:]) | journal.known_paths()
    previous = None
    with contextlib.suppress(OutputError):  # an unreadable build.json (--force) lists nothing
        previous = read_manifest(out)
    if previous:
        known |= {entry.get("path", "") for entry in previous.get("files", [])}
    return {p for p in known if p and not os.path.isabs(p) and ".." not in Path(p).parts
            and p not in CONTROL_FILES}


def _remove_stale(out: Path, known: set[str], manifest: dict[str, Any]) -> None:
    """Delete what earlier builds left that this one did not write: the files they listed, and
    any other file in a directory of this build's files (e.g. a shard of an interrupted run
    with more shards). Directories left empty go too."""
    keep = {f["path"] for f in manifest["files"]}
    candidates = set(known)
    for directory in {Path(p).parent for p in keep} - {Path(".")}:
        for entry in os.scandir(out / directory):
            if entry.is_file(follow_symlinks=False):
                candidates.add((directory / entry.name).as_posix())
    for path in sorted(candidates - keep):
        with contextlib.suppress(FileNotFoundError):
            (out / path).unlink()
        parent = (out / path).parent
        while parent != out and parent.is_dir() and not any(parent.iterdir()):
            parent.rmdir()
            parent = parent.parent


def read_as_spans(source: InputFile) -> bool:
    """Whether the scan workers read the input themselves (uncompressed text taken line by
    line), so that its bytes never pass through the build process."""
    return (input_format(source) == "text" and source.path.suffix.lower() not in COMPRESSION_SUFFIXES
            and not source.read.split_sentences and source.path.is_file())   # a regular file: its size is its length


def _scan_tasks(recipe: Recipe, files: list[InputFile], keep_text: bool) -> Iterator[ScanTask]:
    """Blocks of every input, the languages' streams interleaved block by block so that each
    worker can keep to one language (results do not depend on the interleaving: each language
    is merged in its own input order).  ``keep_text``: results carry the sentences' text (costly
    to send back from the workers; hygiene and subword training need it)."""
    thresholds = split_thresholds(recipe.splits)
    session = uuid.uuid4().hex

    def language_stream(tag: str) -> Iterator[ScanTask]:
        for index, source in enumerate(files):
            if source.language == tag:
                blocks = (text_spans(source, index, SCAN_BLOCK_BYTES) if read_as_spans(source)
                          else read_blocks(source, index, block_bytes=SCAN_BLOCK_BYTES))
                for block in blocks:
                    yield ScanTask(block, source.display, tag, recipe.clean, recipe.seed, thresholds, session,
                                   keep_text)

    streams = [language_stream(tag) for tag in recipe.tags]
    while streams:
        for stream in list(streams):
            task = next(stream, None)
            if task is None:
                streams.remove(stream)
            else:
                yield task


def _in_file_lines(results: Iterator[ScanResult], files: list[InputFile]) -> Iterator[ScanResult]:
    """The scan's results with the line numbers of spans (counted from 1 in each span) made
    file line numbers, in input order; a worker's error at a line of a span likewise."""
    spans = {f.display: i for i, f in enumerate(files) if read_as_spans(f)}
    lines_before = [0] * len(files)   # of each file's spans merged so far
    try:
        for result in results:
            if result.span_lines is not None:
                shift = lines_before[result.file_index]
                lines_before[result.file_index] += result.span_lines
                if shift:
                    result = dataclasses.replace(result, line_numbers=result.line_numbers + shift)
            yield result
    except LineError as exc:
        if exc.display in spans:
            raise exc.shifted(lines_before[spans[exc.display]]) from None
        raise


class _WorkArrays:
    """Append-only binary files of one language in the work directory."""

    NAMES = {"tokens": np.uint32, "lengths": np.int64, "splits": np.uint8, "lines": np.int64, "inputs": np.uint32}

    def __init__(self, work: Path, tag: str):
        self.paths = {n: work / f"{tag}.{n}.bin" for n in self.NAMES}
        self.handles = {n: open(p, "wb") for n, p in self.paths.items()}
        self.text = open(work / f"{tag}.text", "wb")

    def append(self, result: ScanResult, global_tokens: np.ndarray) -> None:
        # The files take the arrays' own buffers (no copy when the dtype is already right).
        for name, values in (("tokens", global_tokens), ("lengths", result.lengths), ("splits", result.splits),
                             ("lines", result.line_numbers)):
            self.handles[name].write(np.ascontiguousarray(values, dtype=self.NAMES[name]).view(np.uint8))
        self.handles["inputs"].write(np.full(len(result.lengths), result.file_index, np.uint32).view(np.uint8))
        if result.text:
            self.text.write(result.text.encode("utf-8") + b"\n")

    def close(self) -> dict[str, np.ndarray]:
        for handle in [*self.handles.values(), self.text]:
            handle.close()
        arrays = {}
        for name, dtype in self.NAMES.items():
            path = self.paths[name]
            arrays[name] = (np.memmap(path, dtype=dtype, mode="r") if path.stat().st_size
                            else np.zeros(0, dtype=dtype))
        return arrays


def _without_cyclic_gc(fn: Callable[..., BuildResult]) -> Callable[..., BuildResult]:
    """Run ``fn`` with Python's cyclic garbage collector paused: a build allocates millions of
    small acyclic objects (type tables, vocabulary entries), and repeated full collections
    over them cost about as much as the work itself."""
    @functools.wraps(fn)
    def paused(*args: Any, **kwargs: Any) -> BuildResult:
        was_enabled = gc.isenabled()
        gc.disable()
        try:
            return fn(*args, **kwargs)
        finally:
            if was_enabled:
                gc.enable()
    return paused


@_without_cyclic_gc
def _build_into(recipe: Recipe, out: Path, work: Path, jobs: int, meter: BuildMeter,
                journal: ShardJournal, background: contextlib.ExitStack) -> BuildResult:
    """The build's stages; threads it starts are entered into ``background`` (joined by the caller)."""
    tags = recipe.tags
    files = input_files(recipe)
    # --jobs N keeps at most N cores busy: with more than one, the inputs are hashed beside the
    # scan (the journal needs the hashes only after it) and shard digests beside the writing.
    if jobs > 1:
        start_worker_server()
        input_states = start_hashing_inputs(files)
    else:
        with meter.stage("hash inputs", total=len(files), unit="files"):
            input_states = start_hashing_inputs(files, background=False)

    scans = [LanguageScan(tag) for tag in tags]
    writers = [_WorkArrays(work, tag) for tag in tags]
    lang_of_file = [tags.index(f.language) for f in files]
    per_file: list[Counter] = [Counter() for _ in files]
    plain = all(f.path.suffix.lower() not in (".gz", ".bz2", ".xz", ".lzma", ".zst") for f in files)
    total_bytes = sum(os.path.getsize(f.path) for f in files) if plain else None
    hygiene = prepare_hygiene(recipe, files, jobs)
    with meter.stage("scan", total=total_bytes, unit="B") as advance:
        type_maps = WorkerTypeMaps()
        # The sentences' text goes to the work directory only for hygiene and subword training.
        keep_text = hygiene.active or any(cond.units != "word" for cond in recipe.conditions)
        results = ordered_map(scan_block, _scan_tasks(recipe, files, keep_text), jobs,
                              affinity=lambda task: tags.index(task.language))
        for result in _in_file_lines(results, files):
            started = time.perf_counter()
            li = lang_of_file[result.file_index]
            result = hygiene.filter_scan(result, li)
            scan = scans[li]
            per_file[result.file_index].update(result.counters)
            global_tokens = type_maps.global_ids(result, scan.table)
            _count_by_split(scan, global_tokens, result)
            writers[li].append(result, global_tokens)
            for step, seconds in result.seconds.items():
                meter.detail(f"workers: {step}", seconds)
            meter.detail("merge, count, spill", time.perf_counter() - started)
            advance(result.bytes_read, words=len(global_tokens))
    release_tables()
    arrays = [w.close() for w in writers]
    if jobs > 1:
        meter.begin("hash inputs")   # what is left of hashing the inputs after the scan (usually nothing)
    states = input_states()
    check_inputs_unchanged(files, states)
    hashes = {display: state.sha256 for display, state in states.items()}
    journal.begin(build_fingerprint(recipe.resolved(), hashes))
    for scan in scans:
        scan.split_counts = scan.split_counts[:, :len(scan.table)]
    if any(scan.sentences == 0 for scan in scans):
        empty = next(s.tag for s in scans if s.sentences == 0)
        raise BivocabError(f"{recipe.path}: language '{empty}' has no sentences after cleaning")

    # Each split's mixed order, shard boundaries and bucket files depend on the scan alone: with
    # more than one core they are prepared by a thread of their own while the vocabularies are built.
    starts = [np.concatenate(([0], np.cumsum(a["lengths"])[:-1])).astype(np.int64) if len(a["lengths"])
              else np.zeros(0, np.int64) for a in arrays]
    prepare = functools.partial(_prepare_split, recipe=recipe, arrays=arrays, work=work,
                                token_paths=[w.paths["tokens"] for w in writers], starts=starts,
                                threads=min(jobs, len(tags)))
    # The smaller splits' shards are written first, while the largest split's buckets are still
    # being filled (the order in which shards are written changes no output): one thread
    # prepares the largest split from the start, another the others in turn.
    split_order = sorted(range(len(SPLITS)), key=lambda si: getattr(recipe.splits, SPLITS[si]))
    if jobs > 1:
        preparing = background.enter_context(_threads(2, "bivocab-split-prep"))
        prepared = {si: preparing.submit(prepare, si).result for si in split_order[-1:] + split_order[:-1]}
    else:
        prepared = {si: functools.partial(prepare, si) for si in split_order}

    surfaces = [scan.table.surfaces for scan in scans]
    subwords: dict[str, SubwordCondition] = {}
    subword_conditions = [cond for cond in recipe.conditions if cond.units != "word"]
    if subword_conditions:
        with meter.stage("subword models", total=len(subword_conditions), unit="conditions") as advance:
            texts = [SentenceText(work / f"{tag}.text", scan.sentences) for tag, scan in zip(tags, scans)]
            for cond in subword_conditions:
                subwords[cond.name] = build_subword_condition(cond, recipe, texts, [a["splits"] for a in arrays],
                                                              work, jobs)
                advance(1)
    vocabs = []
    with meter.stage("vocabulary", total=len(recipe.conditions), unit="conditions") as advance:
        type_index = index_types(surfaces)   # classes and code point ranks, shared by all conditions
        for cond in recipe.conditions:
            vocabs.append(subwords[cond.name].vocab if cond.name in subwords else
                          build_vocabulary(cond, tags, surfaces, [scan.split_counts[0] for scan in scans],
                                           type_index))
            advance(1)

    advance = meter.begin("shards", total=sum(s.sentences for s in scans), unit="sentences")
    # A shard is reused only if it was encoded with the same look-up tables and specials (and
    # subword models): they alone decide its ids.
    journal.bind_vocabularies([encoding_key(v) for v in vocabs]
                              + [model for sub in subwords.values() for model in sub.models])
    vocab_files = VocabFiles(out, recipe, vocabs, subwords, scans, type_index)
    written: list[str] = []
    shard_paths: dict[str, dict[str, list[str]]] = {c.name: {} for c in recipe.conditions}
    stats = {c.name: {s: [0, 0, [0] * len(tags), [0] * len(tags)] for s in SPLITS} for c in recipe.conditions}
    mixing: dict[str, dict] = {}
    shard_writer = ShardWriter(out, recipe.shards, tags, [f.display for f in files])
    # Shards are written by ``jobs`` threads (the gathers, look-ups, writes and hashes are numpy,
    # hashlib and file calls that release the GIL), each shard journaled by its thread once its
    # files are in place; statistics are added in shard order, so nothing that is written
    # depends on the number of threads.
    with contextlib.ExitStack() as threads:
        pool = threads.enter_context(_threads(jobs, "bivocab-shard"))
        # The vocab files are written beside the shards when more than one core may be used.
        vocab_paths = threads.enter_context(_threads(1, "bivocab-vocab-files")).submit(vocab_files.write) \
            if jobs > 1 else None
        for si in split_order:
            split = SPLITS[si]
            order, shard_list, buckets = prepared[si]()
            if order.sampling is not None:
                mixing[split] = order.sampling
            for cond in recipe.conditions:
                shard_paths[cond.name][split] = []
            pending = []
            for shard_index, members in enumerate(shard_list):
                stem = shard_stem(split, shard_index)
                paths = [f"provenance/{stem}.npy"] + [p for c in recipe.conditions
                                                      for p in shard_writer.paths(f"{c.name}/{stem}")]
                for cond in recipe.conditions:
                    shard_paths[cond.name][split].append(f"{cond.name}/{stem}")
                written += paths
                reused = journal.reusable(stem, paths)
                task = None if reused is not None else pool.submit(
                    _write_shard, shard_writer, recipe, vocabs, subwords, stem, order.langs[members],
                    order.rows[members], arrays, buckets, shard_index, journal, paths)
                pending.append((members, reused, task))
            for members, shard_stats, task in pending:
                if task is not None:
                    shard_stats = task.result()
                for cond in recipe.conditions:
                    _add_stat(stats[cond.name][split], shard_stats[cond.name])
                advance(len(members), words=shard_stats[recipe.conditions[0].name][1])
                release_free_memory()   # what the shard's threads freed (see bivocab.memory)
            buckets.remove()

        advance = meter.begin("vocab files", total=len(recipe.conditions), unit="conditions")
        if vocab_paths is None:
            written += vocab_files.write(advance)
        else:
            written += vocab_paths.result()
            advance(len(recipe.conditions))

    summaries = tuple(
        ConditionSummary(cond.name, cond.policy, len(vocab), {
            s: SplitSummary(v[0], v[1], tuple(v[2]), tuple(v[3])) for s, v in stats[cond.name].items()})
        for cond, vocab in zip(recipe.conditions, vocabs))
    meter.begin("manifest")
    manifest = _manifest(recipe, out, files, hashes, per_file, scans, vocabs, shard_paths, written, summaries,
                         journal.records)
    for name, sub in subwords.items():
        entry = manifest["conditions"][name]
        entry.update(models={t: model_path(name, t) for t in tags}, subword=sub.record,
                     tokenizers={t: tokenizer_path(name, t) for t in tags} if sub.record["units"] == "unigram" else {})
    manifest["mixing"] = mixing
    manifest["hygiene"] = hygiene.report()
    meter.end()
    return BuildResult(out, manifest, summaries, tuple(journal.reused),
                       len(journal.reused) + len(journal.written))


@contextlib.contextmanager
def _threads(count: int, name: str) -> Iterator[ThreadPoolExecutor]:
    """A thread pool that is always joined on leaving the block (so nothing writes into the
    build directory after the build returns), its queued tasks dropped if the block failed."""
    pool = ThreadPoolExecutor(max_workers=count, thread_name_prefix=name)
    failed = True
    try:
        yield pool
        failed = False
    finally:
        pool.shutdown(wait=True, cancel_futures=failed)


def _prepare_split(si: int, recipe: Recipe, arrays: list[dict[str, np.ndarray]], work: Path,
                   token_paths: list[Path], starts: list[np.ndarray], threads: int = 1) -> tuple[
                       SplitOrder, list[np.ndarray], ShardBuckets]:
    """Split ``si``'s mixed order, its shards' members (positions in that order) and its bucket
    files (``threads`` languages' buckets filled at a time)."""
    rows = [np.flatnonzero(np.asarray(a["splits"]) == si) for a in arrays]
    order = mix_split(si, rows, recipe.mix, recipe.seed, [a["lengths"] for a in arrays])
    shard_list = list(_shard_members(order, arrays, recipe.shards.max_tokens))
    buckets = ShardBuckets(work, SPLITS[si], order.langs, order.rows,
                           np.repeat(np.arange(len(shard_list), dtype=np.int32), [len(m) for m in shard_list]),
                           token_paths, [a["lengths"] for a in arrays], starts, threads)
    release_free_memory()   # the bucket fill's temporaries
    return order, shard_list, buckets


class VocabFiles:
    """The vocabulary files of a build: per condition vocab.tsv, the tokenizer files (or the
    subword models), and types/<tag>.tsv per language, from only what those files are made of."""

    def __init__(self, out: Path, recipe: Recipe, vocabs: list[Vocabulary], subwords: dict[str, SubwordCondition],
                 scans: list[LanguageScan], type_index: TypeIndex) -> None:
        self.out, self.tags, self.clean, self.vocabs = out, recipe.tags, recipe.clean, vocabs
        self.conditions = [(cond.name, cond.units) for cond in recipe.conditions]
        self.models = {name: sub.models for name, sub in subwords.items()}
        self.types = [(scan.table.surfaces, scan.split_counts) for scan in scans]
        self.type_index = type_index

    def write(self, advance: Callable[..., None] = lambda amount: None) -> list[str]:
        """Write every file (``advance(1)`` after each condition); return their paths."""
        out, tags = self.out, self.tags
        written = []

        def write_text(path: str, make: Callable[[], str | bytes]) -> None:
            atomic_write_text(out / path, make())
            written.append(path)

        for (name, units), vocab in zip(self.conditions, self.vocabs):
            write_text(f"{name}/vocab.tsv", lambda: vocab_tsv(vocab))
            if name in self.models:
                for li, (tag, model) in enumerate(zip(tags, self.models[name])):
                    path = model_path(name, tag)
                    with atomic_open(out / path) as handle:
                        handle.write(model)
                    written.append(path)
                    if units == "unigram":
                        write_text(tokenizer_path(name, tag),
                                   lambda: unigram_tokenizer_json(model, vocab, li, self.clean))
            else:
                texts: dict[int, bytes] = {}   # made once when every language's file is the same
                same = same_tokenizer_for_every_language(vocab)
                for li, tag in enumerate(tags):
                    key = 0 if same else li
                    if key not in texts:
                        texts[key] = tokenizer_json(vocab, li, self.clean)
                    write_text(f"{name}/tokenizer.{tag}.json", functools.partial(texts.__getitem__, key))
            advance(1)
        for li, (tag, (surfaces, counts)) in enumerate(zip(tags, self.types)):
            write_text(f"types/{tag}.tsv", lambda: language_types_tsv(surfaces, counts, self.type_index, li))
        return written


def encoding_key(vocab: Vocabulary) -> bytes:
    """What decides the ids of a word-level condition's shards: the look-up tables, the
    special ids and the id width."""
    tables = b"".join(np.asarray(lut, dtype="<u4").tobytes() + b"|" for lut in vocab.luts)
    return tables + repr((vocab.unk_ids, vocab.eos_ids, vocab.dtype.str)).encode("ascii")


def _write_shard(writer: ShardWriter, recipe: Recipe, vocabs: list[Vocabulary],
                 subwords: dict[str, SubwordCondition], stem: str, langs: np.ndarray, rows_here: np.ndarray,
                 arrays: list[dict[str, np.ndarray]], buckets: ShardBuckets, shard_index: int,
                 journal: ShardJournal, paths: list[str]) -> dict:
    """Write one shard (provenance, then every condition) and journal it (its ``paths``);
    return its statistics per condition."""
    prov = np.empty(len(langs), dtype=PROVENANCE_DTYPE)
    gathered = []
    for li in range(len(recipe.tags)):
        mask = langs == li
        r = rows_here[mask]
        prov["input"][mask] = np.asarray(arrays[li]["inputs"])[r]
        prov["line"][mask] = np.asarray(arrays[li]["lines"])[r]
        lengths = np.asarray(arrays[li]["lengths"])[r]
        types = buckets.tokens(li, shard_index, r, lengths)
        gathered.append((mask, lengths, types))
    write_npy(writer.out / f"provenance/{stem}.npy", prov)
    word_layouts: dict[bool, ShardLayout] = {}   # the word-level conditions share the layout
    shard_stats = {}
    for cond, vocab in zip(recipe.conditions, vocabs):
        eos = vocab.eos_ids is not None
        sub = subwords.get(cond.name)
        if sub is None:
            if eos not in word_layouts:
                word_layouts[eos] = ShardLayout(langs, gathered, eos)
            layout = word_layouts[eos]
        else:
            layout = ShardLayout(langs, [(mask, *sub.gather(li, rows_here[mask]))
                                         for li, (mask, _, _) in enumerate(gathered)], eos)
        shard_stats[cond.name] = layout.stats(vocab)
        writer.write(f"{cond.name}/{stem}", layout.encode(vocab), layout.offsets, layout.langs, prov,
                     twin=layout.written_as)
        layout.written_as = layout.written_as or f"{cond.name}/{stem}"
    journal.record(stem, paths, shard_stats)
    return shard_stats


class ShardLayout:
    """Where every token of a shard goes, computed once for all conditions that share the
    shard's type ids (and the choice of an end-of-sentence token): a condition's token array is
    then one look-up, ``table[index]``, in a table that holds the languages' look-up tables
    one after the other and then their end-of-sentence ids."""

    def __init__(self, langs: np.ndarray, gathered: list[tuple[np.ndarray, np.ndarray, np.ndarray]],
                 eos: bool) -> None:
        n = len(langs)
        self.langs = langs.astype(np.uint8)
        self.eos = eos
        sent_len = np.empty(n, dtype=np.int64)
        for mask, lengths, _ in gathered:
            sent_len[mask] = lengths + (1 if eos else 0)
        self.offsets = np.zeros(n + 1, dtype=np.int64)
        np.cumsum(sent_len, out=self.offsets[1:])
        self.index = np.empty(int(self.offsets[-1]), dtype=np.intp)
        self.sentences = n
        self.lang_types = [types for _, _, types in gathered]
        self._gathered = [(mask, lengths) for mask, lengths, _ in gathered]
        self._placed: tuple[tuple[int, ...], int] | None = None   # the table layout ``index`` points into
        self._type_counts: dict[tuple[int, int], np.ndarray] = {}
        # The first condition's shard written with this layout: its offsets and langs files
        # are the same bytes as every later one's.
        self.written_as: str | None = None

    def _place(self, bases: list[int], eos_base: int) -> None:
        for li, ((mask, lengths), types) in enumerate(zip(self._gathered, self.lang_types)):
            self.index[ragged_gather(self.offsets[:-1][mask], lengths)] = types.astype(np.intp) + bases[li]
            if self.eos:
                self.index[self.offsets[1:][mask] - 1] = eos_base + li
        self._placed = (tuple(bases), eos_base)

    def encode(self, vocab: Vocabulary) -> np.ndarray:
        """The shard's token ids under ``vocab`` (its look-up tables must have the sizes the
        layout was placed for; the first call places it)."""
        sizes = [len(lut) for lut in vocab.luts]
        bases = [int(b) for b in np.cumsum([0] + sizes[:-1])]
        if self._placed != (tuple(bases), sum(sizes)):
            self._place(bases, sum(sizes))
        table = np.concatenate([np.asarray(lut, dtype=vocab.dtype) for lut in vocab.luts]
                               + ([np.asarray(vocab.eos_ids, dtype=vocab.dtype)] if self.eos else []))
        return table[self.index]

    def stats(self, vocab: Vocabulary) -> list:
        """[sentences, tokens (without end tokens), unknown tokens per language, tokens per language]."""
        unknown, tokens = [], []
        for li, types in enumerate(self.lang_types):
            lut = np.asarray(vocab.luts[li])
            # The type counts are the same for every condition of the layout: counted once.
            key = (li, len(lut))
            counts = self._type_counts.get(key)
            if counts is None:
                counts = self._type_counts[key] = np.bincount(types, minlength=len(lut))[:len(lut)] if len(types) \
                    else np.zeros(len(lut), np.int64)
            unknown.append(int(counts[lut == vocab.unk_ids[li]].sum()))
            tokens.append(len(types))
        return [self.sentences, sum(tokens), unknown, tokens]


def _add_stat(total: list, part: list) -> None:
    """Add one shard's [sentences, tokens, oov per language, tokens per language] to a split's."""
    total[0] += part[0]
    total[1] += part[1]
    for li in range(len(total[2])):
        total[2][li] += part[2][li]
        total[3][li] += part[3][li]


def _count_by_split(scan: LanguageScan, global_tokens: np.ndarray, result: ScanResult) -> None:
    """Add a block's tokens to the per-split type counts (one bincount over type * 3 + split)."""
    n_types = len(scan.table)
    if scan.split_counts.shape[1] < n_types:
        grown = np.zeros((3, max(n_types, 2 * scan.split_counts.shape[1])), dtype=np.int64)
        grown[:, :scan.split_counts.shape[1]] = scan.split_counts
        scan.split_counts = grown
    if len(global_tokens):
        # uint32 keys (3 x the types fits below 2**32) make fewer and smaller temporaries.
        wide = np.int64 if 3 * n_types >= 1 << 32 else np.uint32
        keys = global_tokens.astype(wide, copy=False) * wide(3) + np.repeat(result.splits, result.lengths)
        scan.split_counts[:, :n_types] += np.bincount(keys, minlength=3 * n_types).reshape(n_types, 3).T
    scan.sentences += len(result.lengths)
    scan.tokens += len(global_tokens)


def _shard_members(order: SplitOrder, arrays: list[dict[str, np.ndarray]], max_tokens: int) -> Iterator[np.ndarray]:
    """Positions (into the split order) of each shard's sentences. A shard holds the sentences
    that start within its window of ``max_tokens`` tokens (end-of-sentence tokens not counted),
    so shard boundaries are the same in every condition."""
    if len(order.rows) == 0:
        return
    lengths = np.empty(len(order.rows), dtype=np.int64)
    for li, a in enumerate(arrays):
        mask = order.langs == li
        lengths[mask] = np.asarray(a["lengths"])[order.rows[mask]]
    begin = np.cumsum(lengths) - lengths
    shard_of = begin // max_tokens
    cuts = np.flatnonzero(np.diff(shard_of)) + 1
    yield from np.split(np.arange(len(lengths)), cuts)


def _input_report(counters: Counter) -> Counter:
    """An input's counters as recorded; an empty file (no line at all) is counted as such."""
    report = Counter({"lines_read": 0, **counters})
    if not report["lines_read"]:
        report["empty_file"] = 1
    return report


def _manifest(recipe: Recipe, out: Path, files: list[InputFile], hashes: dict[str, str],
              per_file: list[Counter], scans: list[LanguageScan], vocabs: list[Vocabulary],
              shard_paths: dict[str, dict[str, list[str]]], written: list[str],
              summaries: tuple[ConditionSummary, ...], records: dict[str, dict[str, Any]]) -> dict[str, Any]:
    recipe_file = Path(recipe.path).resolve()
    try:
        recipe_sha = sha256_file(recipe_file)
    except OSError:
        recipe_sha = ""
    inputs = [{"path": f.display, "language": f.language, "sha256": hashes[f.display],
               "lines": int(per_file[i].get("lines_read", 0)),
               "report": {k: int(v) for k, v in sorted(_input_report(per_file[i]).items())}}
              for i, f in enumerate(files)]
    conditions = {}
    for cond, vocab, summary in zip(recipe.conditions, vocabs, summaries):
        conditions[cond.name] = {
            "policy": cond.policy, "units": cond.units, "classes": cond.classes, "vocab": f"{cond.name}/vocab.tsv",
            "size": len(vocab), "specials": vocab.special_count,
            "tokenizers": {t: f"{cond.name}/tokenizer.{t}.json" for t in recipe.tags},
            "dtype": vocab.dtype.name, "shards": shard_paths[cond.name],
            "stats": {s: {"sentences": v.sentences, "tokens": v.tokens,
                          "oov": dict(zip(recipe.tags, v.oov)),
                          "tokens_per_language": dict(zip(recipe.tags, v.tokens_per_lang))}
                      for s, v in summary.splits.items()},
        }
    files_out = [records.get(path) or file_record(out, path) for path in sorted(set(written))]
    return {
        "bivocab": __version__,
        "content_digest": CONTENT_SCHEME,
        "recipe": recipe.resolved(),
        "recipe_file": os.path.relpath(recipe_file, out.resolve()),
        "recipe_sha256": recipe_sha,
        "inputs": inputs,
        "environment": environment(),
        "languages": {s.tag: {"sentences": s.sentences, "tokens": s.tokens, "types": len(s.table),
                              "types_file": f"types/{s.tag}.tsv"} for s in scans},
        "conditions": conditions,
        "files": files_out,
    }
