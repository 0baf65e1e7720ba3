"""Specification of `bivocab probe` under subword conditions: ids from the exported sentencepiece
models, the span of pieces of the critical word, unknown and byte-fallback pieces."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest
import sentencepiece as spm

from bivocab import build
from bivocab.clean import normalise_text
from bivocab.probe import probe
from bivocab.recipe import recipe_from_manifest
from bivocab.segment import segment
from conftest import copy_tree
from test_probe import read_jsonl, run_cli, write_items
from test_subword import JOINT, SEPARATE, condition_table, subword_recipe, sentences_by_position, shard_sentences, write_subword_corpus

# A word-level condition beside a joint unigram model, one unigram model per language, a joint
# BPE model and a joint unigram model without byte fallback: small sizes, so the build takes a few seconds.
RECIPE = subword_recipe("probe-subword", 5, condition_table("words", "shared"), JOINT, SEPARATE,
                        condition_table("joint-bpe", "shared", units="bpe", size=400),
                        condition_table("joint-no-bytes", "shared", units="unigram", size=150, byte_fallback=False,
                                  eos="none"))
SUBWORD = ("joint", "separate", "joint-bpe", "joint-no-bytes")

# Invented Kellhaven items; 漢 occurs nowhere in the corpus, so it has no piece.
ITEMS = [
    ["en-harbour", "en", "the harbour of Kellhaven opens at dawn .", "harbour"],
    ["en-new", "en", "A  ferry captain counts 12 crates (fresh) near the quay!", "captain"],
    ["de-hafen", "de", "der Hafen von Kellhaven öffnet bei Tagesanbruch .", "Kellhaven"],
    ["de-nfd", "de", "Die Fa\u0308hre legt am Kai an.", "Fähre"],
    ["de-unseen", "de", "Der Kapitän kauft 漢 am Markt .", "漢"],
    ["en-two", "en", "the ferry captain and the quay tide", "ferry captain"],
]


@pytest.fixture(scope="module")
def subword_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("probe-subword")
    write_subword_corpus(root, sentences=700)
    (root / "recipe.toml").write_text(RECIPE, encoding="utf-8")
    build(root / "recipe.toml", root / "build", jobs=1)
    return root / "build"


@pytest.fixture(scope="module")
def probed(subword_build: Path, tmp_path_factory: pytest.TempPathFactory):
    items = write_items(tmp_path_factory.mktemp("items") / "items.tsv", ITEMS)
    return probe(subword_build, items)


def manifest_of(out: Path) -> dict:
    return json.loads((out / "build.json").read_text(encoding="utf-8"))


def processor(out: Path, condition: str, lang: str) -> spm.SentencePieceProcessor:
    """Reference library: sentencepiece loading the build's exported model file."""
    model = manifest_of(out)["conditions"][condition]["models"][lang]
    return spm.SentencePieceProcessor(model_file=str(out / model))


def records(out: Path, condition: str) -> dict[str, dict]:
    return {r["id"]: r for r in read_jsonl(out / "probe" / f"{condition}.jsonl")}


def test_item_ids_equal_encoding_with_the_exported_sentencepiece_model(subword_build: Path, probed) -> None:
    recipe = recipe_from_manifest(manifest_of(subword_build), subword_build)
    raw = {row[0]: row for row in ITEMS}
    for condition in SUBWORD:
        for item_id, record in records(subword_build, condition).items():
            sp = processor(subword_build, condition, record["lang"])
            text = normalise_text(raw[item_id][2], recipe.clean)
            eos = [] if condition == "joint-no-bytes" else [sp.eos_id()]
            assert record["ids"] == sp.encode(text) + eos, (condition, item_id)
            assert record["tokens"][:len(record["ids"]) - len(eos)] == sp.encode(text, out_type=str)


def test_item_ids_equal_what_the_shards_hold_for_a_corpus_sentence(subword_build: Path, tmp_path: Path) -> None:
    # A copy (with its corpus) keeps the module's probe outputs in place.
    subword_build = copy_tree(subword_build.parent, tmp_path / "root") / "build"
    by_position = sentences_by_position(subword_build, "train") | sentences_by_position(subword_build, "test")
    # The first sentences of the train and the test shards (every condition holds the same ones).
    held = {}
    for split in ("train", "test"):
        for k, (row, _) in enumerate(shard_sentences(subword_build, "joint", split)):
            if k == 4:
                break
            held[f"{split}-{k}"] = by_position[(int(row["input"]), int(row["line"]))]
    rows = []
    for key, sentence in held.items():
        tokens = segment(sentence.text)
        rows.append([key, sentence.lang, sentence.text, next(t for t in tokens if tokens.count(t) == 1)])
    probe(subword_build, write_items(tmp_path / "items.tsv", rows))
    for condition in SUBWORD:
        shard_ids = {}
        for split in ("train", "test"):
            for k, (_, ids) in enumerate(shard_sentences(subword_build, condition, split)):
                if k == 4:
                    break
                shard_ids[f"{split}-{k}"] = ids
        got = records(subword_build, condition)
        assert {key: got[key]["ids"] for key in held} == shard_ids, condition


