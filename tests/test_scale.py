"""Pass 1 at scale: the parallel scan gives the same build whatever --jobs, its fast paths agree
with the segmentation regex (and with the tokenizers library), its splits are those of
assign_splits, and the build reports its stages."""

from __future__ import annotations

import hashlib
import importlib
import os
import re
import subprocess
import sys
import time
import unicodedata
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

import bivocab.scan as scan_module
from bivocab import build
from bivocab.cli import main
from bivocab.clean import _CONTROL_RE, _EDGE_SPACE_RE, _MULTI_SPACE_RE, _SPACE_RE, normalise_lines
from bivocab.progress import BuildMeter
from bivocab.recipe import CleanSpec, SplitSpec
from bivocab.scan import ScanTask, WorkerError, ordered_map, scan_block
from bivocab.segment import segment
from bivocab.errors import LineError
from bivocab.sources import BOM, Block
from bivocab.splits import assign_splits, split_thresholds
from conftest import write_corpus, write_recipe

build_module = importlib.import_module("bivocab.build")  # the package exports a function of that name

EN = ["The ferry to Kellhaven leaves at 7.15, if the fog lifts.",
      "Gulls followed the trawler \"Marta\" (registered 1,204) into the harbour!",
      "Don't tie up at pier 3; the crane's broken."]
DE = ["Die Fähre nach Kellhaven fährt um 7.15 Uhr, wenn sich der Nebel hebt.",
      "Möwen folgten dem Kutter „Marta“ (Nr. 1.204) in den Hafen!",
      "Das Café des Hafenmeisters öffnet um sechs. Geht's?"]


def _corpus(root: Path, sentences: int = 1500) -> Path:
    """The shared generated corpus (tests/conftest.py) with shards of 2,000 tokens."""
    write_corpus(root, sentences)
    return write_recipe(root, "[shards]\nmax_tokens = 2000")


def _tree(out: Path) -> dict[str, bytes]:
    return {str(p.relative_to(out)): p.read_bytes() for p in sorted(out.rglob("*")) if p.is_file()}


@pytest.fixture
def small_blocks(monkeypatch: pytest.MonkeyPatch) -> None:
    """Blocks of 2 KiB, so that a small corpus spans many blocks and both workers get work."""
    monkeypatch.setattr(build_module, "SCAN_BLOCK_BYTES", 2048)


def test_build_is_byte_identical_whatever_the_number_of_jobs(tmp_path: Path, small_blocks: None) -> None:
    recipe = _corpus(tmp_path)
    trees = []
    for jobs in (1, 2, 3):
        out = tmp_path / f"out{jobs}"
        build(recipe, out, jobs=jobs)
        trees.append(_tree(out))
    assert trees[0] == trees[1] == trees[2]
    assert any(name.endswith("tokens.npy") for name in trees[0])


def test_workers_reading_their_own_spans_build_what_blocks_read_by_the_build_give(
        tmp_path: Path, small_blocks: None, monkeypatch: pytest.MonkeyPatch) -> None:
    # Line numbers (provenance), counters and every shard must not depend on who reads the text:
    # a byte-order mark, CRLF and lone CR line ends, blank lines, spans of 2 KiB.
    recipe = _corpus(tmp_path)
    for tag, ending in (("en", b"\r\n"), ("de", b"\r")):
        part = tmp_path / tag / "part.txt"
        lines = part.read_bytes().split(b"\n")
        lines[10:10] = [b"", b"", b"   "]
        part.write_bytes((BOM if tag == "en" else b"") + ending.join(lines))
    build(recipe, tmp_path / "spans", jobs=2)
    monkeypatch.setattr(build_module, "read_as_spans", lambda source: False)
    build(recipe, tmp_path / "blocks", jobs=2)
    assert _tree(tmp_path / "spans") == _tree(tmp_path / "blocks")
    lines = np.load(tmp_path / "spans" / "provenance" / "train" / "shard-00000.npy")["line"]
    assert lines.max() > 1000   # numbered across many spans


@pytest.mark.parametrize("jobs", [1, 2])
def test_an_error_at_a_line_of_a_later_span_names_the_line_of_the_file(tmp_path: Path, small_blocks: None,
                                                                       jobs: int) -> None:
    recipe = _corpus(tmp_path)
    part = tmp_path / "de" / "part.txt"
    lines = part.read_bytes().split(b"\n")
    lines[1233] = b"Kai \xff Boot"
    part.write_bytes(b"\n".join(lines))
    with pytest.raises(LineError, match=r"^de/part.txt:1234: invalid UTF-8 at byte 4 of the line"):
        build(recipe, tmp_path / "out", jobs=jobs)


