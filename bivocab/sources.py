"""Reading input files: plain or compressed text, streamed in blocks of whole lines.

A block is raw bytes ending at a line break, with the number of its first line, so that any
later stage can name the file and line of a problem.  Line breaks are LF, CRLF or a lone CR
(each counts as one line, as in most editors).
"""

from __future__ import annotations

import bz2
import gzip
import hashlib
import io
import lzma
import os
import zlib
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO, Iterator

import zstandard

from .errors import InputError

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


@dataclass(frozen=True)
class InputFile:
    path: Path           # absolute
    display: str         # as shown in messages and recorded in build.json (relative to the recipe)
    language: str


def file_sha256(path: Path) -> str:
    digest = hashlib.sha256()
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
    """Yield the file as blocks of whole lines (LF-separated, no trailing LF).

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
                cut = max(data.rfind(b"\n"), data.rfind(b"\r"))
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
            count = complete.count(b"\n") + 1
            yield Block(file_index, line, complete, count, bom, cr + last_cr)
            bom = False
            line += count
            if at_end:
                break
    try:
        after = os.stat(source.path)
    except OSError:
        after = None
    if after is None or (after.st_size, after.st_mtime_ns) != (before.st_size, before.st_mtime_ns):
        raise InputError(f"{source.display}: input file changed while it was being read; rebuild when it is stable")
