"""Every input format yields the same sentences with exact provenance (docs/inputs.md)."""

from __future__ import annotations

import bz2
import csv
import gzip
import json
import lzma
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import zstandard

from bivocab.build import input_files
from bivocab.corpus import iter_sentences
from bivocab.errors import InputError
from bivocab.recipe import load_recipe
from bivocab.sources import read_blocks
from bivocab.sentences import split_sentences

# Real-world awkwardness on purpose: quotes, commas, tabs-free text, non-ASCII, a field with
# an embedded double quote (CSV escaping) and one that looks like a number.
SENTENCES = [
    "The ferry to Kellhaven leaves at seven.",
    'She said, "the harbour is closed."',
    "Grüße aus dem Hafen: Straße, Möwe, Café.",
    "1848",
    "Nets, ropes and a lantern; nothing else.",
]
OTHER = ["Die Fähre fährt um sieben.", "Der Hafen ist geschlossen."]


def write_recipe(tmp: Path, en: str, extra: str = "") -> Path:
    (tmp / "de.txt").write_text("\n".join(OTHER) + "\n", encoding="utf-8")
    recipe = tmp / "recipe.toml"
    recipe.write_text(f"""
[build]
name = "inputs"
seed = 3
[languages.en]
inputs = ["{en}"]
{extra}
[languages.de]
inputs = ["de.txt"]
[[condition]]
name = "shared"
policy = "shared"
""", encoding="utf-8")
    return recipe


def english(recipe_path: Path) -> list[tuple[str, int]]:
    recipe = load_recipe(recipe_path)
    return [(s.text, s.line) for s in iter_sentences(recipe, lang="en")]


def text_lines(tmp: Path) -> list[tuple[str, int]]:
    return [(text, i + 1) for i, text in enumerate(SENTENCES)]


@pytest.mark.parametrize("suffix,opener", [
    (".txt", open), (".txt.gz", gzip.open), (".txt.bz2", bz2.open), (".txt.xz", lzma.open),
    (".txt.zst", None)])
def test_text_files_plain_and_compressed_yield_every_line(tmp_path: Path, suffix, opener) -> None:
    data = ("\n".join(SENTENCES) + "\n").encode("utf-8")
    path = tmp_path / f"en{suffix}"
    if opener is None:
        path.write_bytes(zstandard.ZstdCompressor().compress(data))
    else:
        with opener(path, "wb") as handle:
            handle.write(data)
    assert english(write_recipe(tmp_path, path.name)) == text_lines(tmp_path)


@pytest.mark.parametrize("suffix", [".jsonl", ".jsonl.gz"])
def test_json_lines_field_yields_same_sentences_with_file_lines(tmp_path: Path, suffix) -> None:
    body = "\n".join(json.dumps({"id": i, "text": t, "meta": {"src": "k"}}, ensure_ascii=i % 2 == 0)
                     for i, t in enumerate(SENTENCES)) + "\n"
    path = tmp_path / f"en{suffix}"
    (gzip.open(path, "wb") if suffix.endswith(".gz") else open(path, "wb")).__enter__().write(body.encode())
    assert english(write_recipe(tmp_path, path.name)) == text_lines(tmp_path)


def test_json_lines_with_another_field_name_and_blank_lines(tmp_path: Path) -> None:
    rows = [json.dumps({"sentence": t}) for t in SENTENCES]
    (tmp_path / "en.jsonl").write_text(rows[0] + "\n\n" + "\n".join(rows[1:]) + "\n", encoding="utf-8")
    got = english(write_recipe(tmp_path, "en.jsonl", 'field = "sentence"'))
    assert [t for t, _ in got] == SENTENCES
    assert [n for _, n in got] == [1, 3, 4, 5, 6]      # the blank line 2 keeps its number


def test_csv_column_with_quoted_fields_and_a_multiline_record_keeps_start_lines(tmp_path: Path) -> None:
    path = tmp_path / "en.csv"
    with open(path, "w", encoding="utf-8", newline="") as handle:
        writer = csv.writer(handle)          # reference: Python's csv module (RFC 4180 quoting)
        writer.writerow(["id", "text", "note"])
        writer.writerow([0, SENTENCES[0], "two\nlines"])   # this record spans lines 2-3
        for i, text in enumerate(SENTENCES[1:], start=1):
            writer.writerow([i, text, ""])
    got = english(write_recipe(tmp_path, "en.csv"))
    assert [t for t, _ in got] == SENTENCES
    assert [n for _, n in got] == [2, 4, 5, 6, 7]


