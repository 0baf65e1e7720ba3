"""Reading input files: plain or compressed text, JSON Lines, CSV/TSV, Parquet and saved
`datasets` directories, streamed in blocks of whole lines.

A block is raw bytes ending at a line break, with the number of its first line, so that any
later stage can name the file and line of a problem.  Line breaks are LF, CRLF or a lone CR
(each counts as one line, as in most editors).  Row formats turn each row's text field into
one line of a block; the row's own number (file line for JSON Lines and CSV/TSV, 1-based row
for Parquet and datasets) is recorded per line.  See docs/inputs.md.
"""

from __future__ import annotations

import bz2
import gzip
import hashlib
import io
import lzma
import os
import re
import zlib
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO, Iterator

import numpy as np
import zstandard

from .errors import InputError
from .recipe import ReadSpec

BLOCK_BYTES = 4 << 20
BOM = b"\xef\xbb\xbf"


@dataclass(frozen=True)
class Block:
    """Whole lines of one input file, LF-separated, without the final LF."""

    file_index: int
    first_line: int      # 1-based number of the block's first line in the file
    data: bytes
    line_count: int
    bom_removed: bool = False
    cr_line_ends: int = 0
    # Set when the lines are not consecutive file lines (rows, split sentences): the source
    # line or row of each line; several lines may share one number after sentence splitting.
    line_numbers: tuple[int, ...] | None = None
    source_lines: int | None = None   # lines or rows of the file this block covers (default line_count)
    counters: tuple[tuple[str, int], ...] = ()   # reading events, added to the input's report

    def line_number(self, offset: int) -> int:
        """Source line (or row) of the block's ``offset``-th line (0-based)."""
        return self.first_line + offset if self.line_numbers is None else self.line_numbers[offset]


@dataclass(frozen=True)
class InputFile:
    path: Path           # absolute
    display: str         # as shown in messages and recorded in build.json (relative to the recipe)
    language: str
    read: ReadSpec = ReadSpec()


