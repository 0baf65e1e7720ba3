"""The scan's raw-bytes fast path: a block that cleaning leaves unchanged is scanned from its own
bytes, and gives exactly the result of the general path (decode, clean line by line, join)."""

from __future__ import annotations

import unicodedata

import numpy as np
import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import bivocab.scan as scan_module
from bivocab.clean import (_NORMAL_BELOW_BYTE, _ODD_NON_ASCII_UTF8, _ODD_SPACE_OR_CONTROL_RE, _is_utf8,
                           _valid_in_normal_form, clean_block_bytes)
from bivocab.errors import InputError
from bivocab.recipe import CleanSpec, SplitSpec
from bivocab.scan import ChunkTable, ScanTask, ragged_gather, scan_block
from bivocab.segment import segment
from bivocab.sources import Block
from bivocab.splits import assign_splits, assign_splits_utf8, split_thresholds


def _odd_by_bytes(data: bytes) -> bool:
    return any(lead in data and odd.search(data) is not None for odd, lead in _ODD_NON_ASCII_UTF8)


def test_byte_patterns_find_exactly_the_non_ascii_characters_cleaning_replaces() -> None:
    for code in range(0x80, 0x110000):
        if 0xD800 <= code <= 0xDFFF:
            continue
        char = chr(code)
        assert _odd_by_bytes(char.encode("utf-8")) == bool(_ODD_SPACE_OR_CONTROL_RE.match(char)), hex(code)


@pytest.mark.parametrize("code", range(128))
def test_fast_path_refuses_exactly_the_ascii_characters_cleaning_replaces(code: int) -> None:
    if code in (10, 32):  # a line break and a single space are the text's own separators
        return
    block = Block(0, 1, b"a" + bytes([code]) + b"b", 1)
    refused = clean_block_bytes(block, CleanSpec(normal_form="none")) is None
    assert refused == bool(_ODD_SPACE_OR_CONTROL_RE.match(chr(code)))


def test_text_below_the_lead_byte_bound_is_already_normalised() -> None:
    # Canonical composition needs a character with a non-zero combining class or a second
    # character that composes with a starter; below U+0300 there is neither (checked
    # exhaustively on single characters and pairs), so such text is NFC.  For NFKC the bound
    # is ASCII, where no character has a compatibility mapping.
    for form, bound in _NORMAL_BELOW_BYTE.items():
        limit = 0x300 if bound == 0xCC else 0x80
        assert chr(limit).encode("utf-8")[0] >= bound > chr(limit - 1).encode("utf-8")[0]
        chars = [chr(c) for c in range(limit)]
        assert all(unicodedata.combining(c) == 0 for c in chars)
        assert all(unicodedata.is_normalized(form, a + b) for a in chars for b in chars)


@settings(max_examples=300, deadline=None)
@given(st.binary(max_size=12) | st.text(max_size=6).map(lambda t: t.encode("utf-8", "surrogatepass")))
def test_arrow_utf8_check_agrees_with_the_python_decoder(data: bytes) -> None:
    try:
        data.decode("utf-8")
        valid = True
    except UnicodeDecodeError:
        valid = False
    assert _is_utf8(data) == valid


@pytest.mark.parametrize("data", [b"\xed\xa0\x80", b"\xc0\xaf", b"\xf4\x90\x80\x80", b"\xe2\x82", b"\xff", b"\xf0\x9f\x98\x80"])
def test_arrow_utf8_check_on_surrogates_overlong_forms_and_truncation(data: bytes) -> None:
    try:
        valid = data.decode("utf-8") is not None
    except UnicodeDecodeError:
        valid = False
    assert _is_utf8(data) == valid


def test_plain_lines_take_the_fast_path_and_empty_lines_are_dropped() -> None:
    fast = clean_block_bytes(Block(0, 4, "Die Fähre\n\nfährt.\n".encode(), 4), CleanSpec())
    assert fast is not None
    assert fast.data == "Die Fähre\nfährt.".encode()
    assert fast.line_numbers.tolist() == [4, 6]
    assert fast.counters["empty_lines_dropped"] == 2
    assert fast.separators.tolist() == [3, 10]


@pytest.mark.parametrize("text", ["a  b", " a", "a ", "a\n b", "a \nb", "a\tb", "a\x00b", "a\u00a0b", "a\u3000b",
                                  "e\u0301", "Ka\u0308se", "\ufb01x"])
def test_text_that_cleaning_changes_leaves_the_fast_path(text: str) -> None:
    spec = CleanSpec(normal_form="NFKC") if text == "\ufb01x" else CleanSpec()
    assert clean_block_bytes(Block(0, 1, text.encode(), text.count("\n") + 1), spec) is None


def _scan(data: bytes, spec: CleanSpec, keep_text: bool, session: str) -> tuple:
    """The fields of the scan result, or the error and its message."""
    block = Block(0, 1, data, data.count(b"\n") + 1)
    task = ScanTask(block, "t.txt", "de", spec, 5, split_thresholds(SplitSpec(0.5, 0.3, 0.2)), session=session,
                    keep_text=keep_text)
    try:
        result = scan_block(task)
    except InputError as exc:
        return ("error", str(exc))
    return (result.new_types, result.tokens.dtype, result.tokens.tolist(), result.lengths.dtype,
            result.lengths.tolist(), result.splits.tolist(), result.line_numbers.dtype,
            result.line_numbers.tolist(), result.text, dict(result.counters))


