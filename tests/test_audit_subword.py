"""The audit of a build with subword conditions: subword statistics in summary.json, the terminal
summary and report.html; coverage counted on unknown pieces; homograph status from the models."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import sentencepiece as spm

from bivocab import build
from bivocab.audit import audit_text, run_audit
from bivocab.corpus import iter_sentences
from bivocab.recipe import SPLITS, recipe_from_manifest
from bivocab.subword import subword_statistics
from test_audit_report import PLOTS, PageParts
from test_subword import JOINT, JOINT_NO_BYTES, SEPARATE, condition_table, subword_recipe, write_subword_corpus

TAGS = ("en", "de")
RECIPE = subword_recipe("audit-subword", 5, condition_table("words", "word-tagged"), JOINT, SEPARATE, JOINT_NO_BYTES)
SUBWORD = ("joint", "separate", "joint-no-bytes")


@pytest.fixture(scope="module")
def audited(tmp_path_factory: pytest.TempPathFactory):
    root = tmp_path_factory.mktemp("audit-subword")
    write_subword_corpus(root, sentences=700)
    (root / "recipe.toml").write_text(RECIPE, encoding="utf-8")
    out = root / "build"
    build(root / "recipe.toml", out, jobs=1)
    return out, run_audit(out)


def summary_of(out: Path) -> dict:
    return json.loads((out / "audit" / "summary.json").read_text(encoding="utf-8"))


def processors(out: Path, condition: str) -> list[spm.SentencePieceProcessor]:
    """Reference library: sentencepiece loading the build's exported models."""
    manifest = json.loads((out / "build.json").read_text(encoding="utf-8"))
    return [spm.SentencePieceProcessor(model_file=str(out / manifest["conditions"][condition]["models"][t]))
            for t in TAGS]


def test_summary_holds_the_subword_statistics_exactly(audited) -> None:
    out, _ = audited
    direct = json.loads(json.dumps(subword_statistics(out)))
    assert summary_of(out)["subword"] == direct
    assert set(direct["conditions"]) == set(SUBWORD)
    for condition in SUBWORD:
        entry = direct["conditions"][condition]
        for key in ("parity_ratio", "pieces_used_by_both", "share_of_tokens_on_pieces_used_by_both", "size_identity"):
            assert key in entry
        for tag in TAGS:
            assert entry["languages"][tag]["fertility"] > 1
            assert 0 < entry["languages"][tag]["continued_word_proportion"] < 1
        assert entry["size_identity"]["holds"] is True


def test_subword_coverage_counts_unknown_pieces_as_sentencepiece_encodes_them(audited) -> None:
    out, _ = audited
    manifest = json.loads((out / "build.json").read_text(encoding="utf-8"))
    recipe = recipe_from_manifest(manifest, out)
    summary = summary_of(out)
    for condition in SUBWORD:
        sp = processors(out, condition)
        pieces = {(t, s): 0 for t in TAGS for s in SPLITS}
        unknown = dict.fromkeys(pieces, 0)
        for sentence in iter_sentences(recipe, SPLITS):
            own = sp[TAGS.index(sentence.lang)]
            ids = own.encode(sentence.text)
            pieces[(sentence.lang, sentence.split)] += len(ids)
            unknown[(sentence.lang, sentence.split)] += sum(own.is_unknown(i) for i in ids)
        coverage = summary["conditions"][condition]["coverage"]
        for (tag, split), n in pieces.items():
            assert coverage[tag][split]["tokens"] == n, (condition, tag, split)
            assert coverage[tag][split]["oov_tokens"] == unknown[(tag, split)], (condition, tag, split)
        if condition != "joint-no-bytes":
            assert sum(unknown.values()) == 0   # byte fallback: every character has pieces


def test_without_byte_fallback_the_held_out_unknown_characters_are_named(audited) -> None:
    out, _ = audited
    coverage = summary_of(out)["conditions"]["joint-no-bytes"]["coverage"]
    named = {o["surface"] for t in TAGS for s in ("valid", "test") for o in coverage[t][s]["top_oov"]}
    # The corpus plants characters U+0100.. that occur once each; those outside train have no piece.
    assert named and all(len(s) == 1 and 0x0100 <= ord(s) < 0x0100 + 24 for s in named)
    assert sum(coverage[t][s]["oov_types"] for t in TAGS for s in ("valid", "test")) == len(named)


def test_subword_conditions_have_no_word_level_size_or_cap(audited) -> None:
    out, _ = audited
    conditions = summary_of(out)["conditions"]
    for condition in SUBWORD:
        assert conditions[condition]["units"] == "unigram"
        assert conditions[condition]["uncapped_size"] is None and conditions[condition]["max_size"] is None
    assert conditions["words"]["units"] == "word" and conditions["words"]["uncapped_size"] > 0


def test_homograph_status_follows_the_piece_ids(audited) -> None:
    out, result = audited
    column = {c: i for i, c in enumerate(result.conditions)}
    sp = processors(out, "separate")
    assert result.homographs
    for row in result.homographs:
        # One joint model: the same spelling is the same pieces in both languages.
        assert row.in_vocab[column["joint"]] == "shared"
        # Fully tagged: no id is used by both languages, so a homograph is two sets of pieces.
        assert row.in_vocab[column["separate"]] == "separate"
        assert set(sp[0].encode(row.surface_a)).isdisjoint(sp[1].encode(row.surface_b))


def test_terminal_summary_shows_the_subword_table(audited) -> None:
    _, result = audited
    text = audit_text(result)
    assert "subword conditions (test split" in text
    rows = [line.split() for line in text.splitlines() if line.split()[:1] == ["separate"]]
    stats = result.summary["subword"]["conditions"]["separate"]
    assert any(f"{stats['languages']['en']['fertility']:.3f}" in row for row in rows)


def test_report_has_the_subword_tables_and_every_plot_embedded(audited) -> None:
    out, _ = audited
    parser = PageParts()
    parser.feed((out / "audit" / "report.html").read_text(encoding="utf-8"))
    assert set(parser.figures) == set(PLOTS)
    assert all(f["src"].startswith("data:image/png;base64,") for f in parser.figures.values())
    captions = " | ".join(parser.captions)
    assert "Subword conditions: fertility, continued words, parity, shared pieces" in captions
    assert "Subword size identities" in captions