def test_build_is_unchanged_when_workers_forget_their_chunks(tmp_path: Path, small_blocks: None,
                                                            monkeypatch: pytest.MonkeyPatch) -> None:
    recipe = _corpus(tmp_path)
    build(recipe, tmp_path / "remember", jobs=1)
    monkeypatch.setattr(scan_module, "MAX_CHUNKS", 5)
    build(recipe, tmp_path / "forget", jobs=1)
    assert _tree(tmp_path / "remember") == _tree(tmp_path / "forget")


def _scan_lines(lines: list[str], seed: int = 3) -> tuple[list[list[str]], np.ndarray]:
    """Tokens and splits of each line, as the scan computes them (surfaces via new_types)."""
    data = "\n".join(lines).encode("utf-8")
    block = Block(0, 1, data, len(lines))
    task = ScanTask(block, "t.txt", "en", CleanSpec(normal_form="none"), seed,
                    split_thresholds(SplitSpec()), session=hashlib.sha1(data).hexdigest())
    result = scan_block(task)
    surfaces = result.new_types
    tokens = [surfaces[i] for i in result.tokens.tolist()]
    ends = np.cumsum(result.lengths)
    per_line = [tokens[e - n:e] for e, n in zip(ends.tolist(), result.lengths.tolist())]
    return per_line, result.splits


def test_scan_tokens_equal_the_segmentation_of_each_line() -> None:
    lines = EN + DE + ["a,b c. d; ... Straße, naïve; Ærø! x", "ŉ ĸ ſ; À, ÿ."]
    tokens, _ = _scan_lines(lines)
    assert tokens == [segment(line) for line in lines]


# Text of single-spaced chunks drawn from letters (ASCII, Latin-1, Latin Extended-A, Greek),
# combining marks, digits, apostrophes and punctuation: every fast path and the regex path.
_ALPHABET = st.sampled_from(list("aZéßÆœŉſΩ\u0301\u0308'’0379,.;:!?()\"«»-–€#"))
_CHUNK = st.text(_ALPHABET, min_size=1, max_size=8)
_LINE = st.lists(_CHUNK, min_size=1, max_size=6).map(" ".join)


@settings(max_examples=150, deadline=None)
@given(st.lists(_LINE, min_size=1, max_size=8))
def test_scan_agrees_with_segment_and_assign_splits_on_any_text(lines: list[str]) -> None:
    tokens, splits = _scan_lines(lines, seed=9)
    assert tokens == [segment(line) for line in lines]
    assert splits.tolist() == assign_splits(lines, 9, split_thresholds(SplitSpec())).tolist()


def test_scan_tokens_match_the_tokenizers_library_with_the_exported_tokenizer(tmp_path: Path) -> None:
    # Reference: the tokenizers library (PyPI `tokenizers`) running our exported pre-tokenizer
    # (Oniguruma regex engine), an implementation independent of the scan's fast paths.
    from tokenizers import Tokenizer

    recipe = _corpus(tmp_path, sentences=60)
    out = tmp_path / "out"
    build(recipe, out)
    tokenizer = Tokenizer.from_file(str(out / "shared" / "tokenizer.de.json"))
    lines = (tmp_path / "de" / "part.txt").read_text(encoding="utf-8").splitlines() + DE
    ours, _ = _scan_lines(lines)
    theirs = [[piece for piece, _ in tokenizer.pre_tokenizer.pre_tokenize_str(line)] for line in lines]
    assert ours == theirs


def test_split_of_a_sentence_depends_only_on_its_text_and_the_seed() -> None:
    th = split_thresholds(SplitSpec(0.5, 0.25, 0.25))
    texts = [f"the boat {i} came in" for i in range(200)]
    alone = [int(assign_splits([t], 4, th)[0]) for t in texts[:20]]
    assert assign_splits(texts, 4, th)[:20].tolist() == alone
    assert assign_splits(texts[::-1], 4, th)[::-1][:20].tolist() == alone
    assert assign_splits(texts, 5, th).tolist() != assign_splits(texts, 4, th).tolist()


