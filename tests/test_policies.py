"""Policy identities (DESIGN.md section 2): with no cap and min_count 1,
shared = |A ∪ B|, fully-tagged = |A| + |B|, word-tagged = |A_words| + |B_words| + |A_other ∪ B_other|,
each plus the special tokens; A, B = distinct training tokens per language, counted independently here."""

from __future__ import annotations

from collections import Counter

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bivocab.recipe import POLICIES, ConditionSpec, VocabSpec
from bivocab.segment import segment, token_class
from bivocab.vocab import build_vocabulary
from bivocab.corpus import iter_sentences
from bivocab.recipe import load_recipe

from conftest import SAMPLE_RECIPE


def expected_sizes(a: set[str], b: set[str], specials: int) -> dict[str, int]:
    words = lambda s: {t for t in s if token_class(t) in ("word", "number")}
    other = lambda s: s - words(s)
    return {
        "shared": len(a | b) + specials,
        "fully-tagged": len(a) + len(b) + specials,
        "word-tagged": len(words(a)) + len(words(b)) + len(other(a) | other(b)) + specials,
    }


def test_sample_corpus_policy_sizes_match_the_set_identities(sample_build):
    recipe = load_recipe(SAMPLE_RECIPE)
    types = {tag: set() for tag in recipe.tags}
    for sentence in iter_sentences(recipe, splits=("train",)):
        types[sentence.lang].update(segment(sentence.text))
    a, b = (types[t] for t in recipe.tags)
    expected = expected_sizes(a, b, specials=3)  # <pad> <unk> <eos>
    for name, policy in (("shared", "shared"), ("word-tagged", "word-tagged"), ("fully-tagged", "fully-tagged")):
        vocab = pd.read_csv(sample_build / name / "vocab.tsv", sep="\t", keep_default_na=False)
        assert len(vocab) == expected[policy], name
    assert len(a & b) > 0, "the sample corpus must contain cross-language homographs"


def _vocab_from_sentences(policy: str, sents_a: list[str], sents_b: list[str]):
    tables, counts = [], []
    for sents in (sents_a, sents_b):
        c = Counter(t for s in sents for t in segment(s))
        surfaces = sorted(c)
        tables.append(surfaces)
        counts.append(np.array([c[s] for s in surfaces], dtype=np.int64))
    cond = ConditionSpec(name=policy, policy=policy, classes=dict(POLICIES[policy]), vocab=VocabSpec())
    return build_vocabulary(cond, ("en", "de"), tables, counts), tables


_alphabet = st.sampled_from(list("abcäöüß") + list(",.!?()–€%") + list("0123") + [" "])
_sentences = st.lists(st.text(_alphabet, min_size=1, max_size=30).filter(lambda s: s.strip()), min_size=1, max_size=12)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_sentences, _sentences)
def test_generated_corpora_satisfy_the_policy_identities(sents_a, sents_b):
    a = {t for s in sents_a for t in segment(s)}
    b = {t for s in sents_b for t in segment(s)}
    expected = expected_sizes(a, b, specials=3)
    for policy in POLICIES:
        vocab, _ = _vocab_from_sentences(policy, sents_a, sents_b)
        assert len(vocab) == expected[policy], policy


@settings(max_examples=40, deadline=None)
@given(_sentences, _sentences)
def test_every_training_type_has_its_own_entry_and_ids_are_dense(sents_a, sents_b):
    for policy in POLICIES:
        vocab, tables = _vocab_from_sentences(policy, sents_a, sents_b)
        assert [e.id for e in vocab.entries] == list(range(len(vocab)))
        for li, surfaces in enumerate(tables):
            ids = vocab.luts[li]
            assert not np.isin(ids, vocab.unk_ids).any()  # min_count 1, no cap: no unknowns in train
            decoded = [vocab.entries[i].surface for i in ids.tolist()]
            assert decoded == surfaces
