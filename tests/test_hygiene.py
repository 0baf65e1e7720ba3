"""Hygiene steps on planted cases, and foreign-sentence detection on real text."""

from __future__ import annotations

import json
import random
from pathlib import Path

import numpy as np
import pytest

from bivocab.build import build
from bivocab.clean import normalise_text
from bivocab.corpus import iter_sentences
from bivocab.errors import InputError, RecipeError
from bivocab.hygiene import SeenHashes, sentence_hashes
from bivocab.recipe import CleanSpec, SplitSpec, load_recipe
from bivocab.splits import assign_split
from recipe_factory import kellhaven_lines, write_corpus

ALL_TRAIN = "[splits]\ntrain = 1.0\nvalid = 0.0\ntest = 0.0\n"


def kept_lines(out: Path, input_index: int) -> list[int]:
    """Lines of one input that reached the shards, from the provenance arrays."""
    manifest = json.loads((out / "build.json").read_text())
    lines = []
    for stems in manifest["conditions"]["shared"]["shards"].values():
        for stem in stems:
            prov = np.load(out / "provenance" / f"{stem.split('/', 1)[1]}.npy")
            lines += prov["line"][prov["input"] == input_index].tolist()
    return sorted(lines)


def report_of(out: Path, input_index: int) -> dict:
    return json.loads((out / "build.json").read_text())["inputs"][input_index]["report"]


def test_exact_duplicates_are_dropped_after_normalisation_keeping_the_first(tmp_path: Path) -> None:
    base = kellhaven_lines("en", 5)
    en = base + ["Cafe\u0301 by the pier .", base[1].replace(" ", "  ", 1), "Café by the pier ."]
    # Line 8 (NFC) equals line 6 (NFD) after normalisation; line 7 equals line 2 once the
    # double space is collapsed.
    recipe = write_corpus(tmp_path, en, kellhaven_lines("de", 5), ALL_TRAIN + '[hygiene]\nduplicates = "drop"\n')
    build(recipe, tmp_path / "out")
    assert kept_lines(tmp_path / "out", 0) == [1, 2, 3, 4, 5, 6]
    assert report_of(tmp_path / "out", 0)["duplicates_dropped"] == 2
    assert report_of(tmp_path / "out", 0)["sentences_kept"] == 6


def test_duplicates_are_kept_by_default(tmp_path: Path) -> None:
    recipe = write_corpus(tmp_path, ["A pier .", "A pier ."], ["Ein Steg ."], ALL_TRAIN)
    build(recipe, tmp_path / "out")
    assert kept_lines(tmp_path / "out", 0) == [1, 2]


def test_duplicates_across_files_of_one_language_count_in_input_order(tmp_path: Path) -> None:
    recipe = write_corpus(tmp_path, ["A pier .", "A net ."], ["Ein Steg ."], ALL_TRAIN + '[hygiene]\nduplicates = "drop"\n')
    (tmp_path / "en2.txt").write_text("A net .\nA gull .\n", encoding="utf-8")
    text = recipe.read_text().replace('inputs = ["en.txt"]', 'inputs = ["en.txt", "en2.txt"]')
    recipe.write_text(text)
    build(recipe, tmp_path / "out")
    assert kept_lines(tmp_path / "out", 1) == [2]
    assert report_of(tmp_path / "out", 1)["duplicates_dropped"] == 1


SHARED_LINES = ["https://kellhaven.example/harbour", "1848 - 1921", '"Carpe diem."']


@pytest.mark.parametrize("choice,en_kept,de_kept", [
    ("keep", [1, 2, 3, 4, 5, 6], [1, 2, 3, 4, 5, 6]),
    ("drop-both", [1, 2, 3], [1, 2, 3]),
    ("keep-first", [1, 2, 3, 4, 5, 6], [1, 2, 3]),
])
def test_cross_language_duplicates_are_reported_and_handled_by_the_recipe_choice(
        tmp_path: Path, choice: str, en_kept: list[int], de_kept: list[int]) -> None:
    recipe = write_corpus(tmp_path, kellhaven_lines("en", 3) + SHARED_LINES,
                          kellhaven_lines("de", 3) + SHARED_LINES[::-1],
                          ALL_TRAIN + f'[hygiene]\ncross_language = "{choice}"\n')
    manifest = build(recipe, tmp_path / "out").manifest
    assert kept_lines(tmp_path / "out", 0) == en_kept
    assert kept_lines(tmp_path / "out", 1) == de_kept
    report = manifest["hygiene"]
    assert report["cross_language"]["distinct_sentences"] == 3
    assert [e["line"] for e in report["cross_language"]["examples"]["de"]] == [4, 5, 6]
    assert report["languages"]["en"]["cross_language_duplicates_found"] == 3