def test_the_critical_span_decodes_to_the_critical_word(subword_build: Path, probed) -> None:
    recipe = recipe_from_manifest(manifest_of(subword_build), subword_build)
    for condition in SUBWORD:
        for item_id, record in records(subword_build, condition).items():
            start, end = record["critical_span"]
            assert record["critical_positions"] == list(range(start, end))
            assert record["critical_aligned"] is True, (condition, item_id)
            sp = processor(subword_build, condition, record["lang"])
            decoded = sp.decode(record["ids"][start:end])
            if condition == "joint-no-bytes" and item_id == "de-unseen":
                assert decoded == " ⁇ "   # sentencepiece's rendering of the unknown piece
            else:
                assert decoded == normalise_text(record["critical_word"], recipe.clean), (condition, item_id)


def test_a_multi_token_critical_word_spans_the_pieces_of_all_its_tokens(subword_build: Path, probed) -> None:
    record = records(subword_build, "separate")["en-two"]
    start, end = record["critical_span"]
    sp = processor(subword_build, "separate", "en")
    assert sp.decode(record["ids"][start:end]) == "ferry captain"
    assert "".join(record["tokens"][start:end]).replace("\u2581", " ").strip() == "ferry captain"


def test_a_character_without_a_piece_is_byte_fallback_not_unknown(subword_build: Path, probed) -> None:
    record = records(subword_build, "joint")["de-unseen"]
    start, end = record["critical_span"]
    # 漢 is three UTF-8 bytes (U+6F22 = E6 BC A2): three byte pieces, common practice of byte fallback.
    assert record["tokens"][start:end] == ["<0xE6>", "<0xBC>", "<0xA2>"]
    assert record["byte_fallback"][start:end] == [True, True, True]
    assert not any(record["oov"])


def test_without_byte_fallback_the_unseen_character_is_the_unknown_piece(subword_build: Path, probed) -> None:
    record = records(subword_build, "joint-no-bytes")["de-unseen"]
    start, end = record["critical_span"]
    assert [record["oov"][p] for p in range(start, end)] == [True]
    assert record["vocab_tokens"][start] == "<unk>"
    assert "de-unseen" in probed.failing_items


def test_word_level_records_keep_the_word_level_keys(subword_build: Path, probed) -> None:
    record = records(subword_build, "words")["en-harbour"]
    assert list(record) == ["id", "lang", "condition", "sentence", "tokens", "vocab_tokens", "ids", "oov",
                            "critical_word", "critical_positions", "columns"]
    assert record["tokens"][:-1] == "the harbour of Kellhaven opens at dawn .".split()


def test_subword_tsv_view_has_span_and_byte_columns(subword_build: Path, probed) -> None:
    table = pd.read_csv(subword_build / "probe" / "joint.tsv", sep="\t", keep_default_na=False, dtype=str)
    assert list(table.columns[-3:]) == ["critical_span", "critical_aligned", "byte_fallback"]
    row = table.set_index("id").loc["de-unseen"]
    jsonl = records(subword_build, "joint")["de-unseen"]
    assert row["ids"] == " ".join(map(str, jsonl["ids"]))
    assert row["critical_span"] == " ".join(map(str, jsonl["critical_span"]))
    assert row["byte_fallback"].split() == ["1" if f else "0" for f in jsonl["byte_fallback"]]


def test_summary_lists_the_critical_pieces_and_strict_fails_on_an_unknown_piece(subword_build: Path,
                                                                                tmp_path: Path) -> None:
    items = write_items(tmp_path / "items.tsv", ITEMS)
    result = run_cli("probe", subword_build, items, "--json", "--strict")
    assert result.exit_code == 1
    summary = json.loads(result.stdout)
    pieces = {row["id"]: row["conditions"] for row in summary["critical_pieces"]}
    assert set(pieces["de-unseen"]) == set(SUBWORD)
    assert pieces["de-unseen"]["joint"]["byte_fallback"] == 3
    assert pieces["de-unseen"]["joint-no-bytes"]["oov"] == 1
    assert "joint-no-bytes" in {c for row in summary["oov"] if row["id"] == "de-unseen" for c in row["critical_oov"]}
    text = run_cli("probe", subword_build, items).output
    assert "Critical words under subword conditions" in text and "<0xE6> <0xBC> <0xA2> b" in text