def test_split_is_the_keyed_blake2b_of_the_text_against_the_thresholds() -> None:
    # Reference: BLAKE2b (RFC 7693) as implemented by Python's hashlib, keyed with the seed.
    th = split_thresholds(SplitSpec(0.8, 0.1, 0.1))
    texts = ["Die Fähre fährt.", "The ferry is late.", "Gulls!"] + [f"log {i}" for i in range(300)]
    key = (12).to_bytes(16, "little", signed=True)
    hashes = [int.from_bytes(hashlib.blake2b(t.encode(), digest_size=8, key=key).digest(), "little") for t in texts]
    expected = [0 if h < th[0] else 1 if h < th[1] else 2 for h in hashes]
    assert assign_splits(texts, 12, th).tolist() == expected


def test_split_fractions_follow_the_recipe() -> None:
    texts = [f"line {i} of the harbour log" for i in range(30_000)]
    splits = assign_splits(texts, 7, split_thresholds(SplitSpec(0.8, 0.1, 0.1)))
    shares = np.bincount(splits, minlength=3) / len(texts)
    # Binomial standard error at n = 30,000 is about 0.0023 for p = 0.8 (sqrt(p(1-p)/n)).
    assert np.allclose(shares, [0.8, 0.1, 0.1], atol=0.012)


def test_ordered_map_returns_results_in_input_order_with_affinity() -> None:
    items = list(range(-60, 0))
    assert list(ordered_map(abs, items, 2, affinity=lambda x: x % 3)) == [abs(x) for x in items]


def test_ordered_map_raises_a_worker_exception_in_the_parent() -> None:
    with pytest.raises(ValueError):
        list(ordered_map(int, ["1", "2", "harbour", "4"], 2))


def test_worker_error_is_a_one_line_build_error() -> None:
    assert issubclass(WorkerError, build_module.BivocabError)


_SPACE_OR_CONTROL = st.text(st.sampled_from(list("ab \t\x00\x0b\x1f\x85\xa0\u2003\u3000\x7f") + ["\n"]), max_size=30)


@settings(max_examples=300, deadline=None)
@given(_SPACE_OR_CONTROL)
def test_normalise_lines_fast_path_equals_the_full_substitutions(text: str) -> None:
    full = _SPACE_RE.sub(" ", _CONTROL_RE.sub(" ", text))
    full = _EDGE_SPACE_RE.sub("", _MULTI_SPACE_RE.sub(" ", unicodedata.normalize("NFC", full)))
    assert normalise_lines(text, CleanSpec()) == full


def test_profile_flag_prints_the_time_of_each_stage(tmp_path: Path) -> None:
    recipe = _corpus(tmp_path, sentences=40)
    result = CliRunner().invoke(main, ["build", str(recipe), "--out", str(tmp_path / "out"), "--quiet", "--profile"])
    assert result.exit_code == 0, result.output
    stages = [line.split()[0] for line in result.stderr.splitlines()[1:]]
    assert stages[:2] == ["hash", "scan"] and "vocabulary" in stages and "shards" in stages
    assert re.search(r"^scan\s+\d+\.\d+\s+\d+\.\d%\s+\d+\.\d+ M words/s", result.stderr, re.M)


