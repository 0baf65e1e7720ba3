"""Language order, balancing and exponent-smoothed sampling; splits stable as a corpus grows."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from bivocab.build import build
from bivocab.errors import RecipeError
from bivocab.mix import mix_split, sampling_targets, smoothed_probabilities
from bivocab.recipe import MixSpec, load_recipe
from bivocab.shards import PROVENANCE_DTYPE
from recipe_factory import kellhaven_lines, write_corpus


def test_smoothed_probabilities_follow_the_published_formula() -> None:
    # Lample & Conneau (2019), NeurIPS, section 3.1: q_i = p_i^a / sum_j p_j^a, a = 0.5.
    # Worked example by hand: p = (0.9, 0.1) -> sqrt(0.9)/sqrt(0.1) = 3, so q = (0.75, 0.25).
    assert smoothed_probabilities([900, 100], 0.5) == pytest.approx([0.75, 0.25], abs=1e-12)
    # Conneau et al. (2020), ACL: a = 0.3; independent computation with math.pow.
    a, b = math.pow(0.9, 0.3), math.pow(0.1, 0.3)
    assert smoothed_probabilities([900, 100], 0.3) == pytest.approx([a / (a + b), b / (a + b)], abs=1e-12)
    assert smoothed_probabilities([900, 100], 1.0) == pytest.approx([0.9, 0.1])
    assert smoothed_probabilities([900, 100], 0.0) == pytest.approx([0.5, 0.5])


def test_sampling_targets_down_and_up_for_the_worked_example() -> None:
    # q = (0.75, 0.25): downsampling keeps the 100 and cuts the 900 to 300 (300:100 = 3:1);
    # upsampling keeps the 900 and repeats the 100 to 300.
    assert sampling_targets([900, 100], 0.5, "down") == pytest.approx([300, 100])
    assert sampling_targets([900, 100], 0.5, "up") == pytest.approx([900, 300])


def _rows(n: int) -> np.ndarray:
    return np.arange(n, dtype=np.int64)


def test_balance_by_sentences_with_smoothing_picks_the_worked_example_counts() -> None:
    spec = MixSpec(balance="sentences", alpha=0.5, resample="down")
    order = mix_split(0, [_rows(900), _rows(100)], spec, 5, [np.ones(900, np.int64), np.ones(100, np.int64)])
    assert np.bincount(order.langs).tolist() == [300, 100]
    chosen = order.rows[order.langs == 0]
    assert len(set(chosen.tolist())) == 300          # a subset, no sentence twice
    assert order.sampling["sentences"] == [300, 100]


def test_upsampling_repeats_the_smaller_language_whole_then_a_seeded_remainder() -> None:
    spec = MixSpec(balance="sentences", alpha=0.5, resample="up")
    order = mix_split(0, [_rows(900), _rows(100)], spec, 5, [np.ones(900, np.int64), np.ones(100, np.int64)])
    assert np.bincount(order.langs).tolist() == [900, 300]
    counts = np.bincount(order.rows[order.langs == 1], minlength=100)
    assert counts.min() == 3 and counts.max() == 3   # exactly three copies of each


def test_balance_by_tokens_downsamples_the_larger_language_to_the_smaller_token_count() -> None:
    rng = np.random.default_rng(0)
    len_en, len_de = rng.integers(1, 30, 500), rng.integers(1, 30, 80)
    spec = MixSpec(balance="tokens", alpha=0.0)
    order = mix_split(0, [_rows(500), _rows(80)], spec, 9, [len_en, len_de])
    tokens_en = int(len_en[order.rows[order.langs == 0]].sum())
    assert tokens_en <= int(len_de.sum()) < tokens_en + 30   # within one sentence of equal
    assert np.sort(order.rows[order.langs == 1]).tolist() == list(range(80))


def test_balancing_is_seeded_and_the_seed_matters() -> None:
    spec = MixSpec(balance="sentences")
    lengths = [np.ones(50, np.int64), np.ones(10, np.int64)]
    one = mix_split(0, [_rows(50), _rows(10)], spec, 1, lengths)
    again = mix_split(0, [_rows(50), _rows(10)], spec, 1, lengths)
    other = mix_split(0, [_rows(50), _rows(10)], spec, 2, lengths)
    assert one.rows.tolist() == again.rows.tolist()
    assert set(one.rows[one.langs == 0].tolist()) != set(other.rows[other.langs == 0].tolist())


def test_balancing_applies_only_to_the_listed_splits() -> None:
    spec = MixSpec(balance="sentences")          # balance_splits defaults to train only
    lengths = [np.ones(50, np.int64), np.ones(10, np.int64)]
    test_split = mix_split(2, [_rows(50), _rows(10)], spec, 1, lengths)
    assert np.bincount(test_split.langs).tolist() == [50, 10] and test_split.sampling is None


def test_alternating_order_takes_one_sentence_of_each_language_in_turn() -> None:
    order = mix_split(0, [_rows(4), _rows(2) + 100], MixSpec(order="alternating", within_language="input"), 3,
                      [np.ones(4, np.int64), np.ones(102, np.int64)])
    assert order.langs.tolist() == [0, 1, 0, 1, 0, 0]
    assert order.rows.tolist() == [0, 100, 1, 101, 2, 3]


def test_blocked_order_puts_all_of_the_first_language_first() -> None:
    order = mix_split(0, [_rows(5), _rows(3)], MixSpec(order="blocked"), 3,
                      [np.ones(5, np.int64), np.ones(3, np.int64)])
    assert order.langs.tolist() == [0] * 5 + [1] * 3
    assert sorted(order.rows[:5].tolist()) == list(range(5))   # shuffled within the language


def test_bad_mix_values_are_recipe_errors_with_the_key(tmp_path: Path) -> None:
    recipe = write_corpus(tmp_path, ["a b"], ["c d"], "[mix]\nalpha = 1.5\n")
    with pytest.raises(RecipeError, match=r"\[mix\] alpha: must be between 0 and 1"):
        load_recipe(recipe)


def _langs_by_condition(out: Path, manifest: dict) -> dict[str, list[int]]:
    result = {}
    for name, cond in manifest["conditions"].items():
        result[name] = np.concatenate([np.load(out / f"{stem}.langs.npy") for stem in cond["shards"]["train"]]).tolist()
    return result


@pytest.mark.parametrize("order", ["shuffled", "alternating", "blocked"])
def test_order_is_identical_in_every_condition(tmp_path: Path, order: str) -> None:
    recipe = write_corpus(tmp_path, kellhaven_lines("en", 60), kellhaven_lines("de", 30),
                          f'[mix]\norder = "{order}"\nbalance = "sentences"\n')
    result = build(recipe, tmp_path / "out")
    per_condition = _langs_by_condition(tmp_path / "out", result.manifest)
    assert len(set(map(tuple, per_condition.values()))) == 1
    train = result.manifest["mixing"]["train"]
    assert train["sentences"][0] == train["sentences"][1] == min(train["available"])


def _split_of_lines(out: Path) -> dict[tuple[int, int], str]:
    manifest = json.loads((out / "build.json").read_text())
    found = {}
    for split, stems in manifest["conditions"]["shared"]["shards"].items():
        for stem in stems:
            prov = np.load(out / "provenance" / f"{stem.split('/', 1)[1]}.npy")
            assert prov.dtype == PROVENANCE_DTYPE
            for row in prov:
                found[(int(row["input"]), int(row["line"]))] = split
    return found


def test_appending_sentences_never_moves_an_old_sentence_to_another_split(tmp_path: Path) -> None:
    recipe = write_corpus(tmp_path, kellhaven_lines("en", 300), kellhaven_lines("de", 300))
    build(recipe, tmp_path / "before")
    before = _split_of_lines(tmp_path / "before")
    write_corpus(tmp_path, kellhaven_lines("en", 600), kellhaven_lines("de", 450))   # old lines first
    build(recipe, tmp_path / "after")
    after = _split_of_lines(tmp_path / "after")
    assert len(before) == 600 and len(after) == 1050
    assert all(after[key] == split for key, split in before.items())
    assert {"train", "valid", "test"} <= set(before.values())   # the test can fail: all splits used


def test_the_clean_balanced_example_recipe_builds_on_the_sample_corpus(tmp_path: Path) -> None:
    recipe = Path(__file__).resolve().parent.parent / "recipes" / "clean-balanced.toml"
    result = build(recipe, tmp_path / "out")
    train = result.manifest["mixing"]["train"]
    # Token balance with alpha 0.5, downsampling: the smaller language is kept whole and the
    # larger one is cut to q_0 / q_1 times its tokens (within one sentence).
    q = smoothed_probabilities(train["available"], 0.5)
    small = int(np.argmin(np.asarray(train["available"]) / q))
    assert train["tokens"][small] == train["available"][small]
    other = 1 - small
    assert abs(train["tokens"][other] - q[other] / q[small] * train["available"][small]) < 60
    langs = np.load(tmp_path / "out" / f"{result.manifest['conditions']['shared']['shards']['train'][0]}.langs.npy")
    n = 2 * min(train["sentences"])
    assert langs[:n].tolist() == [0, 1] * (n // 2)          # alternating order


def test_input_order_within_languages_needs_an_unshuffled_order(tmp_path: Path) -> None:
    recipe = write_corpus(tmp_path, ["a b"], ["c d"], '[mix]\nwithin_language = "input"\n')
    with pytest.raises(RecipeError, match=r"\[mix\] within_language: applies to order"):
        load_recipe(recipe)
