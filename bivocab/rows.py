"""Row formats (JSON Lines, CSV, TSV, Parquet, datasets): one text field per row becomes one
line of a :class:`~bivocab.sources.Block`, with the row's line (or row number) as provenance.

Text fields keep their raw bytes as far as the container allows, so cleaning treats them
exactly like lines of a text file (same normal form, same invalid-UTF-8 policy).
"""

from __future__ import annotations

import csv
import io
import json
import os
from collections import Counter
from typing import Any, Iterable, Iterator

from . import sources
from .errors import InputError
from .sources import Block, InputFile, open_binary, read_text_blocks

ROWS_PER_BLOCK = 16384


class _BlockBuilder:
    """Collects (row number, text bytes) pairs and cuts them into blocks."""

    def __init__(self, file_index: int):
        self.file_index = file_index
        self.lines: list[bytes] = []
        self.numbers: list[int] = []
        self.size = 0
        self.rows = 0
        self.counters: Counter = Counter()

    def add(self, number: int, text: bytes) -> None:
        if b"\n" in text or b"\r" in text:
            # A field spanning several lines is one sentence: its line breaks become spaces.
            self.counters["line_breaks_in_field_replaced"] += text.count(b"\n") + text.count(b"\r")
            text = text.replace(b"\r\n", b" ").replace(b"\n", b" ").replace(b"\r", b" ")
        self.lines.append(text)
        self.numbers.append(number)
        self.size += len(text) + 1

    def skip(self, reason: str) -> None:
        self.counters[reason] += 1

    def full(self) -> bool:
        return len(self.lines) >= ROWS_PER_BLOCK or self.size >= sources.BLOCK_BYTES

    def take(self) -> Block | None:
        if not self.lines and not self.rows:
            return None
        lines, numbers = self.lines, self.numbers
        counters = tuple(sorted(self.counters.items()))
        rows = self.rows
        self.lines, self.numbers, self.size, self.rows, self.counters = [], [], 0, 0, Counter()
        if not lines:  # only skipped rows: an empty block still carries their counts
            return Block(self.file_index, 1, b"", 0, line_numbers=(), source_lines=rows, counters=counters)
        return Block(self.file_index, numbers[0], b"\n".join(lines), len(lines),
                     line_numbers=tuple(numbers), source_lines=rows, counters=counters)


def read_row_blocks(source: InputFile, file_index: int, fmt: str) -> Iterator[Block]:
    """Blocks of the text field of every row of a JSON Lines, CSV, TSV, Parquet or datasets input."""
    readers = {"jsonl": _jsonl_rows, "csv": _csv_rows, "tsv": _tsv_rows, "parquet": _parquet_rows,
               "datasets": _datasets_rows}
    try:
        before = os.stat(source.path)
    except OSError as exc:
        raise InputError(f"{source.display}: cannot read input: {exc.strerror or exc}") from None
    builder = _BlockBuilder(file_index)
    for row in readers[fmt](source, builder):
        builder.rows += row
        if builder.full():
            block = builder.take()
            if block is not None:
                yield block
    block = builder.take()
    if block is not None:
        yield block
    sources.check_unchanged(source, before)


def _field_bytes(source: InputFile, where: str, value: Any, builder: _BlockBuilder, number: int) -> None:
    """Add one row's field value (str or None) to the builder, or fail on another type."""
    if value is None:
        builder.skip("null_fields_skipped")
        return
    if isinstance(value, bytes):
        builder.add(number, value)
        return
    if not isinstance(value, str):
        raise InputError(f"{where}: field '{source.read.field}' holds {type(value).__name__} "
                         f"{str(value)[:40]!r}, not text")
    builder.add(number, _raw_bytes(value))


def _raw_bytes(value: str) -> bytes:
    """UTF-8 bytes of a field; undecodable input (CSV bytes escaped on reading, lone surrogates
    in JSON) stays undecodable, so the recipe's invalid_utf8 policy applies to it as to text."""
    try:
        return value.encode("utf-8")
    except UnicodeEncodeError:
        try:
            return value.encode("utf-8", errors="surrogateescape")
        except UnicodeEncodeError:
            return value.encode("utf-8", errors="surrogatepass")


