"""Token shards: writing them (npy and/or Parquet) and reading them back for training code.

Layout of one shard ``DIR/<condition>/<split>/shard-NNNNN``:
``.tokens.npy`` flat token ids (uint16 when the vocabulary fits, else uint32),
``.offsets.npy`` int64 sentence offsets (length sentences + 1), ``.langs.npy`` uint8 language
index (recipe order).  ``DIR/provenance/<split>/shard-NNNNN.npy`` holds, for the same
sentences in the same order, the input file index (into build.json ``inputs``) and line number.
``.parquet`` holds the same sentences as rows (language, ids, input, line); see
docs/mixing.md for its schema and writer options.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator

import numpy as np
import numpy.lib.format as npformat
import pyarrow as pa
import pyarrow.compute as pc

from .errors import BivocabError
from .manifest import array_digest, atomic_open, complete_manifest, note_content, table_digest
from .recipe import ShardSpec
from .scan import ragged_gather

PROVENANCE_DTYPE = np.dtype([("input", "<u4"), ("line", "<i8")])
# Fixed Parquet writer options: equal data give equal bytes with one pyarrow version (the
# version is recorded in build.json "environment"; pyarrow writes it into the file footer).
PARQUET_OPTIONS: dict[str, Any] = {
    "compression": "zstd", "compression_level": 3, "use_dictionary": ["language", "input"],
    "write_statistics": False, "data_page_size": 1 << 20, "version": "2.6",
    "store_schema": False, "write_page_index": False, "write_page_checksum": False,
}
PARQUET_ROW_GROUP = 65536


def shard_stem(split: str, index: int) -> str:
    return f"{split}/shard-{index:05d}"


def write_npy(path: Path, array: np.ndarray, same_as: Path | None = None) -> None:
    """``numpy.save`` of ``array``, written as the header and then the array's own buffer
    (``numpy.save`` copies the data in chunks when the file is not a plain file object;
    a test holds the bytes equal to it).  ``same_as``: a file this build wrote from the same
    array, whose digests the new file takes instead of hashing the same bytes again."""
    array = np.ascontiguousarray(array)
    with atomic_open(path, same_as=same_as) as handle:
        npformat.write_array_header_1_0(handle, npformat.header_data_from_array_1_0(array))
        handle.write(array.reshape(-1).view(np.uint8))
    if handle.hashed:   # else its digests are its twin's
        note_content(path, lambda: array_digest(array))


def parquet_table(tokens: np.ndarray, offsets: np.ndarray, langs: np.ndarray, provenance: np.ndarray,
                  tags: tuple[str, ...], input_paths: list[str]) -> pa.Table:
    """One row per sentence: language tag, token ids, input path (as in build.json) and line.

    >>> t = parquet_table(np.array([4, 5, 2], np.uint16), np.array([0, 2, 3]), np.array([0, 1], np.uint8),
    ...                   np.array([(0, 7), (1, 2)], PROVENANCE_DTYPE), ("en", "de"), ["en.txt", "de.txt"])
    >>> t.to_pylist()[1]
    {'language': 'de', 'ids': [2], 'input': 'de.txt', 'line': 2}
    """
    offsets = np.asarray(offsets, dtype=np.int64)
    values = pa.array(np.asarray(tokens))
    if offsets[-1] < 2**31:
        ids = pa.ListArray.from_arrays(pa.array(offsets.astype(np.int32)), values)
    else:
        ids = pa.LargeListArray.from_arrays(pa.array(offsets), values)
    language = pa.array(np.asarray(tags, dtype=object)[np.asarray(langs, dtype=np.int64)].tolist()
                        if len(langs) else [], type=pa.string())
    paths = np.asarray(input_paths, dtype=object)
    inputs = pa.array(paths[provenance["input"].astype(np.int64)].tolist() if len(provenance) else [],
                      type=pa.string())
    return pa.table({"language": language, "ids": ids, "input": inputs,
                     "line": pa.array(provenance["line"].astype(np.int64))})


class ShardWriter:
    """Writes one condition's shard in the recipe's shard format(s)."""

    def __init__(self, out: Path, spec: ShardSpec, tags: tuple[str, ...], input_paths: list[str]):
        self.out, self.tags, self.input_paths = out, tags, input_paths
        self.npy = spec.format in ("npy", "npy+parquet")
        self.parquet = spec.format in ("parquet", "npy+parquet")

    def paths(self, stem: str) -> list[str]:
        """The files :meth:`write` writes for ``stem``, in order (relative to DIR)."""
        return ([f"{stem}.{suffix}.npy" for suffix in ("tokens", "offsets", "langs")] if self.npy else []) \
            + ([f"{stem}.parquet"] if self.parquet else [])

    def write(self, stem: str, tokens: np.ndarray, offsets: np.ndarray, langs: np.ndarray,
              provenance: np.ndarray, twin: str | None = None) -> list[str]:
        """Write ``DIR/<stem>.*`` and return the paths written (relative to DIR).  ``twin``: the
        stem of a condition written just before with the same ``offsets`` and ``langs`` arrays."""
        paths = []
        if self.npy:
            for suffix, array in (("tokens", tokens), ("offsets", offsets), ("langs", langs)):
                path = f"{stem}.{suffix}.npy"
                same = self.out / f"{twin}.{suffix}.npy" if twin is not None and suffix != "tokens" else None
                write_npy(self.out / path, array, same_as=same)
                paths.append(path)
        if self.parquet:
            path = f"{stem}.parquet"
            table = parquet_table(tokens, offsets, langs, provenance, self.tags, self.input_paths)
            import pyarrow.parquet as pq   # loaded by builds that write Parquet only

            with atomic_open(self.out / path) as handle:
                pq.write_table(table, handle, row_group_size=PARQUET_ROW_GROUP, **PARQUET_OPTIONS)
            note_content(self.out / path, lambda: table_digest(table))
            paths.append(path)
        return paths


@dataclass(frozen=True)
class Shard:
    tokens: np.ndarray
    offsets: np.ndarray
    langs: np.ndarray

    def __len__(self) -> int:
        return len(self.langs)

    def sentence(self, i: int) -> np.ndarray:
        return self.tokens[self.offsets[i]:self.offsets[i + 1]]

    def language_tokens(self, lang: int | None) -> np.ndarray:
        """The shard's tokens, or only those of the sentences of language index ``lang``."""
        if lang is None:
            return self.tokens
        offsets = np.asarray(self.offsets)
        mask = np.asarray(self.langs) == lang
        starts, lengths = offsets[:-1][mask], np.diff(offsets)[mask]
        return np.asarray(self.tokens)[ragged_gather(starts, lengths)]