def test_build_prints_no_progress_without_a_terminal(tmp_path: Path) -> None:
    recipe = _corpus(tmp_path, sentences=40)
    result = CliRunner().invoke(main, ["build", str(recipe), "--out", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    assert result.stderr == ""


def test_meter_records_stages_in_order_with_their_amounts() -> None:
    meter = BuildMeter()
    advance = meter.begin("scan", unit="B")
    advance(10, words=3)
    advance(5, words=2)
    with meter.stage("shards", unit="sentences") as step:
        step(4)
    meter.end()
    assert [(t.name, t.amount, t.words) for t in meter.timings] == [("scan", 15, 5), ("shards", 4, 0)]
    assert all(t.seconds >= 0 for t in meter.timings)


def test_build_is_unchanged_when_shard_buckets_are_copied_in_tiny_chunks(tmp_path: Path,
                                                                        monkeypatch: pytest.MonkeyPatch) -> None:
    recipe = _corpus(tmp_path)
    build(recipe, tmp_path / "big", jobs=1)
    monkeypatch.setattr(importlib.import_module("bivocab.gather"), "CHUNK_TOKENS", 7)
    build(recipe, tmp_path / "tiny", jobs=1)
    assert _tree(tmp_path / "big") == _tree(tmp_path / "tiny")


def test_build_with_empty_valid_and_test_splits_writes_no_shards_for_them(tmp_path: Path) -> None:
    recipe = _corpus(tmp_path, sentences=50)
    recipe.write_text(recipe.read_text(encoding="utf-8") + "\n[splits]\ntrain = 1.0\nvalid = 0.0\ntest = 0.0\n",
                      encoding="utf-8")
    result = build(recipe, tmp_path / "out")
    shards = result.manifest["conditions"]["shared"]["shards"]
    assert shards["valid"] == [] and shards["test"] == [] and shards["train"]


def test_printable_shortcut_never_hides_a_character_that_cleaning_replaces() -> None:
    # Reference: the Unicode General_Category of every code point (Python's unicodedata): the
    # shortcut relies on C* and Z* (except U+0020) being exactly what str.isprintable rejects.
    from bivocab.clean import _ODD_SPACE_OR_CONTROL_RE, _only_printable

    missed = [hex(c) for c in range(0x110000)
              if c != 0x0A and not 0xD800 <= c < 0xE000
              and _ODD_SPACE_OR_CONTROL_RE.match(chr(c)) and _only_printable(chr(c))]
    assert missed == []
    assert not _only_printable("a\u00a0b") and _only_printable("Fähre\nnach Kellhaven")
    assert unicodedata.category("\u00a0") == "Zs"


def test_the_program_exits_with_the_command_exit_code_and_its_output_flushed(tmp_path: Path) -> None:
    # `bivocab` ends the process without the interpreter's teardown (cli.run): the exit code
    # and everything printed must survive that.
    recipe = _corpus(tmp_path, sentences=40)
    ok = subprocess.run([sys.executable, "-m", "bivocab", "build", str(recipe), "--out", str(tmp_path / "out"),
                         "--jobs", "2"], capture_output=True, text=True)
    assert ok.returncode == 0, ok.stderr
    assert "train" in ok.stdout and ok.stdout.endswith("\n")
    bad = subprocess.run([sys.executable, "-m", "bivocab", "build", str(tmp_path / "missing.toml"), "--out",
                          str(tmp_path / "out2")], capture_output=True, text=True)
    assert bad.returncode == 2 and bad.stderr.startswith("error: ") and bad.stderr.count("\n") == 1
    usage = subprocess.run([sys.executable, "-m", "bivocab", "build"], capture_output=True, text=True)
    assert usage.returncode == 2 and "Missing argument" in usage.stderr


def test_a_word_level_build_never_imports_pandas(tmp_path: Path) -> None:
    # pyarrow imports pandas (about 0.3 s) whenever pyarrow.array or to_numpy is called; the
    # build makes its arrow arrays from buffers (bivocab.arrow) so neither it nor its workers pay that.
    recipe = _corpus(tmp_path, sentences=200)
    script = ("import sys\n"
              "from bivocab import build\n"
              f"build({str(recipe)!r}, {str(tmp_path / 'out')!r}, jobs=1)\n"
              "print(sorted(m for m in sys.modules if m.split('.')[0] == 'pandas'))\n")
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert done.stdout.splitlines()[0] == "[]"


def test_workers_exit_when_the_build_process_is_killed(tmp_path: Path) -> None:
    # A killed build (SIGKILL: no clean-up runs) must not leave its worker processes behind.
    (tmp_path / "feeder.py").write_text(
        "import os, time\n"
        "from bivocab.scan import ordered_map\n\n"
        "def worker_pid(_):\n    return os.getpid()\n\n"
        # ordered_map hands out two items per worker before it yields a result: the first two
        # results (one per worker) are printed once items 5 and 6 are taken; then it waits.
        "def items():\n    yield from range(6)\n    time.sleep(120)\n    yield 6\n\n"
        "if __name__ == '__main__':\n"
        "    for pid in ordered_map(worker_pid, items(), 2):\n"
        "        print(pid, flush=True)\n")
    proc = subprocess.Popen([sys.executable, str(tmp_path / "feeder.py")], stdout=subprocess.PIPE, text=True,
                            cwd=tmp_path, env={**os.environ, "PYTHONPATH": str(tmp_path)})
    try:
        pids = {int(proc.stdout.readline()), int(proc.stdout.readline())}
    finally:
        proc.kill()
        proc.wait(timeout=30)
    deadline = time.monotonic() + 20
    alive = set(pids)
    while alive and time.monotonic() < deadline:
        time.sleep(0.2)
        alive = {pid for pid in alive if _running(pid)}
    assert not alive, f"worker processes {sorted(alive)} outlived the killed parent"


def _running(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as handle:
            return handle.read().rsplit(")", 1)[1].split()[0] != "Z"   # a zombie has exited
    except FileNotFoundError:
        return False