def _jsonl_rows(source: InputFile, builder: _BlockBuilder) -> Iterable[int]:
    key = source.read.field
    for block in read_text_blocks(source, 0):
        for offset, raw in enumerate(block.data.split(b"\n")):
            number = block.first_line + offset
            where = f"{source.display}:{number}"
            if not raw.strip():
                builder.skip("blank_lines_skipped")
                yield 1
                continue
            try:
                record = json.loads(raw)
            except UnicodeDecodeError as exc:
                raise InputError(f"{where}: invalid UTF-8 at byte {exc.start} of the line (JSON must be UTF-8)") from None
            except ValueError as exc:
                raise InputError(f"{where}: not valid JSON ({exc})") from None
            if not isinstance(record, dict):
                raise InputError(f"{where}: expected a JSON object per line, got {type(record).__name__}")
            if key not in record:
                keys = ", ".join(sorted(record)[:8]) or "none"
                raise InputError(f"{where}: no field '{key}' (keys: {keys}); set field = \"...\" for this language")
            _field_bytes(source, where, record[key], builder, number)
            yield 1


def _header_index(source: InputFile, header: list[str], line: int) -> int:
    key = source.read.field
    if key not in header:
        shown = ", ".join(repr(h) for h in header[:12])
        raise InputError(f"{source.display}:{line}: no column '{key}' in the header (columns: {shown}); "
                         f"set field = \"...\" for this language")
    return header.index(key)


def _csv_rows(source: InputFile, builder: _BlockBuilder) -> Iterable[int]:
    handle = open_binary(source.path, source.display)
    text = io.TextIOWrapper(handle, encoding="utf-8", errors="surrogateescape", newline="")
    with text:
        reader = csv.reader(text, strict=True)
        consumed = 0
        column = -1
        width = 0
        try:
            for record in reader:
                start, consumed = consumed + 1, reader.line_num
                if column < 0:
                    if record and record[0].startswith("\ufeff"):
                        record[0] = record[0][1:]
                        builder.skip("byte_order_marks_removed")
                    column, width = _header_index(source, record, start), len(record)
                    continue
                if not record:
                    builder.skip("blank_lines_skipped")
                    yield 1
                    continue
                if len(record) != width:
                    raise InputError(f"{source.display}:{start}: row has {len(record)} columns, the header has {width}")
                _field_bytes(source, f"{source.display}:{start}", record[column], builder, start)
                yield 1
        except csv.Error as exc:
            raise InputError(f"{source.display}:{reader.line_num}: malformed CSV ({exc})") from None
        except (EOFError, OSError) as exc:
            raise InputError(f"{source.display}: cannot read input ({type(exc).__name__}: {exc})") from None
    if column < 0:
        raise InputError(f"{source.display}: empty CSV file (no header row)")


def _tsv_rows(source: InputFile, builder: _BlockBuilder) -> Iterable[int]:
    """IANA text/tab-separated-values: fields never contain TAB or a line break, no quoting."""
    column = -1
    width = 0
    for block in read_text_blocks(source, 0):
        for offset, raw in enumerate(block.data.split(b"\n")):
            number = block.first_line + offset
            cells = raw.split(b"\t")
            if column < 0:
                header = [c.decode("utf-8", errors="replace") for c in cells]
                column, width = _header_index(source, header, number), len(cells)
                continue
            if not raw:
                builder.skip("blank_lines_skipped")
                yield 1
                continue
            if len(cells) != width:
                raise InputError(f"{source.display}:{number}: row has {len(cells)} tab-separated columns, "
                                 f"the header has {width}")
            builder.add(number, cells[column])
            yield 1
    if column < 0:
        raise InputError(f"{source.display}: empty TSV file (no header row)")