@dataclass(frozen=True)
class SentenceBatch:
    """Sentences padded to the longest in the batch (``pad_id`` after each sentence's end)."""

    ids: np.ndarray        # (batch, longest) int64
    lengths: np.ndarray    # (batch,) int64
    langs: np.ndarray      # (batch,) uint8 language index


class ShardReader:
    """Memory-mapped view of one condition and split of a build.

    Yields sentences, fixed-length blocks of the continuous token stream (for language-model
    training: sentences follow each other, end-of-sentence ids included, blocks ignore
    sentence boundaries), batches of blocks, or padded batches of sentences; each optionally
    restricted to one language.  Parquet-only builds are read into memory instead.
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
        self.format: str = manifest["recipe"].get("shards", {}).get("format", "npy")
        self.paths: list[str] = list(shards[split])
        self.shards: list[Shard] = [self._load(stem) for stem in self.paths]

    def _load(self, stem: str) -> Shard:
        if self.format == "parquet":
            return read_parquet_shard(self.out / f"{stem}.parquet", self.tags)
        load = lambda suffix: np.load(self.out / f"{stem}.{suffix}.npy", mmap_mode="r")
        return Shard(load("tokens"), load("offsets"), load("langs"))

    def __len__(self) -> int:
        return sum(len(s) for s in self.shards)

    def _language_index(self, lang: str | None) -> int | None:
        if lang is None:
            return None
        if lang not in self.tags:
            raise BivocabError(f"{self.out}: no language {lang!r} in this build (have: {', '.join(self.tags)})")
        return self.tags.index(lang)

    def sentences(self, lang: str | None = None) -> Iterator[tuple[str, np.ndarray]]:
        """Yield ``(language tag, token ids)`` for every sentence, optionally of one language."""
        want = self._language_index(lang)
        for shard in self.shards:
            offsets, langs = np.asarray(shard.offsets), np.asarray(shard.langs)
            for i in range(len(langs)):
                if want is None or langs[i] == want:
                    yield self.tags[langs[i]], shard.tokens[offsets[i]:offsets[i + 1]]

    def token_stream(self, lang: str | None = None) -> np.ndarray:
        """All token ids of the split (or of one language's sentences), concatenated in shard
        order (a copy)."""
        want = self._language_index(lang)
        if not self.shards:
            return np.zeros(0, dtype=np.uint32)
        return np.concatenate([np.asarray(s.language_tokens(want)) for s in self.shards])

    def blocks(self, length: int, lang: str | None = None, drop_last: bool = True) -> Iterator[np.ndarray]:
        """Consecutive non-overlapping windows of ``length`` ids of the token stream: block k is
        ``token_stream(lang)[k*length:(k+1)*length]``, read shard by shard without building the
        whole stream.  A shorter final block is yielded only with ``drop_last=False``."""
        if length < 1:
            raise BivocabError(f"block length must be >= 1, got {length}")
        want = self._language_index(lang)
        carry = np.zeros(0, dtype=np.uint32)
        for shard in self.shards:
            tokens = shard.language_tokens(want)
            start = 0
            if len(carry):
                need = length - len(carry)
                carry = np.concatenate([carry, np.asarray(tokens[:need])]).astype(tokens.dtype)
                start = need
                if len(carry) < length:
                    continue
                yield carry
            full_end = start + (len(tokens) - start) // length * length
            for offset in range(start, full_end, length):
                yield np.asarray(tokens[offset:offset + length])
            carry = np.asarray(tokens[full_end:])
        if len(carry) and not drop_last:
            yield carry

    def batches(self, batch_size: int, length: int, lang: str | None = None) -> Iterator[np.ndarray]:
        """Blocks stacked into ``(batch_size, length)`` arrays; an incomplete last batch is dropped."""
        if batch_size < 1:
            raise BivocabError(f"batch size must be >= 1, got {batch_size}")
        pending: list[np.ndarray] = []
        for block in self.blocks(length, lang):
            pending.append(block)
            if len(pending) == batch_size:
                yield np.stack(pending)
                pending = []

    def sentence_batches(self, batch_size: int, lang: str | None = None, pad_id: int = 0) -> Iterator[SentenceBatch]:
        """Sentences in shard order, ``batch_size`` at a time, padded with ``pad_id``; the last
        batch may be smaller."""
        if batch_size < 1:
            raise BivocabError(f"batch size must be >= 1, got {batch_size}")
        pending: list[tuple[str, np.ndarray]] = []
        for item in self.sentences(lang):
            pending.append(item)
            if len(pending) == batch_size:
                yield self._pad(pending, pad_id)
                pending = []
        if pending:
            yield self._pad(pending, pad_id)

    def _pad(self, items: list[tuple[str, np.ndarray]], pad_id: int) -> SentenceBatch:
        lengths = np.array([len(ids) for _, ids in items], dtype=np.int64)
        ids = np.full((len(items), int(lengths.max(initial=0))), pad_id, dtype=np.int64)
        for row, (_, sentence) in enumerate(items):
            ids[row, :len(sentence)] = sentence
        langs = np.array([self.tags.index(tag) for tag, _ in items], dtype=np.uint8)
        return SentenceBatch(ids, lengths, langs)


def read_parquet_shard(path: Path, tags: tuple[str, ...]) -> Shard:
    """A Parquet shard as the three arrays of an npy shard."""
    import pyarrow.parquet as pq

    table = pq.read_table(path, columns=["language", "ids"])
    ids = table.column("ids").combine_chunks()
    offsets = ids.offsets.to_numpy().astype(np.int64)
    tokens = ids.values.to_numpy()[offsets[0]:offsets[-1]]
    langs = pc.index_in(table.column("language"), value_set=pa.array(list(tags))).to_numpy(zero_copy_only=False)
    return Shard(tokens, offsets - offsets[0], langs.astype(np.uint8))


def open_shards(out: str | Path, condition: str, split: str) -> ShardReader:
    """Open the shards of ``condition`` and ``split`` in build directory ``out``."""
    return ShardReader(out, condition, split)


def torch_dataset(out: str | Path, condition: str, split: str, length: int | None = None,
                  lang: str | None = None) -> Any:
    """A ``torch.utils.data.IterableDataset`` over the shards: int64 tensors of ``length`` ids
    (blocks of the token stream), or one tensor per sentence when ``length`` is None.
    With several DataLoader workers each worker reads every n-th item, so none repeats.
    Needs the optional dependency torch."""
    try:
        from .torchdata import ShardDataset
    except ImportError:
        raise BivocabError("the PyTorch adapter needs the optional package torch (pip install torch)") from None
    return ShardDataset(str(out), condition, split, length, lang)
