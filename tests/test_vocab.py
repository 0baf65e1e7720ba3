"""Vocabulary choice: cap, min_count, tie rule, unknown and end-of-sentence tokens, overrides."""

from __future__ import annotations

from collections import Counter

import numpy as np
import pandas as pd
import pytest

import bivocab
from bivocab.errors import BivocabError
from bivocab.recipe import POLICIES, ConditionSpec, VocabSpec
from bivocab.vocab import build_vocabulary

from conftest import write_recipe


def condition(policy="shared", **vocab) -> ConditionSpec:
    return ConditionSpec(name="c", policy=policy, classes=dict(POLICIES[policy]), vocab=VocabSpec(**vocab))


def tables(counts_a: dict[str, int], counts_b: dict[str, int]):
    surfaces = [list(counts_a), list(counts_b)]
    counts = [np.array(list(counts_a.values()), dtype=np.int64), np.array(list(counts_b.values()), dtype=np.int64)]
    return surfaces, counts


def test_ties_are_broken_by_count_then_code_points_then_language():
    surfaces, counts = tables({"b": 2, "a": 2, "Z": 2, "é": 5}, {"b": 2, "y": 1})
    vocab = build_vocabulary(condition("fully-tagged"), ("en", "de"), surfaces, counts)
    order = [(e.lang, e.surface) for e in vocab.entries if e.cls != "special"]
    assert order == [("en", "é"), ("en", "Z"), ("en", "a"), ("en", "b"), ("de", "b"), ("de", "y")]


def test_shared_entries_sum_the_counts_of_both_languages():
    surfaces, counts = tables({"hand": 3, "kind": 1}, {"hand": 4, "Kind": 9})
    vocab = build_vocabulary(condition("shared"), ("en", "de"), surfaces, counts)
    hand = next(e for e in vocab.entries if e.surface == "hand")
    assert hand.lang == "*" and hand.counts == (3, 4) and hand.count == 7
    assert vocab.entries[vocab.special_count].surface == "Kind"  # 9 beats 7


def test_cap_counts_specials_and_keeps_the_most_frequent():
    surfaces, counts = tables({"a": 5, "b": 4, "c": 3}, {"d": 2, "e": 1})
    vocab = build_vocabulary(condition("shared", max_size=5), ("en", "de"), surfaces, counts)
    assert len(vocab) == 5 and [e.surface for e in vocab.entries[3:]] == ["a", "b"]
    assert vocab.luts[1].tolist() == [vocab.unk_ids[1]] * 2  # d and e fell under the cap


def test_min_count_drops_rare_types_to_unknown():
    surfaces, counts = tables({"a": 1, "b": 2}, {"a": 1, "c": 3})
    shared = build_vocabulary(condition("shared", min_count=2), ("en", "de"), surfaces, counts)
    assert {e.surface for e in shared.entries if e.cls != "special"} == {"a", "b", "c"}  # a: 1 + 1
    tagged = build_vocabulary(condition("fully-tagged", min_count=2), ("en", "de"), surfaces, counts)
    assert {(e.lang, e.surface) for e in tagged.entries if e.cls != "special"} == {("en", "b"), ("de", "c")}


def test_per_language_unknown_and_end_tokens():
    surfaces, counts = tables({"a": 1}, {"b": 1})
    vocab = build_vocabulary(condition("fully-tagged", unknown="per-language", eos="per-language"),
                             ("en", "de"), surfaces, counts)
    assert [e.token for e in vocab.entries[:5]] == ["<pad>", "<unk:en>", "<unk:de>", "<eos:en>", "<eos:de>"]
    assert vocab.unk_ids == (1, 2) and vocab.eos_ids == (3, 4)


def test_no_end_token_and_no_pad():
    surfaces, counts = tables({"a": 1}, {"b": 1})
    vocab = build_vocabulary(condition("shared", eos="none", pad=False), ("en", "de"), surfaces, counts)
    assert [e.token for e in vocab.entries] == ["<unk>", "a", "b"] and vocab.eos_ids is None


def test_share_and_separate_lists_override_the_policy():
    surfaces, counts = tables({"hand": 1, "also": 1, ",": 1}, {"hand": 1, "also": 1, ",": 1})
    cond = ConditionSpec(name="c", policy="word-tagged", classes=dict(POLICIES["word-tagged"]),
                         share=("hand",), separate=(",",), vocab=VocabSpec())
    vocab = build_vocabulary(cond, ("en", "de"), surfaces, counts)
    keys = {(e.lang, e.surface) for e in vocab.entries if e.cls != "special"}
    assert keys == {("*", "hand"), ("en", "also"), ("de", "also"), ("en", ","), ("de", ",")}


def test_colliding_exported_strings_are_a_build_error():
    # "Kind@de" cannot come out of our segmentation, but a collision must never pass silently.
    surfaces, counts = tables({"Kind@de": 1}, {"Kind": 1})
    cond = ConditionSpec(name="c", policy="shared", classes=dict(POLICIES["shared"]), separate=("Kind",),
                         vocab=VocabSpec())
    with pytest.raises(BivocabError, match="collides"):
        build_vocabulary(cond, ("en", "de"), surfaces, counts)


def test_capped_build_matches_an_independent_count(tiny):
    # Independent computation: collections.Counter over the training sentences, sorted by the
    # documented tie rule, cut at max_size minus the three specials.
    write_recipe(tiny, extra="[vocab]\nmax_size = 20\nmin_count = 3\n")
    out = tiny / "out"
    bivocab.build(tiny / "recipe.toml", out)
    from bivocab.corpus import iter_sentences
    recipe = bivocab.load_recipe(tiny / "recipe.toml")
    counts = Counter(t for s in iter_sentences(recipe, splits=("train",)) for t in bivocab.segment(s.text))
    ranked = sorted(((c, s) for s, c in counts.items() if c >= 3), key=lambda cs: (-cs[0], cs[1]))[:17]
    vocab = pd.read_csv(out / "shared" / "vocab.tsv", sep="\t", keep_default_na=False)
    assert vocab["surface"].tolist()[3:] == [s for _, s in ranked]
    assert vocab["count"].tolist()[3:] == [c for c, _ in ranked]
    assert len(vocab) == 20


@pytest.mark.parametrize("policy, specials", [
    ("shared", {}), ("shared", {"unknown": "per-language"}), ("shared", {"eos": "per-language"}),
    ("word-tagged", {}), ("fully-tagged", {})])
def test_one_tokenizer_file_serves_every_language_only_when_their_files_are_identical(policy, specials) -> None:
    # The build makes a tokenizer file once and writes it for every language when
    # same_tokenizer_for_every_language holds: it must hold exactly when the files are equal.
    from bivocab.recipe import CleanSpec
    from bivocab.vocab import same_tokenizer_for_every_language, tokenizer_json

    surfaces, counts = tables({"hand": 3, "kind": 1, ".": 4}, {"hand": 4, "Kind": 9, ".": 2})
    vocab = build_vocabulary(condition(policy, **specials), ("en", "de"), surfaces, counts)
    files = [tokenizer_json(vocab, li, CleanSpec()) for li in range(2)]
    assert same_tokenizer_for_every_language(vocab) == (files[0] == files[1])
    assert same_tokenizer_for_every_language(vocab) == (policy == "shared" and not specials)