# Lines of plain chunks, with now and then something cleaning changes or drops: odd spaces,
# controls, NUL, CR, decomposed accents, compatibility characters, empty lines, long runs.
_PIECES = st.sampled_from(["Fähre", "fährt", "Kai", "3,50", "€", ",", ".", "don't", "ﬁ", "①", "e\u0301",
                           "\u0301", "字", "ｶ", "😀"])
_ODD = st.sampled_from([" ", "  ", "\t", "\x00", "\x1f", "\x7f", "\x85", "\u00a0", "\u2009", "\u3000", "\r",
                        "\u00ad", "\n", "\n\n", " \n", "\u2028"])
_LINE_TEXT = st.lists(st.one_of(_PIECES, _PIECES, _PIECES, _ODD), min_size=1, max_size=10).map(" ".join)
_SPECS = st.sampled_from([CleanSpec(), CleanSpec(normal_form="none"), CleanSpec(normal_form="NFKC"),
                          CleanSpec(lowercase=True), CleanSpec(max_chars=12), CleanSpec(min_tokens=2, max_tokens=5),
                          CleanSpec(invalid_utf8="replace"), CleanSpec(invalid_utf8="skip")])


@settings(max_examples=300, deadline=None)
@given(st.lists(_LINE_TEXT, min_size=1, max_size=8), _SPECS, st.booleans(),
       st.sampled_from([b"", b"\xff", b"\xc3"]))
def test_fast_path_gives_the_result_of_the_general_path(lines: list[str], spec: CleanSpec, keep_text: bool,
                                                        invalid: bytes) -> None:
    data = "\n".join(lines).encode("utf-8") + invalid
    fast = _scan(data, spec, keep_text, "fast")
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(scan_module, "clean_block_bytes", lambda block, spec: None)
        general = _scan(data, spec, keep_text, "general")
    assert fast == general


def test_splits_of_utf8_texts_equal_those_of_the_decoded_texts() -> None:
    texts = ["Die Fähre fährt.", "The ferry is late.", "", "字😀"] + [f"log {i}" for i in range(100)]
    thresholds = split_thresholds(SplitSpec(0.4, 0.3, 0.3))
    assert (assign_splits_utf8([t.encode() for t in texts], 3, thresholds).tolist()
            == assign_splits(texts, 3, thresholds).tolist())


@given(st.lists(st.tuples(st.integers(0, 50), st.integers(0, 4)), max_size=20))
def test_ragged_gather_concatenates_the_ranges(pairs: list[tuple[int, int]]) -> None:
    starts = np.array([s for s, _ in pairs], dtype=np.int64)
    lengths = np.array([n for _, n in pairs], dtype=np.int64)
    assert ragged_gather(starts, lengths).tolist() == [s + k for s, n in pairs for k in range(n)]


# Chunks near the shapes that need no regex: ASCII marks around Latin words and numbers, and
# what must leave those shapes (digits next to letters, apostrophes and combining marks inside,
# letters beyond Latin Extended-A, separators at a number's end).
_NEAR_SIMPLE = st.text(st.sampled_from(list("!\"#$%&'()*+,-./:;<=>?@[\\]^_`{|}~") + list("aZßÿſƀ09") +
                                       ["\u0301", "’", "Ω", "\u00ad", "\r"]), min_size=1, max_size=7)


@settings(max_examples=400, deadline=None)
@given(st.lists(_NEAR_SIMPLE, min_size=1, max_size=30, unique=True))
def test_new_chunks_get_the_tokens_of_segment(chunks: list[str]) -> None:
    table = ChunkTable()
    ids = table.add(pa.array([chunk + " " for chunk in chunks], pa.string()))
    starts, lengths, flat = table.starts.data, table.lengths.data, table.flat.data
    got = [[table.surfaces[t] for t in flat[starts[i]:starts[i] + lengths[i]].tolist()] for i in ids.tolist()]
    assert got == [segment(chunk + " ") for chunk in chunks]
    assert table.surfaces == list(dict.fromkeys(t for chunk in chunks for t in segment(chunk + " ")))


# Mostly plain words, with now and then a character that may compose or reorder: combining marks
# of several classes, precomposed letters, Hangul jamo (starters that compose with each other),
# compatibility characters, composition exclusions.
_FORM_TEXT = st.lists(st.sampled_from(["ferry", "Fähre", "e", "a", "\u0301", "\u0327", "\u0323", "\u0308", "é",
                                       "\u1100", "\u1161", "\u11a8", "\uac00", "ﬁ", "①", "\u0958", "\u212b",
                                       "„", "“", " ", " ", " ", " ", "\n"]), max_size=40).map("".join)


@settings(max_examples=400, deadline=None)
@given(_FORM_TEXT, st.sampled_from(["NFC", "NFKC"]))
def test_normal_form_is_checked_on_the_chunks_that_may_change(text: str, form: str) -> None:
    data = text.encode("utf-8")
    raw = np.frombuffer(data, dtype=np.uint8)
    separators = np.flatnonzero((raw == 32) | (raw == 10))
    assert _valid_in_normal_form(data, raw, separators, form) == unicodedata.is_normalized(form, text)
    long = data + b" plain" * (len(data) + 1)    # few characters above the bound: chunk by chunk
    raw = np.frombuffer(long, dtype=np.uint8)
    separators = np.flatnonzero((raw == 32) | (raw == 10))
    assert _valid_in_normal_form(long, raw, separators, form) == unicodedata.is_normalized(form, long.decode())