def file_sha256(path: Path) -> str:
    """SHA-256 of a file; of a directory (a saved dataset), over its files' relative paths and
    contents in sorted path order, so a renamed or changed member file changes the hash."""
    digest = hashlib.sha256()
    if path.is_dir():
        for member in sorted(p for p in path.rglob("*") if p.is_file()):
            digest.update(member.relative_to(path).as_posix().encode("utf-8") + b"\0")
            digest.update(file_sha256(member).encode("ascii"))
        return digest.hexdigest()
    with open(path, "rb") as handle:
        for chunk in iter(lambda: handle.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def open_binary(path: Path, display: str) -> BinaryIO:
    """Open an input for reading decompressed bytes, choosing the codec by file extension."""
    try:
        suffix = path.suffix.lower()
        if suffix == ".gz":
            return gzip.open(path, "rb")
        if suffix == ".bz2":
            return bz2.open(path, "rb")
        if suffix in (".xz", ".lzma"):
            return lzma.open(path, "rb")
        if suffix == ".zst":
            return io.BufferedReader(_ZstdFrames(open(path, "rb")))
        return open(path, "rb")
    except FileNotFoundError:
        raise InputError(f"{display}: input file not found") from None
    except PermissionError:
        raise InputError(f"{display}: input file is not readable (permission denied)") from None
    except OSError as exc:
        raise InputError(f"{display}: cannot open input: {exc.strerror or exc}") from None


class _ZstdFrames(io.RawIOBase):
    """Decompressed bytes of a file of one or more zstd frames. Unlike zstandard's stream reader,
    which ends a cut-off file silently, it raises EOFError when the data stops inside a frame."""

    def __init__(self, raw: BinaryIO):
        self._raw = raw
        self._context = zstandard.ZstdDecompressor()
        self._frame = self._context.decompressobj()
        self._in_frame = False
        self._pending = b""

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:  # type: ignore[override]
        while not self._pending:
            data = self._raw.read(1 << 20)
            if not data:
                if self._in_frame:
                    raise EOFError("zstd frame is incomplete")
                return 0
            out = []
            while data:
                if self._frame.eof:
                    self._frame = self._context.decompressobj()
                out.append(self._frame.decompress(data))
                data = self._frame.unused_data if self._frame.eof else b""
            self._in_frame = not self._frame.eof
            self._pending = b"".join(out)
        n = min(len(buffer), len(self._pending))
        buffer[:n] = self._pending[:n]
        self._pending = self._pending[n:]
        return n

    def close(self) -> None:
        self._raw.close()
        super().close()


# What the codecs raise on corrupt data (zlib and zstandard errors are not OSErrors).
_CORRUPT_DATA = (OSError, lzma.LZMAError, ValueError, zlib.error, zstandard.ZstdError)


def _read(handle: BinaryIO, size: int, display: str) -> bytes:
    try:
        return handle.read(size)
    except EOFError:
        raise InputError(f"{display}: compressed input is truncated (unexpected end of data)") from None
    except _CORRUPT_DATA as exc:
        name = type(exc).__name__
        raise InputError(f"{display}: cannot read input ({name}: {exc})") from None


def read_blocks(source: InputFile, file_index: int, block_bytes: int | None = None) -> Iterator[Block]:
    """Yield the input as blocks of whole lines, in the input's format (see the module
    docstring), split into sentences when the recipe asks for it."""
    from .rows import read_row_blocks

    fmt = input_format(source)
    blocks = (read_text_blocks(source, file_index, block_bytes) if fmt == "text"
              else read_row_blocks(source, file_index, fmt))
    if source.read.split_sentences:
        from .sentences import split_block_sentences

        blocks = (split_block_sentences(b, source.language) for b in blocks)
    yield from blocks


_EXTENSION_FORMATS = {".jsonl": "jsonl", ".ndjson": "jsonl", ".csv": "csv", ".tsv": "tsv",
                      ".parquet": "parquet", ".txt": "text"}
COMPRESSION_SUFFIXES = (".gz", ".bz2", ".xz", ".lzma", ".zst")


def input_format(source: InputFile) -> str:
    """The format of an input: as the recipe says, else by extension (a compression suffix is
    looked through: ``x.jsonl.gz`` is JSON Lines); a directory is a saved dataset; any other
    file is plain text.

    >>> input_format(InputFile(Path("/c/en.tsv.gz"), "en.tsv.gz", "en"))
    'tsv'
    """
    if source.read.format != "auto":
        return source.read.format
    if source.path.is_dir():
        return "datasets"
    suffixes = [s.lower() for s in source.path.suffixes]
    if suffixes and suffixes[-1] in COMPRESSION_SUFFIXES:
        suffixes.pop()
    return _EXTENSION_FORMATS.get(suffixes[-1], "text") if suffixes else "text"


def read_text_blocks(source: InputFile, file_index: int, block_bytes: int | None = None) -> Iterator[Block]:
    """Yield a text file as blocks of whole lines (LF-separated, no trailing LF).

    A byte-order mark at the start of the file is removed; CRLF and lone CR become LF.
    The file's size and modification time are compared before and after reading, so a file
    that changes while it is read is reported instead of silently mixing two versions.
    """
    block_bytes = block_bytes or BLOCK_BYTES
    try:
        before = os.stat(source.path)
    except OSError as exc:
        raise InputError(f"{source.display}: cannot read input: {exc.strerror or exc}") from None
    handle = open_binary(source.path, source.display)
    line = 1
    carry = b""
    first = True
    pending_cr = False
    bom = False  # removed, and not yet reported with a block (small reads may carry it along)
    with handle:
        while True:
            chunk = _read(handle, block_bytes, source.display)
            at_end = not chunk
            data = carry + chunk
            if first and (len(data) >= len(BOM) or at_end):
                first = False
                if data.startswith(BOM):
                    data, bom = data[len(BOM):], True
            if pending_cr and data.startswith(b"\n"):
                data = data[1:]  # the LF of a CRLF split across two reads
            pending_cr = False
            last_cr = 0  # the line break that ends the block was a CR or CRLF (counted too)
            if at_end:
                complete, carry = data, b""
                if not complete:
                    break
                if complete.endswith(b"\r\n"):
                    complete, last_cr = complete[:-2], 1
                elif complete.endswith((b"\n", b"\r")):
                    complete, last_cr = complete[:-1], int(complete.endswith(b"\r"))
            else:
                newline = data.rfind(b"\n")
                cut = max(newline, data.rfind(b"\r", newline + 1))   # a CR can only end a line after the last LF
                if cut < 0 or first:
                    carry = data
                    continue
                complete, carry = data[:cut], data[cut + 1:]
                if data[cut:cut + 1] == b"\n" and complete.endswith(b"\r"):
                    complete, last_cr = complete[:-1], 1
                pending_cr = data[cut:cut + 1] == b"\r"
                last_cr = last_cr or int(pending_cr)
                if pending_cr and carry.startswith(b"\n"):
                    carry, pending_cr = carry[1:], False
            cr = 0
            if b"\r" in complete:
                cr = complete.count(b"\r")
                complete = complete.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
            count = int(np.count_nonzero(np.frombuffer(complete, dtype=np.uint8) == 10)) + 1   # bytes.count is slower
            yield Block(file_index, line, complete, count, bom, cr + last_cr)
            bom = False
            line += count
            if at_end:
                break
    check_unchanged(source, before)


@dataclass(frozen=True)
class FileSpan:
    """Whole lines of an uncompressed text file, left on disk for a scan worker to read: the
    bytes ``start`` to ``end`` of the file, the line break that ends the last line included.
    :meth:`read` makes the :class:`Block` that :func:`read_text_blocks` would make of those
    lines, except that its lines are numbered from 1: the build adds the lines of the spans
    before it (see :class:`~bivocab.errors.LineError`)."""

    file_index: int
    path: Path
    display: str
    start: int
    end: int

    def read(self) -> Block:
        try:
            with open(self.path, "rb") as handle:
                handle.seek(self.start)
                raw = handle.read(self.end - self.start)
        except OSError as exc:
            raise InputError(f"{self.display}: cannot read input: {exc.strerror or exc}") from None
        if len(raw) != self.end - self.start:
            raise InputError(f"{self.display}: input file changed while it was being read; rebuild when it is stable")
        bom = self.start == 0 and raw.startswith(BOM)
        data = raw[len(BOM):] if bom else raw
        if not data:
            return Block(self.file_index, 1, b"", 0, bom)
        last_cr = 0
        if data.endswith(b"\r\n"):
            data, last_cr = data[:-2], 1
        elif data.endswith((b"\n", b"\r")):
            last_cr = int(data.endswith(b"\r"))
            data = data[:-1]
        cr = 0
        if b"\r" in data:
            cr = data.count(b"\r")
            data = data.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
        count = int(np.count_nonzero(np.frombuffer(data, dtype=np.uint8) == 10)) + 1   # bytes.count is slower
        return Block(self.file_index, 1, data, count, bom, cr + last_cr)


def text_spans(source: InputFile, file_index: int, block_bytes: int | None = None) -> Iterator[FileSpan]:
    """An uncompressed text file as spans of whole lines of about ``block_bytes`` each, found
    by reading only around each cut: the lines themselves are read by whoever reads a span."""
    block_bytes = block_bytes or BLOCK_BYTES
    try:
        before = os.stat(source.path)
    except OSError as exc:
        raise InputError(f"{source.display}: cannot read input: {exc.strerror or exc}") from None
    with open_binary(source.path, source.display) as handle:
        start, size = 0, before.st_size
        while start < size:
            end = _after_line_break(handle, start + block_bytes - 1, size, source.display)
            yield FileSpan(file_index, source.path, source.display, start, end)
            start = end
    check_unchanged(source, before)   # (and the build compares the inputs' state again after the scan)


_LINE_BREAK = re.compile(rb"[\r\n]")


def _after_line_break(handle: BinaryIO, at: int, size: int, display: str) -> int:
    """The offset just past the first line break (LF, CRLF or a lone CR) that starts at or
    after ``at``, or ``size`` when there is none."""
    while at < size:
        handle.seek(at)
        window = _read(handle, 1 << 16, display)
        if not window:
            break
        found = _LINE_BREAK.search(window)
        if found is None:
            at += len(window)
            continue
        at += found.start()
        if window[found.start():found.start() + 1] == b"\r":
            handle.seek(at + 1)
            return at + 2 if _read(handle, 1, display) == b"\n" else at + 1
        return at + 1
    return size


def check_unchanged(source: InputFile, before: os.stat_result) -> None:
    """Fail if the input's size or modification time differs from ``before`` (taken when
    reading started), so two versions of a file are never mixed silently."""
    try:
        after = os.stat(source.path)
    except OSError:
        after = None
    if after is None or (after.st_size, after.st_mtime_ns) != (before.st_size, before.st_mtime_ns):
        raise InputError(f"{source.display}: input file changed while it was being read; rebuild when it is stable")
