"""Cleaning: decode, normalise and filter the lines of a block; every change is counted.

Order of steps (each one documented in docs/cleaning.md):
1. decode UTF-8 (error with file, line and byte offset; or replace with U+FFFD; or skip the line);
2. control characters (C0/C1 except TAB, and NUL) become a space;
3. every Unicode White_Space character becomes a space, runs collapse to one, ends are stripped;
4. Unicode normal form (NFC by default, NFKC, or none), then optional lowercasing;
5. empty lines are dropped; lines longer than ``max_chars`` are dropped.
"""

from __future__ import annotations

import re
import unicodedata
from collections import Counter
from dataclasses import dataclass

import numpy as np
import pyarrow as pa

from .errors import LineError
from .recipe import CleanSpec
from .sources import Block

# Unicode White_Space (PropList.txt) minus LF, plus the separators str.isspace() also accepts.
_SPACE_RE = re.compile(
    "[\t\x0b\x0c\x1c-\x1f \x85\xa0\u1680\u2000-\u200a\u2028\u2029\u202f\u205f\u3000]+")
_CONTROL_RE = re.compile("[\x00-\x08\x0e-\x1b\x7f-\x84\x86-\x9f]")
_MULTI_SPACE_RE = re.compile(" {2,}")
_EDGE_SPACE_RE = re.compile("^ | $", re.MULTILINE)
# Anything the two substitutions above would change other than a plain space: most blocks have
# none, and scanning for it is several times cheaper than substituting every space.
_ODD_SPACE_OR_CONTROL_RE = re.compile(
    "[\x00-\x08\x0e-\x1b\x7f-\x84\x86-\x9f"
    "\t\x0b\x0c\x1c-\x1f\x85\xa0\u1680\u2000-\u200a\u2028\u2029\u202f\u205f\u3000]")


# Byte-level form of _ODD_SPACE_OR_CONTROL_RE for the raw-bytes fast path: its ASCII members
# are DEL and every byte below 0x20 except LF and CR, and the UTF-8 of its other members is
# matched by one of these patterns, each looked for only when its lead byte occurs (tests
# check both against the regex over every code point).
_ODD_NON_ASCII_UTF8 = tuple((re.compile(pattern), lead) for pattern, lead in (
    (rb"\xc2[\x80-\xa0]", b"\xc2"), (rb"\xe1\x9a\x80", b"\xe1"),
    (rb"\xe2(?:\x80[\x80-\x8a\xa8\xa9\xaf]|\x81\x9f)", b"\xe2"), (rb"\xe3\x80\x80", b"\xe3")))
# Text whose UTF-8 has no byte at or above this is already in the normal form: for NFC every
# character below U+0300 (lead bytes up to 0xCB), for NFKC ASCII (tests check both claims).
_NORMAL_BELOW_BYTE = {"NFC": 0xCC, "NFKC": 0x80}


def _is_utf8(data: bytes) -> bool:
    """Whether Python's strict UTF-8 decoder accepts data; arrow checks it without building a str.

    >>> _is_utf8("Fähre".encode()), _is_utf8(b"F\\xe4hre")
    (True, False)
    """
    large = len(data) >= 1 << 31
    kind, offsets = (pa.LargeStringArray, np.int64) if large else (pa.StringArray, np.int32)
    try:
        kind.from_buffers(1, pa.py_buffer(np.array([0, len(data)], dtype=offsets)), pa.py_buffer(data)).validate(full=True)
    except pa.ArrowInvalid:
        return False
    return True


def _valid_in_normal_form(data: bytes, raw: np.ndarray, separators: np.ndarray, form: str) -> bool:
    """Whether data is valid UTF-8 and its text in the normal form (``NFC``, ``NFKC`` or
    ``none``); ``raw``: its bytes as numpy, ``separators``: the offsets of its spaces and line
    breaks.  No composition or reordering crosses a space or a line break, so when few
    characters are at or above the bound of the form, only their space-separated chunks need a
    look.

    >>> text = "Cafe\u0301 au lait".encode()
    >>> _valid_in_normal_form(text, np.frombuffer(text, np.uint8), np.array([6, 9]), "NFC")
    False
    """
    if form == "none":
        return _is_utf8(data)
    high = np.flatnonzero(raw >= _NORMAL_BELOW_BYTE[form])
    if len(high) > len(raw) >> 8:   # many chunks to look at (a Python step each): decode it all at once
        try:
            text = data.decode("utf-8")
        except UnicodeDecodeError:
            return False
        return unicodedata.is_normalized(form, text)
    if not _is_utf8(data):
        return False
    chunk_of_high = np.searchsorted(separators, high)
    chunks = chunk_of_high[np.diff(chunk_of_high, prepend=-1) != 0]
    ends = np.append(separators, len(raw))[chunks]
    starts = np.append(0, separators + 1)[chunks]
    return unicodedata.is_normalized(form, " ".join(data[start:end].decode("utf-8")
                                                    for start, end in zip(starts.tolist(), ends.tolist())))


