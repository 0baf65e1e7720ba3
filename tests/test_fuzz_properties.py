"""Property-based fuzzing (hypothesis): no recipe text and no input bytes make bivocab fail with
anything but a clean BivocabError, and the block reader splits lines exactly like Python's
universal newlines whatever the block size."""

from __future__ import annotations

import json
import tempfile
from pathlib import Path
from typing import Iterator

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bivocab.recipe import CleanSpec
from bivocab.sources import BOM, InputFile, read_blocks, text_spans

from fuzz.fuzz_targets import SUFFIXES, VALID_RECIPE, encode_as, parse_recipe, read_input


@pytest.fixture(scope="module")
def workdir() -> Iterator[Path]:
    with tempfile.TemporaryDirectory(prefix="bivocab-fuzz-") as tmp:
        yield Path(tmp)


HEADERS = ["[build]", "[languages.en]", "[languages.de]", '[languages."zh-Hant"]', "[languages.de-419-DE]",
           "[languages]", "[clean]", "[splits]", "[vocab]", "[mix]", "[shards]", "[[condition]]", "[condition]",
           "[[languages]]", "[elsewhere]"]
KEYS = ["name", "seed", "inputs", "normal_form", "lowercase", "invalid_utf8", "max_chars", "min_tokens",
        "max_tokens", "train", "valid", "test", "max_size", "min_count", "unknown", "eos", "pad", "order",
        "format", "policy", "classes", "share", "separate", "bogus", '"quoted key"']
WORDS = ["shared", "word-tagged", "fully-tagged", "tagged", "NFC", "NFKC", "none", "error", "replace", "skip",
         "per-language", "shuffled", "npy", "en/*.txt", "", "Kellhaven", "a/../b", "**"]


def _toml_value(depth: int = 0) -> st.SearchStrategy[str]:
    scalar = st.one_of(
        st.integers(min_value=-(2 ** 63), max_value=2 ** 63 - 1).map(str),
        st.floats(allow_nan=True, allow_infinity=True).map(lambda f: repr(f).replace("inf", "inf")),
        st.booleans().map(lambda b: "true" if b else "false"),
        st.sampled_from(WORDS).map(json.dumps),
        st.text(max_size=12).map(json.dumps),
    )
    if depth >= 2:
        return scalar
    inner = _toml_value(depth + 1)
    return st.one_of(
        scalar,
        st.lists(inner, max_size=4).map(lambda xs: "[" + ", ".join(xs) + "]"),
        st.dictionaries(st.sampled_from(["word", "number", "punct", "symbol", "emoji"]), inner, max_size=3)
          .map(lambda d: "{ " + ", ".join(f"{k} = {v}" for k, v in d.items()) + " }"),
    )


LINES = st.one_of(st.sampled_from(HEADERS), st.tuples(st.sampled_from(KEYS), _toml_value())
                  .map(lambda kv: f"{kv[0]} = {kv[1]}"), st.text(max_size=20))
VALID = VALID_RECIPE.splitlines()


@st.composite
def recipe_texts(draw: st.DrawFn) -> bytes:
    """Either free lines, or a valid recipe with a few lines inserted or removed."""
    if draw(st.booleans()):
        lines = draw(st.lists(LINES, max_size=25))
    else:
        lines = list(VALID)
        for _ in range(draw(st.integers(0, 4))):
            if draw(st.booleans()) and lines:
                del lines[draw(st.integers(0, len(lines) - 1))]
            else:
                lines.insert(draw(st.integers(0, len(lines))), draw(LINES))
    text = "\n".join(lines).encode("utf-8", errors="surrogatepass")
    return text if draw(st.booleans()) else text + draw(st.binary(max_size=4))


@settings(max_examples=400, deadline=None)
@given(text=recipe_texts())
def test_any_recipe_text_parses_or_fails_cleanly(text: bytes, workdir: Path) -> None:
    parse_recipe(text, workdir)


CLEAN_SPECS = st.builds(CleanSpec, normal_form=st.sampled_from(["NFC", "NFKC", "none"]), lowercase=st.booleans(),
                        invalid_utf8=st.sampled_from(["error", "replace", "skip"]),
                        max_chars=st.sampled_from([0, 1, 5, 80]), min_tokens=st.sampled_from([0, 1, 3]),
                        max_tokens=st.sampled_from([0, 2, 50]))
# Text that is mostly valid UTF-8 with the awkward characters of the bad-input matrix mixed in.
TEXTY = st.lists(st.one_of(st.text(max_size=30), st.sampled_from(
    ["\r\n", "\r", "\n", "\x00", "\ufeff", "\u2028", "\u0301", "ﬁ", "İ", "'", "3,50", "🇩🇪", " \t "])),
    max_size=30).map(lambda xs: "".join(xs).encode("utf-8", errors="surrogatepass"))
RAW = st.one_of(TEXTY, st.binary(max_size=300), st.tuples(TEXTY, st.binary(max_size=8)).map(lambda t: BOM + t[0] + t[1]))