def test_tsv_column_yields_same_sentences_with_file_lines(tmp_path: Path) -> None:
    lines = ["id\ttext"] + [f"{i}\t{t}" for i, t in enumerate(SENTENCES)]
    (tmp_path / "en.tsv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    got = english(write_recipe(tmp_path, "en.tsv"))
    assert got == [(t, n + 1) for t, n in text_lines(tmp_path)]


def test_parquet_column_yields_same_sentences_with_row_numbers(tmp_path: Path) -> None:
    table = pa.table({"id": list(range(len(SENTENCES))), "body": SENTENCES})
    pq.write_table(table, tmp_path / "en.parquet", row_group_size=2)   # several row groups
    got = english(write_recipe(tmp_path, "en.parquet", 'field = "body"'))
    assert got == text_lines(tmp_path)


def test_saved_datasets_directory_yields_same_sentences_with_row_numbers(tmp_path: Path) -> None:
    datasets = pytest.importorskip("datasets", reason="the optional 'datasets' package is not installed")
    datasets.Dataset.from_dict({"text": SENTENCES}).save_to_disk(str(tmp_path / "en_saved"))
    got = english(write_recipe(tmp_path, "en_saved"))
    assert got == text_lines(tmp_path)


def test_saved_dataset_dict_needs_its_split_named(tmp_path: Path) -> None:
    datasets = pytest.importorskip("datasets", reason="the optional 'datasets' package is not installed")
    dd = datasets.DatasetDict({"train": datasets.Dataset.from_dict({"text": SENTENCES}),
                               "test": datasets.Dataset.from_dict({"text": ["x"]})})
    dd.save_to_disk(str(tmp_path / "en_dict"))
    with pytest.raises(InputError, match="dataset_split"):
        english(write_recipe(tmp_path, "en_dict"))
    got = english(write_recipe(tmp_path, "en_dict", 'dataset_split = "train"'))
    assert got == text_lines(tmp_path)


def test_local_file_streamed_through_datasets_load_dataset(tmp_path: Path) -> None:
    pytest.importorskip("datasets", reason="the optional 'datasets' package is not installed")
    (tmp_path / "en.jsonl").write_text("\n".join(json.dumps({"text": t}) for t in SENTENCES) + "\n",
                                       encoding="utf-8")
    got = english(write_recipe(tmp_path, "en.jsonl", 'format = "datasets"'))
    assert got == text_lines(tmp_path)


@pytest.mark.parametrize("name,body,message", [
    ("en.jsonl", '{"text": "ok"}\n{"text": \n', r"en.jsonl:2: not valid JSON"),
    ("en.jsonl", '{"text": "ok"}\n{"body": "x"}\n', r"en.jsonl:2: no field 'text'"),
    ("en.jsonl", '{"text": 5}\n', r"en.jsonl:1: field 'text' holds int"),
    ("en.csv", 'id,body\n1,x\n', r"en.csv:1: no column 'text'"),
    ("en.csv", 'id,text\n1,x\n2\n', r"en.csv:3: row has 1 columns"),
    ("en.tsv", 'id\ttext\n1\tx\ty\n', r"en.tsv:2: row has 3 tab-separated columns"),
])
def test_bad_row_input_is_one_error_naming_file_and_line(tmp_path: Path, name, body, message) -> None:
    (tmp_path / name).write_text(body, encoding="utf-8")
    with pytest.raises(InputError, match=message):
        english(write_recipe(tmp_path, name))


def test_missing_datasets_package_is_a_clear_error(tmp_path: Path, monkeypatch) -> None:
    import builtins

    real_import = builtins.__import__

    def no_datasets(name, *args, **kwargs):
        if name == "datasets":
            raise ImportError("no datasets")
        return real_import(name, *args, **kwargs)

    (tmp_path / "en.jsonl").write_text('{"text": "a b"}\n', encoding="utf-8")
    monkeypatch.setattr(builtins, "__import__", no_datasets)
    with pytest.raises(InputError, match=r"needs the optional package 'datasets'"):
        english(write_recipe(tmp_path, "en.jsonl", 'format = "datasets"'))


def test_null_fields_are_skipped_and_counted(tmp_path: Path) -> None:
    (tmp_path / "en.jsonl").write_text('{"text": "a b"}\n{"text": null}\n{"text": "c"}\n', encoding="utf-8")
    recipe = load_recipe(write_recipe(tmp_path, "en.jsonl"))
    source = input_files(recipe)[0]
    blocks = list(read_blocks(source, 0))
    assert sum(b.line_count for b in blocks) == 2
    assert dict(blocks[0].counters) == {"null_fields_skipped": 1}
    assert blocks[0].source_lines == 3


def test_sentence_splitting_keeps_the_source_line_of_every_sentence(tmp_path: Path) -> None:
    (tmp_path / "en.txt").write_text(
        "Mr. Olsen rowed out. The fog came in! Did he return?\nHe did.\n", encoding="utf-8")
    got = english(write_recipe(tmp_path, "en.txt", "split_sentences = true"))
    assert got == [("Mr. Olsen rowed out.", 1), ("The fog came in!", 1), ("Did he return?", 1), ("He did.", 2)]


def test_sentence_splitter_agrees_with_uax29_on_text_without_abbreviations() -> None:
    # Reference: Unicode UAX #29 sentence boundaries as implemented by PyPI uniseg.  On
    # capitalised sentences with no abbreviations and no initials the two rules coincide
    # (U+2026 is not a sentence terminator in either; U+203D is).
    sentencebreak = pytest.importorskip("uniseg.sentencebreak", reason="uniseg (test extra) is not installed")
    text = ('The tide turned at noon. Boats came home! Who rang the bell? "Nobody," said Ada. '
            "Gulls circled the pier\u2026 then it rained. Was it you\u203d Yes.")
    reference = [s.strip() for s in sentencebreak.sentences(text)]
    assert split_sentences(text, "en") == reference


def test_sentence_splitter_keeps_abbreviations_initials_and_german_ordinals() -> None:
    assert split_sentences("Prof. Weber sah J. Berg am Kai. Gut.", "de") == \
        ["Prof. Weber sah J. Berg am Kai.", "Gut."]
    assert split_sentences("Er kam am 12. Mai, z.B. mit dem Boot. Sie nicht.", "de") == \
        ["Er kam am 12. Mai, z.B. mit dem Boot.", "Sie nicht."]
    assert split_sentences("it was 3 p.m. then we left. ok", "en") == ["it was 3 p.m. then we left. ok"]


def test_a_build_from_json_lines_records_the_file_line_of_each_sentence(tmp_path: Path) -> None:
    import numpy as np

    from bivocab.build import build

    (tmp_path / "en.jsonl").write_text("\n".join(json.dumps({"text": t}) for t in SENTENCES) + "\n",
                                       encoding="utf-8")
    recipe = write_recipe(tmp_path, "en.jsonl", "split_sentences = true")
    manifest = build(recipe, tmp_path / "out").manifest
    lines = []
    for stems in manifest["conditions"]["shared"]["shards"].values():
        for stem in stems:
            prov = np.load(tmp_path / "out" / "provenance" / f"{stem.split('/', 1)[1]}.npy")
            lines += prov["line"][prov["input"] == 0].tolist()
    assert sorted(lines) == [1, 2, 3, 4, 5]
    assert manifest["inputs"][0]["lines"] == 5


def test_recipe_recorded_in_build_json_rebuilds_with_every_new_key(tmp_path: Path) -> None:
    from bivocab.build import build
    from bivocab.recipe import recipe_from_manifest

    (tmp_path / "en.tsv").write_text("id\tbody\n1\tA pier .\n", encoding="utf-8")
    (tmp_path / "items.tsv").write_text("sentence\nNothing here .\n", encoding="utf-8")
    extra = 'format = "tsv"\nfield = "body"\nsplit_sentences = true\n' + """
[mix]
order = "alternating"
within_language = "input"
balance = "tokens"
alpha = 0.3
resample = "up"
balance_splits = ["train", "valid"]
[shards]
format = "npy+parquet"
[hygiene]
duplicates = "drop"
cross_language = "keep-first"
foreign = "report"
exclude_items = ["items.tsv"]
exclude_from = "all"
"""
    recipe = load_recipe(write_recipe(tmp_path, "en.tsv", extra))
    manifest = build(recipe, tmp_path / "out").manifest
    assert recipe_from_manifest(manifest, tmp_path / "out") == recipe


def test_parquet_column_that_is_not_text_is_an_error_naming_the_file(tmp_path: Path) -> None:
    pq.write_table(pa.table({"text": [1, 2]}), tmp_path / "en.parquet")
    with pytest.raises(InputError, match=r"en.parquet: column 'text' has type int64, not a string column"):
        english(write_recipe(tmp_path, "en.parquet"))


def test_a_file_that_is_not_parquet_is_an_error_naming_the_file(tmp_path: Path) -> None:
    (tmp_path / "en.parquet").write_bytes(b"not parquet at all\n")
    with pytest.raises(InputError, match=r"en.parquet: not a readable Parquet file"):
        english(write_recipe(tmp_path, "en.parquet"))


def test_invalid_utf8_in_a_csv_field_follows_the_recipe_policy(tmp_path: Path) -> None:
    (tmp_path / "en.csv").write_bytes(b"id,text\n1,The pier\n2,bad \xff byte\n")
    with pytest.raises(InputError, match=r"en.csv:3: invalid UTF-8"):
        english(write_recipe(tmp_path, "en.csv"))
    recipe = write_recipe(tmp_path, "en.csv").read_text() + '[clean]\ninvalid_utf8 = "replace"\n'
    (tmp_path / "recipe.toml").write_text(recipe, encoding="utf-8")
    assert english(tmp_path / "recipe.toml") == [("The pier", 2), ("bad \ufffd byte", 3)]


def test_bad_row_input_on_the_command_line_is_one_line_and_exit_2(tmp_path: Path) -> None:
    from click.testing import CliRunner

    from bivocab.cli import main

    (tmp_path / "en.jsonl").write_text('{"text": "ok"}\n[1, 2]\n', encoding="utf-8")
    recipe = write_recipe(tmp_path, "en.jsonl")
    result = CliRunner().invoke(main, ["build", str(recipe), "--out", str(tmp_path / "out")])
    assert result.exit_code == 2
    assert result.output.strip().splitlines() == ["error: en.jsonl:2: expected a JSON object per line, got list"]
    assert not (tmp_path / "out" / "build.json").exists()