def _parquet_rows(source: InputFile, builder: _BlockBuilder) -> Iterable[int]:
    import pyarrow as pa
    import pyarrow.parquet as pq

    key = source.read.field
    try:
        parquet = pq.ParquetFile(source.path)
        schema = parquet.schema_arrow
    except (pa.ArrowException, OSError, UnicodeDecodeError) as exc:  # invalid UTF-8 in the metadata
        raise InputError(f"{source.display}: not a readable Parquet file ({exc})") from None
    if key not in schema.names:
        raise InputError(f"{source.display}: no column '{key}' (columns: {', '.join(schema.names[:12])}); "
                         f"set field = \"...\" for this language")
    kind = schema.field(key).type
    if not (pa.types.is_string(kind) or pa.types.is_large_string(kind) or pa.types.is_string_view(kind)):
        raise InputError(f"{source.display}: column '{key}' has type {kind}, not a string column")
    row = 0
    try:
        for batch in parquet.iter_batches(batch_size=ROWS_PER_BLOCK, columns=[key]):
            for value in batch.column(0).to_pylist():
                row += 1
                _field_bytes(source, f"{source.display}: row {row}", value, builder, row)
                yield 1
    except (pa.ArrowException, OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{source.display}: cannot read Parquet data after row {row} ({exc})") from None


_DATASETS_BUILDERS = {".jsonl": "json", ".json": "json", ".ndjson": "json", ".csv": "csv",
                      ".tsv": "csv", ".parquet": "parquet", ".txt": "text"}


def _load_dataset(source: InputFile) -> Any:
    try:
        import datasets
    except ImportError:
        raise InputError(f"{source.display}: format 'datasets' needs the optional package 'datasets' "
                         f"(pip install 'bivocab[datasets]')") from None
    datasets.disable_progress_bars()
    path = str(source.path)
    try:
        if source.path.is_dir():
            loaded = datasets.load_from_disk(path)
            if isinstance(loaded, datasets.DatasetDict):
                names = list(loaded)
                wanted = source.read.dataset_split or (names[0] if len(names) == 1 else "")
                if wanted not in loaded:
                    raise InputError(f"{source.display}: saved DatasetDict has splits {', '.join(names)}; "
                                     f"set dataset_split = \"...\" for this language")
                loaded = loaded[wanted]
            return loaded
        suffixes = [s.lower() for s in source.path.suffixes if s.lower() not in sources.COMPRESSION_SUFFIXES]
        builder = _DATASETS_BUILDERS.get(suffixes[-1] if suffixes else "")
        if builder is None:
            raise InputError(f"{source.display}: datasets cannot read this file type "
                             f"(known: {', '.join(sorted(_DATASETS_BUILDERS))})")
        options = {"delimiter": "\t"} if suffixes[-1] == ".tsv" else {}
        return datasets.load_dataset(builder, data_files=path, split="train", streaming=True, **options)
    except InputError:
        raise
    except Exception as exc:  # datasets raises many unrelated types for unreadable data
        raise InputError(f"{source.display}: datasets could not read it ({type(exc).__name__}: {exc})") from None


def _datasets_rows(source: InputFile, builder: _BlockBuilder) -> Iterable[int]:
    dataset = _load_dataset(source)
    key = source.read.field
    names = dataset.column_names   # None for a streamed file whose columns are not known yet
    if names is not None and key not in names:
        raise InputError(f"{source.display}: no column '{key}' (columns: {', '.join(names[:12])}); "
                         f"set field = \"...\" for this language")
    row = 0
    iterator = iter(dataset.select_columns([key]) if names is not None else dataset)
    while True:
        try:
            record = next(iterator)
        except StopIteration:
            break
        except Exception as exc:  # as above: the library's own error types vary by builder
            raise InputError(f"{source.display}: datasets failed after row {row} ({type(exc).__name__}: {exc})") from None
        row += 1
        if key not in record:
            raise InputError(f"{source.display}: row {row}: no column '{key}'")
        _field_bytes(source, f"{source.display}: row {row}", record[key], builder, row)
        yield 1