def test_stimulus_items_are_excluded_from_training_only_by_default(tmp_path: Path) -> None:
    seed = 11
    spec = SplitSpec(0.5, 0.5, 0.0)
    candidates = kellhaven_lines("en", 40)
    splits = {text: assign_split(text, seed, spec) for text in candidates}
    items = [t for t in candidates if splits[t] == "train"][:2] + [t for t in candidates if splits[t] == "valid"][:2]
    (tmp_path / "items.tsv").write_text("item\tlang\tsentence\n" + "".join(
        f"{i}\ten\t  {text}  \n" for i, text in enumerate(items)), encoding="utf-8")   # spaces: normalised away
    recipe = write_corpus(tmp_path, candidates, kellhaven_lines("de", 10),
                          "[splits]\ntrain = 0.5\nvalid = 0.5\ntest = 0.0\n"
                          '[hygiene]\nexclude_items = ["items.tsv"]\n', seed=seed)
    manifest = build(recipe, tmp_path / "out").manifest
    kept = kept_lines(tmp_path / "out", 0)
    excluded = {candidates.index(t) + 1 for t in items[:2]}
    assert set(range(1, 41)) - set(kept) == excluded
    assert report_of(tmp_path / "out", 0)["stimulus_sentences_excluded"] == 2
    assert manifest["hygiene"]["exclude_items"]["files"][0]["items"] == 4


def test_stimulus_items_can_be_excluded_from_every_split(tmp_path: Path) -> None:
    (tmp_path / "items.csv").write_text("id,sentence\n1,\"A pier, at night .\"\n", encoding="utf-8")
    recipe = write_corpus(tmp_path, ["A pier, at night .", "A gull ."], ["Ein Steg ."],
                          '[hygiene]\nexclude_items = ["items.csv"]\nexclude_from = "all"\n')
    build(recipe, tmp_path / "out")
    assert kept_lines(tmp_path / "out", 0) == [2]


def test_an_item_file_without_the_sentence_column_is_an_error_naming_it(tmp_path: Path) -> None:
    (tmp_path / "items.tsv").write_text("id\ttext\n1\tx\n", encoding="utf-8")
    recipe = write_corpus(tmp_path, ["A pier ."], ["Ein Steg ."], '[hygiene]\nexclude_items = ["items.tsv"]\n')
    with pytest.raises(InputError, match=r"items.tsv:1: no column 'sentence'"):
        build(recipe, tmp_path / "out")


def test_unknown_hygiene_choice_is_a_recipe_error(tmp_path: Path) -> None:
    recipe = write_corpus(tmp_path, ["a"], ["b"], '[hygiene]\ncross_language = "merge"\n')
    with pytest.raises(RecipeError, match=r"\[hygiene\] cross_language: expected one of"):
        load_recipe(recipe)


def test_corpus_reader_skips_what_hygiene_dropped_like_the_build(tmp_path: Path) -> None:
    en = kellhaven_lines("en", 20) + kellhaven_lines("en", 5) + SHARED_LINES
    recipe = write_corpus(tmp_path, en, kellhaven_lines("de", 10) + SHARED_LINES,
                          '[hygiene]\nduplicates = "drop"\ncross_language = "drop-both"\n')
    build(recipe, tmp_path / "out")
    reread = [s.line for s in iter_sentences(load_recipe(recipe), lang="en")]
    assert reread == kept_lines(tmp_path / "out", 0) == list(range(1, 21))


def test_hygiene_results_do_not_depend_on_the_number_of_jobs(tmp_path: Path) -> None:
    en = kellhaven_lines("en", 50) * 2 + SHARED_LINES
    recipe = write_corpus(tmp_path, en, kellhaven_lines("de", 30) + SHARED_LINES,
                          '[hygiene]\nduplicates = "drop"\ncross_language = "keep-first"\n')
    one = build(recipe, tmp_path / "one", jobs=1).manifest
    two = build(recipe, tmp_path / "two", jobs=2).manifest
    assert one["files"] == two["files"] and one["hygiene"] == two["hygiene"]


def test_seen_hashes_store_eight_bytes_per_distinct_sentence() -> None:
    seen = SeenHashes()
    rng = np.random.default_rng(3)
    blocks = [rng.integers(0, 1 << 40, 5000).astype(np.uint64) for _ in range(40)]
    blocks += [rng.choice(b, 1000) for b in blocks[:10]]        # repeats add nothing
    for block in blocks:
        seen.first_occurrences(block)
    distinct = len(np.unique(np.concatenate(blocks)))
    assert all(level.dtype == np.uint64 for level in seen.levels) and len(seen.levels) < 10
    assert seen.nbytes == 8 * distinct == 8 * len(seen)