@settings(max_examples=400, deadline=None)
@given(data=RAW, spec=CLEAN_SPECS, block_bytes=st.integers(1, 64))
def test_any_plain_text_input_is_read_or_refused_cleanly(data: bytes, spec: CleanSpec, block_bytes: int,
                                                          workdir: Path) -> None:
    read_input(data, ".txt", spec, block_bytes, workdir)


@st.composite
def compressed_files(draw: st.DrawFn) -> tuple[bytes, str]:
    """A compressed or row-format file, intact, cut short, with flipped bytes, or plain noise."""
    suffix = draw(st.sampled_from(SUFFIXES))
    data = encode_as(suffix, draw(TEXTY))
    damage = draw(st.sampled_from(["none", "cut", "flip", "noise"]))
    if damage == "cut":
        data = data[:draw(st.integers(0, max(len(data) - 1, 0)))]
    elif damage == "flip" and data:
        i = draw(st.integers(0, len(data) - 1))
        data = data[:i] + bytes([data[i] ^ draw(st.integers(1, 255))]) + data[i + 1:]
    elif damage == "noise":
        data = draw(st.binary(max_size=200))
    return data, suffix


@settings(max_examples=300, deadline=None)
@given(file=compressed_files(), block_bytes=st.integers(1, 4096))
def test_any_compressed_input_is_read_or_refused_cleanly(file: tuple[bytes, str], block_bytes: int,
                                                         workdir: Path) -> None:
    data, suffix = file
    read_input(data, suffix, CleanSpec(invalid_utf8="replace"), block_bytes, workdir)


@settings(max_examples=400, deadline=None)
@given(data=RAW, block_bytes=st.integers(1, 40))
def test_block_reader_splits_lines_like_universal_newlines(data: bytes, block_bytes: int, workdir: Path) -> None:
    # Reference: Python's bytes.splitlines() (LF, CRLF and lone CR each end one line), after the
    # byte-order mark at the very start is removed; the CR counter counts CR and CRLF line ends.
    path = workdir / "lines.txt"
    path.write_bytes(data)
    blocks = list(read_blocks(InputFile(path, "lines.txt", "en"), 0, block_bytes=block_bytes))
    body = data[len(BOM):] if data.startswith(BOM) else data
    lines = [line for block in blocks for line in block.data.split(b"\n")]
    assert lines == body.splitlines()
    assert [b.first_line for b in blocks] == [1 + sum(b.line_count for b in blocks[:i]) for i in range(len(blocks))]
    assert sum(b.cr_line_ends for b in blocks) == body.count(b"\r")
    assert any(b.bom_removed for b in blocks) == (data.startswith(BOM) and bool(blocks))


@settings(max_examples=400, deadline=None)
@given(data=RAW, block_bytes=st.integers(1, 40))
def test_spans_read_by_workers_hold_the_lines_of_the_block_reader(data: bytes, block_bytes: int,
                                                                    workdir: Path) -> None:
    # Reference: Python's bytes.splitlines() as above. A span's lines are numbered from 1; the
    # build adds the lines of the spans before it.
    path = workdir / "spans.txt"
    path.write_bytes(data)
    blocks = [span.read() for span in text_spans(InputFile(path, "spans.txt", "en"), 0, block_bytes)]
    body = data[len(BOM):] if data.startswith(BOM) else data
    assert [line for b in blocks if b.line_count for line in b.data.split(b"\n")] == body.splitlines()
    assert all(b.first_line == 1 and b.line_count == (b.data.count(b"\n") + 1 if b.line_count else 0)
               for b in blocks)
    assert sum(b.cr_line_ends for b in blocks if b.line_count) == body.count(b"\r")
    assert any(b.bom_removed for b in blocks if b.line_count) == (data.startswith(BOM) and bool(body))


def test_atheris_harness_bounded_run_finds_no_crash() -> None:
    # The coverage-guided harness itself (a longer run belongs in CI: -atheris_runs=20000).
    pytest.importorskip("atheris")
    import subprocess
    import sys

    harness = Path(__file__).resolve().parent / "fuzz" / "fuzz_inputs.py"
    done = subprocess.run([sys.executable, str(harness), "-atheris_runs=1500", "-seed=7"],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr[-3000:]
    assert "Done 1500 in" in done.stderr


def test_parquet_with_invalid_utf8_in_its_schema_is_an_input_error(workdir: Path) -> None:
    # Found by the compressed-input property above: pyarrow raised UnicodeDecodeError.
    from bivocab.errors import InputError

    data = encode_as(".parquet", b"The tide turns.\n")
    at = data.index(b"text", data.index(b"schema"))
    path = workdir / "bad.parquet"
    path.write_bytes(data[:at] + b"\xf4" + data[at + 1:])
    with pytest.raises(InputError, match="bad.parquet: not a readable Parquet file"):
        list(read_blocks(InputFile(path, "bad.parquet", "en"), 0))
