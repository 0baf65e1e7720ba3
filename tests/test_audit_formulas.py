"""The audit's formulas against published worked examples, a reference library, and text
generated from known parameters."""

from __future__ import annotations

import random

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bivocab.audit import fit_heaps, fit_zipf, growth_curve, heaps_vocabulary, policy_sizes, uncapped_size
from bivocab.probe import frequency_per_million, zipf_value
from bivocab.recipe import POLICIES, ConditionSpec, VocabSpec
from bivocab.segment import token_class


def test_heaps_law_reproduces_the_rcv1_worked_example():
    # Manning, Raghavan & Schuetze, Introduction to Information Retrieval (2008), section 5.1.1:
    # Reuters-RCV1 with K = 44 and b = 0.49 predicts 38,323 terms for the first 1,000,020 tokens.
    assert round(heaps_vocabulary(44, 0.49, 1_000_020)) == 38_323


def _heaps_text(k: float, beta: float, tokens: int, seed: int) -> list[str]:
    """Token stream whose vocabulary follows V(N) = K * N^beta: a new type appears with
    probability clip(K * N^beta - V, 0, 1); otherwise an earlier type is repeated."""
    rng = random.Random(seed)
    stream, types = [], 0
    for n in range(1, tokens + 1):
        if rng.random() < min(1.0, max(0.0, k * n ** beta - types)):
            types += 1
            stream.append(f"t{types}")
        else:
            stream.append(stream[int(rng.random() ** 2 * len(stream))])
    return stream


@pytest.mark.parametrize("k, beta", [(44, 0.49), (12, 0.62)])
def test_heaps_fit_recovers_known_parameters(k, beta):
    tokens = 300_000
    curve = growth_curve(_heaps_text(k, beta, tokens, seed=5), tokens)
    fit = fit_heaps(curve, tokens)
    # Tolerance stated here: beta within 0.01, K within 5 %.
    assert fit.exponent == pytest.approx(beta, abs=0.01)
    assert fit.coefficient == pytest.approx(k, rel=0.05)
    assert fit.r_squared > 0.999


def test_heaps_fit_needs_three_points():
    assert fit_heaps([(1, 1), (2, 2)], 2) is None


def test_zipf_value_of_one_per_million_is_three():
    # van Heuven, Mandera, Keuleers & Brysbaert (2014): Zipf = log10(per million words) + 3.
    assert zipf_value(frequency_per_million(1, 1_000_000)) == 3.0
    assert zipf_value(frequency_per_million(1000, 1_000_000)) == 6.0


@pytest.mark.parametrize("word, lang", [("the", "en"), ("harbor", "en"), ("hafen", "de"), ("bald", "de")])
def test_zipf_value_agrees_with_wordfreq(word, lang):
    wordfreq = pytest.importorskip("wordfreq")
    # wordfreq 3.1.1 (pinned in the test extra) reports Zipf values rounded to 2 decimals.
    per_million = wordfreq.word_frequency(word, lang) * 1_000_000
    assert zipf_value(per_million) == pytest.approx(
        wordfreq.zipf_frequency(word, lang), abs=0.006)


@pytest.mark.parametrize("s", [0.9, 1.0, 1.2])
def test_zipf_fit_recovers_a_known_exponent(s):
    ranks = np.arange(1, 20_001)
    counts = np.round(1e6 * ranks ** -s).astype(int)
    fit = fit_zipf(counts[counts > 0])
    assert -fit.exponent == pytest.approx(s, abs=0.02)


def test_growth_curve_ends_at_the_total():
    curve = growth_curve(list("abcabcabcd"), 10)
    assert curve[0] == (1, 1) and curve[-1] == (10, 4)
    assert [n for n, _ in curve] == sorted({n for n, _ in curve})


SURFACES = st.sampled_from(["Kai", "kai", "Boot", "boat", "7", "12", "1,50", ".", ",", "!", "€", "+", "§",
                            "also", "bald", "Hafen", "harbour", "3.20"])


@settings(max_examples=200, deadline=None)
@given(st.sets(SURFACES), st.sets(SURFACES), st.booleans(), st.sampled_from(["shared", "per-language"]),
       st.sampled_from(["shared", "per-language", "none"]))
def test_policy_sizes_obey_the_identities_for_any_type_sets(a, b, pad, unknown, eos):
    vocab = VocabSpec(pad=pad, unknown=unknown, eos=eos)
    sizes = policy_sizes(("en", "de"), [a, b], vocab)
    specials = int(pad) + (1 if unknown == "shared" else 2) + {"shared": 1, "per-language": 2, "none": 0}[eos]
    tagged = {c for c, choice in POLICIES["word-tagged"].items() if choice == "tagged"}
    a_w = {t for t in a if token_class(t) in tagged}
    b_w = {t for t in b if token_class(t) in tagged}
    assert sizes["shared"] == len(a | b) + specials
    assert sizes["fully-tagged"] == len(a) + len(b) + specials
    assert sizes["word-tagged"] == len(a_w) + len(b_w) + len((a - a_w) | (b - b_w)) + specials
    assert sizes["saved_by_sharing"] == len(a & b)


def test_uncapped_size_follows_forced_share_and_separate_lists():
    classes = dict(POLICIES["fully-tagged"])
    condition = ConditionSpec(name="c", policy="fully-tagged", classes=classes, share=("Kai",))
    assert uncapped_size(condition, ("en", "de"), [{"Kai", "Boot"}, {"Kai", "Boot"}]) == 3 + 3
    condition = ConditionSpec(name="c", policy="shared", classes=dict(POLICIES["shared"]), separate=("Kai",))
    assert uncapped_size(condition, ("en", "de"), [{"Kai", "Boot"}, {"Kai", "Boot"}]) == 3 + 3