def _only_printable(text: str) -> bool:
    """True when the LF-separated text holds no control character and no separator other than
    the ASCII space (``str.isprintable``: categories C* and Z* except U+0020 are not printable),
    so that none of the substitutions above can apply.  Several times cheaper than a regex
    search; False (e.g. for a soft hyphen, category Cf) only means "look closer"."""
    return text.replace("\n", " ").isprintable()


# A kept line this long is counted: it is most likely not one sentence (a lost line break).
LONG_LINE_CHARS = 100_000


@dataclass(frozen=True)
class CleanBytes:
    """The kept lines of a block that cleaning leaves unchanged (empty lines aside)."""

    data: bytes                 # the kept lines' UTF-8, LF-joined
    line_numbers: np.ndarray    # int64 1-based line of each kept line in the input file
    separators: np.ndarray      # int64 offsets of every space and LF in data
    counters: Counter


@dataclass(frozen=True)
class CleanLines:
    """The kept lines of a block, with their 1-based line numbers in the input file."""

    lines: list[str]
    line_numbers: list[int]
    counters: Counter


def apply_normal_form(text: str, form: str) -> str:
    """The Unicode normal form step alone (``NFC``, ``NFKC`` or ``none``), with the Unicode
    version of Python's ``unicodedata`` (recorded in build.json as ``unicodedata``).

    >>> apply_normal_form("e\u0301", "NFC") == "\u00e9"
    True
    """
    if form == "none":
        return text
    if unicodedata.is_normalized(form, text):
        return text
    return unicodedata.normalize(form, text)


def normalise_lines(text: str, spec: CleanSpec, printable: bool | None = None) -> str:
    """Clean LF-separated lines (steps 2-4 above) in one pass over the whole text.

    Working on a whole block is exact: LF never composes in NFC/NFKC, and the other steps
    never cross a line break.  ``printable``: the caller already knows ``_only_printable(text)``.
    """
    if printable is None:
        printable = _only_printable(text)
    if not printable and _ODD_SPACE_OR_CONTROL_RE.search(text):
        text = _CONTROL_RE.sub(" ", text)
        text = _SPACE_RE.sub(" ", text)
    if spec.normal_form != "none":
        text = apply_normal_form(text, spec.normal_form)
        if spec.normal_form == "NFKC":  # compatibility spaces (U+2000..) may appear again
            text = _SPACE_RE.sub(" ", text)
    if "  " in text:
        text = _MULTI_SPACE_RE.sub(" ", text)
    if text.startswith(" ") or text.endswith(" ") or "\n " in text or " \n" in text:
        text = _EDGE_SPACE_RE.sub("", text)
    if spec.lowercase:
        text = text.lower()
    return text


def normalise_text(text: str, spec: CleanSpec) -> str:
    """Clean one piece of text exactly as an input line is cleaned.

    >>> normalise_text("  Cafe\u0301\tcrème ", CleanSpec())
    'Café crème'
    """
    return normalise_lines(text.replace("\n", " ").replace("\r", " "), spec)


def _decode(block: Block, spec: CleanSpec, display: str, counters: Counter) -> list[str | None]:
    """Decode a block into lines; a line that is skipped for invalid UTF-8 becomes None."""
    try:
        return block.data.decode("utf-8").split("\n")
    except UnicodeDecodeError as exc:
        if spec.invalid_utf8 == "error":
            line_start = block.data.rfind(b"\n", 0, exc.start) + 1
            line = block.line_number(block.data.count(b"\n", 0, exc.start))
            raise LineError(
                display, line, f"invalid UTF-8 at byte {exc.start - line_start} of the line "
                f"(byte value 0x{block.data[exc.start]:02x}); set [clean] invalid_utf8 = "
                f"\"replace\" or \"skip\" to accept it") from None
    out: list[str | None] = []
    for raw in block.data.split(b"\n"):
        try:
            out.append(raw.decode("utf-8"))
        except UnicodeDecodeError:
            if spec.invalid_utf8 == "replace":
                counters["invalid_utf8_replaced_lines"] += 1
                out.append(raw.decode("utf-8", errors="replace"))
            else:
                counters["invalid_utf8_skipped_lines"] += 1
                out.append(None)
    return out


def _reading_counters(block: Block) -> Counter:
    """The counters of a block before cleaning: lines read and the reading events."""
    counters: Counter = Counter()
    counters["lines_read"] += block.line_count if block.source_lines is None else block.source_lines
    counters.update(dict(block.counters))
    if block.line_count and block.bom_removed:
        counters["byte_order_marks_removed"] += 1
    if block.line_count and block.cr_line_ends:
        counters["cr_line_ends"] += block.cr_line_ends
    return counters