def test_seen_hashes_agree_with_a_python_set() -> None:
    rng = np.random.default_rng(4)
    seen, reference = SeenHashes(), set()
    for _ in range(30):
        block = rng.integers(0, 3000, 400).astype(np.uint64)
        mask = seen.first_occurrences(block)
        expected = []
        for value in block.tolist():
            expected.append(value not in reference)
            reference.add(value)
        assert mask.tolist() == expected


def test_sentence_hashes_are_keyed_by_the_seed() -> None:
    assert sentence_hashes(["a pier"], 1)[0] != sentence_hashes(["a pier"], 2)[0]
    assert sentence_hashes(["a pier"], 1)[0] == sentence_hashes(["a pier"], 1)[0]


# --- foreign sentences on real text -------------------------------------------------------

FORTUNES_EN = Path("/usr/share/games/fortunes")
FORTUNES_DE = Path("/usr/share/games/fortunes/de")


def fortune_records(directory: Path) -> list[str]:
    """Records of the fortune files of one directory (separated by a line "%"), each joined
    into one line; only records of 30-300 characters."""
    out = []
    for path in sorted(directory.iterdir()):
        if path.is_dir() or path.suffix or path.is_symlink():
            continue
        for record in path.read_text(encoding="utf-8", errors="replace").split("\n%\n"):
            text = " ".join(record.split())
            if 30 <= len(text) <= 300 and "%" not in text:
                out.append(text)
    return out


@pytest.mark.skipif(not (FORTUNES_EN / "literature").exists() or not (FORTUNES_DE / "sprichworte").exists(),
                    reason="real-text fixture needs the Debian packages fortunes and fortunes-de "
                           "(apt-get install fortunes fortunes-de)")
def test_foreign_sentences_planted_from_a_real_corpus_are_found_with_high_precision_and_recall(tmp_path: Path) -> None:
    # Real text: Debian `fortunes` (English) and `fortunes-de` (German), comparable corpora.
    # 60 German records are planted into 1500 English ones and 60 English into 1500 German.
    # A "false positive" may be a genuinely foreign record of the source corpus (both
    # collections quote the other language now and then), so the bar is 0.9, not 1.
    rng = random.Random(8)
    en = rng.sample(fortune_records(FORTUNES_EN), 1560)
    de = rng.sample(fortune_records(FORTUNES_DE), 1560)
    en_corpus, planted_in_en = en[:1500] + de[1500:], set(range(1501, 1561))
    de_corpus, planted_in_de = de[:1500] + en[1500:], set(range(1501, 1561))
    recipe = write_corpus(tmp_path, en_corpus, de_corpus, ALL_TRAIN + '[hygiene]\nforeign = "drop"\n')
    manifest = build(recipe, tmp_path / "out").manifest
    for index, corpus_len, planted in ((0, 1560, planted_in_en), (1, 1560, planted_in_de)):
        dropped = set(range(1, corpus_len + 1)) - set(kept_lines(tmp_path / "out", index))
        precision = len(dropped & planted) / len(dropped)
        recall = len(dropped & planted) / len(planted)
        assert precision >= 0.9 and recall >= 0.95, (index, precision, recall)
        assert report_of(tmp_path / "out", index)["foreign_sentences_dropped"] == len(dropped)
        examples = manifest["hygiene"]["foreign"]["examples"][("en", "de")[index]]
        corpus = (en_corpus, de_corpus)[index]
        assert len(examples) == 10
        assert all(e["line"] in dropped and e["text"] == normalise_text(corpus[e["line"] - 1], CleanSpec())
                   for e in examples)


def test_foreign_report_mode_keeps_the_sentences_and_lists_examples(tmp_path: Path) -> None:
    en = [f"The gull number {i} waits on the pier by the harbour wall tonight ." for i in range(40)]
    de = [f"Die Möwe Nummer {i} wartet heute Abend auf dem Steg an der Hafenmauer ." for i in range(40)]
    planted = "Die Fischer ziehen morgen früh die schweren Netze aus dem Wasser ."
    recipe = write_corpus(tmp_path, en + [planted], de, ALL_TRAIN + '[hygiene]\nforeign = "report"\n')
    manifest = build(recipe, tmp_path / "out").manifest
    assert kept_lines(tmp_path / "out", 0) == list(range(1, 42))
    assert manifest["hygiene"]["foreign"]["examples"]["en"] == [{"path": "en.txt", "line": 41, "text": planted}]
    assert report_of(tmp_path / "out", 0)["foreign_sentences_found"] == 1
