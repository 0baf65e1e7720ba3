"""The bad-input matrix of docs/bad-input.md: one row, one case. Each input gets its defined
behaviour, its counter in build.json inputs[].report, and one clear line from the CLI (exit 2
and exactly one line on stderr for an error; a `note:` line for an accepted oddity)."""

from __future__ import annotations

import gzip
import importlib
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import pytest
from click.testing import CliRunner

from bivocab.cli import main
from bivocab.manifest import MANIFEST, read_manifest

from corpus_factory import write_recipe

build_module = importlib.import_module("bivocab.build")

BASE = {
    "en/base.txt": b"The ferry leaves the quay at dawn.\nGulls circle over the lighthouse.\nThe storm is late.\n",
    "de/base.txt": "Die Fähre verlässt den Kai.\nMöwen kreisen über dem Leuchtturm.\nDer Sturm ist spät.\n".encode(),
}
BIG_WORDS = 1_000_000
BIG_LINE = b" ".join([b"Kellhaven", b"tide"] * (BIG_WORDS // 2)) + b"\n"  # 9.5 MB, one line


@dataclass(frozen=True)
class Row:
    files: dict[str, bytes] = field(default_factory=dict)
    recipe: Callable[[str], str] = lambda text: text     # edits the recipe text
    extra: str = ""                                       # appended to the recipe
    error: str | None = None                              # regex of the one stderr line (exit 2)
    counters: dict[str, int] = field(default_factory=dict)  # expected in the report of `path`
    path: str = "en/odd.txt"
    note: str | None = None                               # expected `note:` text for `path`
    en: str = "en/*"


def _gzip_truncated() -> bytes:
    data = gzip.compress(b"The tide turns.\n" * 2000)
    return data[: len(data) // 2]


def _corrupted(data: bytes) -> bytes:
    return data[:20] + bytes(b ^ 0x55 for b in data[20:40]) + data[40:]


def _zstd_truncated() -> bytes:
    import zstandard

    data = zstandard.ZstdCompressor().compress(b"The tide turns.\n" * 2000)
    return data[: len(data) // 2]


ROWS = {
    "invalid-utf8-error": Row({"en/odd.txt": b"Good line.\nBad \xff byte.\n"},
                              error=r"en/odd.txt:2: invalid UTF-8 at byte 4 of the line \(byte value 0xff\); "
                                    r"set \[clean\] invalid_utf8 = \"replace\" or \"skip\" to accept it"),
    "invalid-utf8-replace": Row({"en/odd.txt": b"Good line.\nBad \xff byte.\n"},
                                extra='[clean]\ninvalid_utf8 = "replace"\n',
                                counters={"invalid_utf8_replaced_lines": 1, "sentences_kept": 2},
                                note="1 lines with invalid UTF-8 kept with U+FFFD"),
    "invalid-utf8-skip": Row({"en/odd.txt": b"Good line.\nBad \xff byte.\n"},
                             extra='[clean]\ninvalid_utf8 = "skip"\n',
                             counters={"invalid_utf8_skipped_lines": 1, "sentences_kept": 1},
                             note="1 lines with invalid UTF-8 skipped"),
    "nul-bytes": Row({"en/odd.txt": b"Nets\x00and rope.\n"},
                     counters={"nul_characters": 1, "control_characters_replaced": 1, "tokens_kept": 4},
                     note="1 NUL characters replaced by spaces, 1 control characters replaced by spaces"),
    "byte-order-mark": Row({"en/odd.txt": b"\xef\xbb\xbfThe quay.\n"},
                           counters={"byte_order_marks_removed": 1, "sentences_kept": 1},
                           note="byte-order mark removed"),
    "crlf-line-ends": Row({"en/odd.txt": b"One boat.\r\nTwo boats.\r\n"},
                          counters={"cr_line_ends": 2, "lines_read": 2, "sentences_kept": 2},
                          note="2 CR or CRLF line ends read as line breaks"),
    "lone-cr-line-ends": Row({"en/odd.txt": b"One boat.\rTwo boats.\rThree boats."},
                             counters={"cr_line_ends": 2, "lines_read": 3, "sentences_kept": 3},
                             note="2 CR or CRLF line ends read as line breaks"),
    "empty-lines": Row({"en/odd.txt": b"One boat.\n\n   \nTwo boats.\n"},
                       counters={"empty_lines_dropped": 2, "lines_read": 4, "sentences_kept": 2},
                       note="2 empty lines dropped"),
    "empty-file": Row({"en/odd.txt": b""}, counters={"empty_file": 1, "lines_read": 0},
                      note="empty file (no lines)"),
    "single-10mb-line": Row({"en/odd.txt": BIG_LINE},
                            counters={"lines_read": 1, "sentences_kept": 1, "tokens_kept": BIG_WORDS,
                                      "long_lines_kept": 1},
                            note="1 lines over 100,000 characters kept as one sentence each "
                                 "(set [clean] max_chars to drop them)"),
    "single-10mb-line-max-chars": Row({"en/odd.txt": BIG_LINE}, extra="[clean]\nmax_chars = 1000\n",
                                      counters={"too_long_dropped": 1, "lines_read": 1},
                                      note="1 lines longer than [clean] max_chars dropped"),
    "file-changes-while-read": Row({"en/odd.txt": b"The tide turns.\n" * 10},
                                   error=r"en/odd.txt: input file changed while it was being read; "
                                         r"rebuild when it is stable"),
    "file-changes-after-hashing": Row({"en/odd.txt": b"The tide turns.\n" * 10},
                                      error=r"en/odd.txt: input file changed while the build was reading it; "
                                            r"rebuild when it is stable"),
    "truncated-gzip": Row({"en/odd.txt.gz": _gzip_truncated()},
                          error=r"en/odd.txt.gz: compressed input is truncated \(unexpected end of data\)"),
    "corrupt-gzip": Row({"en/odd.txt.gz": _corrupted(gzip.compress(b"The tide turns.\n" * 2000))},
                        error=r"en/odd.txt.gz: cannot read input \(error: Error -3 while decompressing data: .*\)"),
    "truncated-zstd": Row({"en/odd.txt.zst": _zstd_truncated()},
                          error=r"en/odd.txt.zst: compressed input is truncated \(unexpected end of data\)"),
    "symlink-loop-file": Row(error=r"en/loop-a.txt: broken symbolic link or symbolic link loop "
                                   r"\(matched by 'en/\*' in \[languages.en\]\)"),
    "symlink-cycle-in-recursive-glob": Row(en="en/**/*.txt",
                                           error=r"en/sub/up/base.txt: is the same file as en/base.txt "
                                                 r"\(reached through a symbolic link\); make the globs of "
                                                 r"\[languages.en\] match each file once"),
    "recipe-unknown-key": Row(extra="[vocab]\nmax_sise = 5\n",
                              error=r"recipe.toml:\d+: \[vocab\] max_sise: unknown key \(known keys: eos, "
                                    r"max_size, min_count, pad, unknown\)"),
    "recipe-wrong-type": Row(extra='[vocab]\nmin_count = "two"\n',
                             error=r"recipe.toml:\d+: \[vocab\] min_count: expected int, got str 'two'"),
    "recipe-bad-value": Row(recipe=lambda t: t.replace("seed = 3", "seed = -1"),
                            error=r"recipe.toml:3: \[build\] seed: must be >= 0"),
    "recipe-missing-table": Row(recipe=lambda t: t.replace("[build]\nname = \"tiny\"\nseed = 3\n", ""),
                                error=r"recipe.toml: missing table \[build\]"),
    "recipe-duplicate-condition": Row(extra='[[condition]]\nname = "shared"\npolicy = "fully-tagged"\n',
                                      error=r"recipe.toml:\d+: \[condition\] name: duplicate condition name 'shared'"),
    "invalid-bcp47-tag": Row(recipe=lambda t: t.replace("[languages.de]", "[languages.de-419-DE]"),
                             error=r"recipe.toml:\d+: \[languages.de-419-DE\]: 'de-419-DE' is not a valid "
                                   r"BCP 47 language tag"),
}


def _prepare(name: str, root: Path, monkeypatch: pytest.MonkeyPatch) -> Row:
    row = ROWS[name]
    for rel, data in {**BASE, **row.files}.items():
        (root / rel).parent.mkdir(parents=True, exist_ok=True)
        (root / rel).write_bytes(data)
    recipe = write_recipe(root, en=row.en, de="de/*", extra=row.extra)
    recipe.write_text(row.recipe(recipe.read_text()))
    if name == "symlink-loop-file":
        os.symlink("loop-b.txt", root / "en" / "loop-a.txt")
        os.symlink("loop-a.txt", root / "en" / "loop-b.txt")
    if name == "symlink-cycle-in-recursive-glob":
        (root / "en" / "sub").mkdir()
        os.symlink("..", root / "en" / "sub" / "up")
    if name == "file-changes-while-read":
        # Plain text is cut into spans that the workers read; other inputs are read in blocks.
        real = build_module.text_spans

        def appending(source, index, *args, **kwargs):
            for n, span in enumerate(real(source, index, 64)):
                if n == 1 and source.display == row.path:
                    with open(source.path, "ab") as handle:
                        handle.write(b"A late line.\n")
                yield span

        monkeypatch.setattr(build_module, "text_spans", appending)
    if name == "file-changes-after-hashing":
        real_start = build_module.start_hashing_inputs

        def hash_then_change(files, **options):
            states = real_start(files, **options)   # the stat is taken (the hashing may go on beside the scan)
            with open(root / row.path, "ab") as handle:
                handle.write(b"A late line.\n")
            return states

        monkeypatch.setattr(build_module, "start_hashing_inputs", hash_then_change)
    return row


@pytest.mark.parametrize("name", list(ROWS))
def test_bad_input_row(name: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    row = _prepare(name, tmp_path, monkeypatch)
    os.chdir(tmp_path)  # messages name inputs relative to the recipe, as a user runs it
    result = CliRunner().invoke(main, ["build", "recipe.toml", "--out", "out"])
    assert "Traceback" not in result.output and result.exception is None or isinstance(result.exception, SystemExit)
    if row.error:
        assert result.exit_code == 2, result.output
        assert result.stderr.count("\n") == 1, result.stderr
        assert re.fullmatch(f"error: {row.error}\n", result.stderr), result.stderr
        assert not (tmp_path / "out" / MANIFEST).exists()
        return
    assert result.exit_code == 0, result.output
    manifest = read_manifest(tmp_path / "out")
    report = next(entry["report"] for entry in manifest["inputs"] if entry["path"] == row.path)
    assert {k: report.get(k) for k in row.counters} == row.counters
    notes = [line for line in result.stderr.splitlines() if line.startswith(f"note: {row.path}: ")]
    assert notes == [f"note: {row.path}: {row.note}"]


@pytest.mark.parametrize("name", ["file-changes-while-read", "file-changes-after-hashing"])
def test_an_input_that_changes_is_caught_with_two_jobs_too(name: str, tmp_path: Path,
                                                           monkeypatch: pytest.MonkeyPatch) -> None:
    # With more than one job the inputs are hashed beside the scan instead of before it.
    row = _prepare(name, tmp_path, monkeypatch)
    os.chdir(tmp_path)
    result = CliRunner().invoke(main, ["build", "recipe.toml", "--out", "out", "--jobs", "2"])
    assert result.exit_code == 2, result.output
    assert re.fullmatch(f"error: {row.error}\n", result.stderr), result.stderr
    assert not (tmp_path / "out" / MANIFEST).exists()


def test_every_matrix_row_is_documented() -> None:
    doc = (Path(__file__).resolve().parents[1] / "docs" / "bad-input.md").read_text(encoding="utf-8")
    documented = set(re.findall(r"^\| `([a-z0-9-]+)` \|", doc, flags=re.MULTILINE))
    assert documented == set(ROWS)