def clean_block_bytes(block: Block, spec: CleanSpec) -> CleanBytes | None:
    """The common case of :func:`clean_block` without decoding into lines: when cleaning
    changes no character (no control character, no odd or doubled space, no space at a line
    end, text already in the normal form, no case folding, no line too long), the kept lines
    are the block's own bytes minus its empty lines.  None when the block needs clean_block.

    >>> clean_block_bytes(Block(0, 1, b"Kind\\n\\nKai", 3), CleanSpec()).line_numbers.tolist()
    [1, 3]
    >>> clean_block_bytes(Block(0, 1, b"Kind  Kai", 1), CleanSpec()) is None
    True
    """
    data = block.data
    if spec.lowercase or not block.line_count or b"\x7f" in data:
        return None
    raw = np.frombuffer(data, dtype=np.uint8)
    separators = np.flatnonzero(raw <= 32)
    values = raw[separators]
    if b"\r" in data:  # a CR inside a line is left alone (it is no separator of chunks)
        separators, values = separators[values != 13], values[values != 13]
    is_space = values == 32
    line_breaks = int(np.count_nonzero(values == 10))
    if line_breaks + np.count_nonzero(is_space) != len(values):
        return None     # a control character or TAB: LF and CR are the only bytes below 0x20 left alone
    if line_breaks != block.line_count - 1:
        return None
    if not data.isascii() and (any(lead in data and odd.search(data) for odd, lead in _ODD_NON_ASCII_UTF8)
                               or not _valid_in_normal_form(data, raw, separators, spec.normal_form)):
        return None
    bounds = np.empty(len(separators) + 2, dtype=np.int64)     # separators with the block's ends
    bounds[0], bounds[-1], bounds[1:-1] = -1, len(raw), separators
    empty = np.flatnonzero(np.diff(bounds) == 1)                # an empty chunk ends at bounds[i + 1]
    if len(empty):
        space_ended = np.zeros(len(bounds), dtype=bool)         # the block's ends act as line ends
        space_ended[1:-1] = is_space
        if space_ended[empty].any() or space_ended[empty + 1].any():
            return None  # a doubled space, or a space at the start or end of a line
    line_ends = np.empty(block.line_count, dtype=np.int64)
    line_ends[:-1], line_ends[-1] = separators[~is_space], len(raw)
    line_bytes = np.diff(line_ends, prepend=-1) - 1
    long = np.flatnonzero(line_bytes > min(LONG_LINE_CHARS, spec.max_chars or LONG_LINE_CHARS))
    chars = [len(data[end - size:end].decode("utf-8")) for end, size in zip(line_ends[long].tolist(),
                                                                              line_bytes[long].tolist())]
    if spec.max_chars and max(chars, default=0) > spec.max_chars:
        return None
    counters = _reading_counters(block)
    long_lines = sum(n > LONG_LINE_CHARS for n in chars)
    if long_lines:
        counters["long_lines_kept"] += long_lines
    numbers = (np.arange(block.first_line, block.first_line + block.line_count, dtype=np.int64)
               if block.line_numbers is None else np.asarray(block.line_numbers, dtype=np.int64))
    if len(empty):
        kept = line_bytes > 0
        counters["empty_lines_dropped"] += block.line_count - int(kept.sum())
        numbers = numbers[kept]
        if not len(numbers):
            return CleanBytes(b"", numbers, np.zeros(0, dtype=np.int64), counters)
        data = b"\n".join(line for line in data.split(b"\n") if line)
        raw = np.frombuffer(data, dtype=np.uint8)
        separators = np.flatnonzero((raw == 32) | (raw == 10))
    return CleanBytes(data, numbers, separators, counters)


def clean_block(block: Block, spec: CleanSpec, display: str) -> CleanLines:
    """Decode and clean the lines of one block (see the module docstring for the steps)."""
    counters = _reading_counters(block)
    if not block.line_count:
        return CleanLines([], [], counters)
    decoded = _decode(block, spec, display, counters)
    present = [(offset, raw) for offset, raw in enumerate(decoded) if raw is not None] \
        if None in decoded else list(enumerate(decoded))
    raw_text = "\n".join(raw for _, raw in present)
    if "\x00" in raw_text:
        counters["nul_characters"] += raw_text.count("\x00")
    printable = _only_printable(raw_text)
    controls = 0 if printable else len(_CONTROL_RE.findall(raw_text))
    if controls:
        counters["control_characters_replaced"] += controls
    normalised = normalise_lines(raw_text, spec, printable)
    cleaned = normalised.split("\n")
    if (normalised is raw_text and not spec.max_chars and len(present) == len(decoded)
            and block.line_numbers is None and "" not in cleaned):
        # Nothing changed, dropped or renumbered: the per-line checks below would keep every line.
        long_lines = sum(map(LONG_LINE_CHARS.__lt__, map(len, cleaned)))
        if long_lines:
            counters["long_lines_kept"] += long_lines
        return CleanLines(cleaned, list(range(block.first_line, block.first_line + len(cleaned))), counters)
    kept: list[str] = []
    numbers: list[int] = []
    changed = 0
    for (offset, raw), text in zip(present, cleaned):
        if not text:
            counters["empty_lines_dropped"] += 1
            continue
        if spec.max_chars and len(text) > spec.max_chars:
            counters["too_long_dropped"] += 1
            continue
        if len(text) > LONG_LINE_CHARS:
            counters["long_lines_kept"] += 1
        changed += text != raw
        kept.append(text)
        numbers.append(block.line_number(offset))
    if changed:
        counters["lines_changed_by_cleaning"] += changed
    return CleanLines(kept, numbers, counters)
