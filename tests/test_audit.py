"""The audit's statistics on a generated build, each against a plain computation written here
from the raw input lines (``str.split``), the build's provenance shards and its vocab.tsv."""

from __future__ import annotations

import json
import math
import unicodedata
from collections import Counter, defaultdict
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from rapidfuzz.distance import Levenshtein
from rapidfuzz.process import cdist
from scipy import stats as scipy_stats

from audit_builds import make_build, split_of_lines
from bivocab.audit import audit_build, write_audit
from bivocab.recipe import POLICIES, SPLITS

TAGS = ("en", "de")


def plain_class(token: str) -> str:
    """Token class by its definition in DESIGN.md section 2, written independently here."""
    if any(ch.isalpha() for ch in token):
        return "word"
    category = unicodedata.category(token[0])
    return {"N": "number", "P": "punct"}.get(category[0], "symbol")


def tokenizers_splitter(out: Path, tag: str):
    """Tokens of a raw line by the build's exported tokenizer.<tag>.json, run by the tokenizers
    library (its normalizer and pre-tokenizer), not by bivocab's own segmentation."""
    from tokenizers import Tokenizer

    tokenizer = Tokenizer.from_file(str(out / "shared" / f"tokenizer.{tag}.json"))

    def split(line: str) -> list[str]:
        return [piece for piece, _ in tokenizer.pre_tokenizer.pre_tokenize_str(tokenizer.normalizer.normalize_str(line))]

    return split


class Plain:
    """Counts of the build's text computed without bivocab: raw input lines, the split of each
    line from the provenance shards, and a tokenizer given by the test."""

    def __init__(self, out: Path, splitter):
        manifest = json.loads((out / "build.json").read_text(encoding="utf-8"))
        self.manifest = manifest
        split_of = split_of_lines(out)
        base = (out / manifest["recipe_file"]).resolve().parent
        self.counts = {t: {s: Counter() for s in SPLITS} for t in TAGS}
        self.sentences = {t: Counter() for t in TAGS}
        self.train_stream = {t: [] for t in TAGS}
        for index, entry in enumerate(manifest["inputs"]):
            tag = entry["language"]
            split_line = splitter(out, tag)
            lines = (base / entry["path"]).read_text(encoding="utf-8").splitlines()
            for number, line in enumerate(lines, start=1):
                split = split_of.get((index, number))
                if split is None:  # dropped by cleaning (an empty line)
                    continue
                tokens = split_line(line)
                self.sentences[tag][split] += 1
                self.counts[tag][split].update(tokens)
                if split == "train":
                    self.train_stream[tag].extend(tokens)
        self.train = {t: self.counts[t]["train"] for t in TAGS}
        self.A, self.B = set(self.train["en"]), set(self.train["de"])


@pytest.fixture(scope="module")
def generated_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return make_build(tmp_path_factory.mktemp("kellhaven"))


class Case:
    def __init__(self, out: Path, splitter):
        self.out = out
        self.plain = Plain(out, splitter)
        self.result = audit_build(out)


@pytest.fixture(scope="module", params=["generated", "sample"])
def case(request) -> Case:
    """The generated build (tokens counted with str.split) and the bundled sample corpus
    (tokens counted by the tokenizers library)."""
    if request.param == "generated":
        return Case(request.getfixturevalue("generated_dir"), lambda out, tag: str.split)
    return Case(request.getfixturevalue("sample_build"), tokenizers_splitter)


@pytest.fixture(scope="module")
def generated(generated_dir: Path) -> Case:
    return Case(generated_dir, lambda out, tag: str.split)


@pytest.fixture
def summary(case) -> dict:
    return case.result.summary


@pytest.fixture
def plain(case) -> Plain:
    return case.plain


@pytest.fixture
def result(case):
    return case.result


@pytest.fixture
def build_dir(case) -> Path:
    return case.out


@pytest.mark.parametrize("tag", TAGS)
def test_language_totals_match_a_plain_count(summary, plain, tag):
    counts = plain.train[tag]
    got = summary["languages"][tag]
    sentences = plain.sentences[tag]["train"]
    assert got["sentences"] == sentences
    assert got["tokens"] == sum(counts.values())
    assert got["types"] == len(counts)
    assert got["hapax_legomena"] == sum(1 for c in counts.values() if c == 1)
    assert got["hapax_share"] == pytest.approx(got["hapax_legomena"] / len(counts))
    assert got["type_token_ratio"] == pytest.approx(len(counts) / sum(counts.values()))
    assert got["mean_sentence_length"] == pytest.approx(sum(counts.values()) / sentences)


@pytest.mark.parametrize("tag", TAGS)
def test_per_class_statistics_match_a_plain_count(summary, plain, tag):
    frame = pd.DataFrame({"surface": list(plain.train[tag]), "count": list(plain.train[tag].values())})
    frame["class"] = frame["surface"].map(plain_class)
    sentences = plain.sentences[tag]["train"]
    for cls, group in frame.groupby("class"):
        got = summary["languages"][tag]["by_class"][cls]
        assert got["tokens"] == group["count"].sum()
        assert got["types"] == len(group)
        assert got["hapax_share"] == pytest.approx((group["count"] == 1).mean())
        assert got["type_token_ratio"] == pytest.approx(len(group) / group["count"].sum())
        assert got["mean_sentence_length"] == pytest.approx(group["count"].sum() / sentences)


@pytest.mark.parametrize("tag", TAGS)
def test_sentences_and_tokens_per_split_match_a_plain_count(summary, plain, tag):
    for split in SPLITS:
        got = summary["languages"][tag]["splits"][split]
        assert got["sentences"] == plain.sentences[tag][split]
        assert got["tokens"] == sum(plain.counts[tag][split].values())


@pytest.mark.parametrize("tag", TAGS)
def test_growth_curve_counts_distinct_types_in_corpus_order(summary, plain, tag):
    stream = plain.train_stream[tag]
    curve = summary["languages"][tag]["growth"]
    assert curve[-1][0] == len(stream)
    for n, v in curve:
        assert v == len(set(stream[:n]))


@pytest.mark.parametrize("tag", TAGS)
def test_heaps_fit_is_least_squares_in_log_log_space(summary, tag):
    lang = summary["languages"][tag]
    points = np.array([p for p in lang["growth"] if p[0] >= lang["tokens"] / 100], dtype=float)
    fit = scipy_stats.linregress(np.log10(points[:, 0]), np.log10(points[:, 1]))
    assert lang["heaps"]["beta"] == pytest.approx(fit.slope, rel=1e-9)
    assert lang["heaps"]["K"] == pytest.approx(10 ** fit.intercept, rel=1e-9)
    assert lang["heaps"]["r_squared"] == pytest.approx(fit.rvalue ** 2, rel=1e-9)


@pytest.mark.parametrize("tag", TAGS)
def test_zipf_fit_is_least_squares_over_log_spaced_ranks(summary, plain, tag):
    freq = np.array(sorted(plain.train[tag].values(), reverse=True))
    usable = int((freq >= 5).sum())
    ranks = np.unique(np.round(np.geomspace(1, usable, math.ceil(math.log10(usable) * 10) + 1)).astype(int))
    fit = scipy_stats.linregress(np.log10(ranks), np.log10(freq[ranks - 1]))
    got = summary["languages"][tag]["zipf"]
    assert got["s"] == pytest.approx(-fit.slope, rel=1e-9)
    assert got["max_rank"] == usable


def test_shared_types_union_and_jaccard_match_plain_sets(summary, plain):
    A, B = plain.A, plain.B
    overlap = summary["overlap"]
    assert overlap["shared_types"]["total"] == len(A & B)
    assert overlap["union_types"]["total"] == len(A | B)
    assert overlap["jaccard"]["total"] == pytest.approx(len(A & B) / len(A | B))
    for cls in ("word", "number", "punct", "symbol"):
        a = {t for t in A if plain_class(t) == cls}
        b = {t for t in B if plain_class(t) == cls}
        assert overlap["shared_types"][cls] == len(a & b)
        assert overlap["jaccard"][cls] == pytest.approx(len(a & b) / len(a | b))


@pytest.mark.parametrize("tag", TAGS)
def test_shared_token_share_matches_plain_sums(summary, plain, tag):
    shared = plain.A & plain.B
    counts = plain.train[tag]
    expected = sum(c for t, c in counts.items() if t in shared) / sum(counts.values())
    assert summary["overlap"]["shared_token_share"][tag]["total"] == pytest.approx(expected)


@pytest.mark.parametrize("tag", TAGS)
def test_frequency_bands_match_a_pandas_grouping(summary, plain, tag):
    shared = plain.A & plain.B
    frame = pd.DataFrame(sorted(plain.train[tag].items(), key=lambda sc: (-sc[1], sc[0])), columns=["surface", "count"])
    frame["rank"] = np.arange(1, len(frame) + 1)
    frame["band"] = [0 if r <= 10 else int(math.floor(math.log10(r - 1))) for r in frame["rank"]]
    frame["shared"] = frame["surface"].isin(shared)
    bands = summary["overlap"]["bands"][tag]
    assert len(bands) == frame["band"].nunique()
    for band, (_, group) in zip(bands, frame.groupby("band")):
        assert (band["first_rank"], band["last_rank"]) == (group["rank"].min(), group["rank"].max())
        assert band["shared_types"] == group["shared"].sum()
        assert band["tokens"] == group["count"].sum()
        assert band["shared_token_share"] == pytest.approx(group.loc[group["shared"], "count"].sum() / group["count"].sum())


def test_policy_sizes_satisfy_the_identities(summary, plain):
    A, B = plain.A, plain.B
    sizes = summary["policy_sizes"]
    specials = 3  # <pad> <unk> <eos>: the recipe's [vocab] defaults
    tagged = {c for c, choice in POLICIES["word-tagged"].items() if choice == "tagged"}
    a_w = {t for t in A if plain_class(t) in tagged}
    b_w = {t for t in B if plain_class(t) in tagged}
    assert sizes["specials"] == specials
    assert sizes["shared"] == len(A | B) + specials
    assert sizes["fully-tagged"] == len(A) + len(B) + specials
    assert sizes["word-tagged"] == len(a_w) + len(b_w) + len((A - a_w) | (B - b_w)) + specials
    assert sizes["saved_by_sharing"] == len(A & B)


def test_uncapped_policy_sizes_equal_the_built_vocabularies(summary):
    for name in ("shared", "word-tagged", "fully-tagged"):
        assert summary["policy_sizes"][name] == summary["conditions"][name]["size"]
        assert summary["conditions"][name]["uncapped_size"] == summary["conditions"][name]["size"]


def _plain_is_shared(condition: dict, surface: str) -> bool:
    if surface in condition["share"]:
        return True
    if surface in condition["separate"]:
        return False
    return condition["classes"][plain_class(surface)] == "shared"


def test_oov_share_matches_vocab_tsv_and_the_build_stats(summary, plain, build_dir):
    for name in summary["conditions"]:
        vocab = pd.read_csv(build_dir / name / "vocab.tsv", sep="\t", keep_default_na=False, dtype=str)
        words = vocab[vocab["class"] != "special"]
        entries = set(zip(words["lang"], words["surface"]))
        condition = next(c for c in plain.manifest["recipe"]["conditions"] if c["name"] == name)
        got = summary["conditions"][name]["coverage"]
        for tag in TAGS:
            for split in SPLITS:
                counts = plain.counts[tag][split]
                oov = Counter({t: c for t, c in counts.items()
                               if (("*" if _plain_is_shared(condition, t) else tag), t) not in entries})
                cell = got[tag][split]
                assert cell["tokens"] == sum(counts.values())
                assert cell["oov_tokens"] == sum(oov.values())
                assert cell["oov_tokens"] == plain.manifest["conditions"][name]["stats"][split]["oov"][tag]
                if split != "train":
                    top = sorted(oov.items(), key=lambda sc: (-sc[1], sc[0]))[:20]
                    assert [(o["surface"], o["count"]) for o in cell["top_oov"]] == top


def test_capped_condition_has_oov_tokens_in_train(generated):
    summary = generated.result.summary
    assert summary["conditions"]["capped"]["size"] == 60
    assert summary["conditions"]["capped"]["coverage"]["en"]["train"]["oov_share"] > 0


def test_homographs_are_the_spellings_of_both_training_texts(result, plain):
    assert {r.surface_a for r in result.homographs} == plain.A & plain.B
    assert all(r.kind == "exact" and r.surface_a == r.surface_b for r in result.homographs)


def test_homograph_frequencies_are_per_million_words_with_zipf_values(generated):
    result, plain = generated.result, generated.plain
    words = {t: sum(c for s, c in plain.train[t].items() if plain_class(s) == "word") for t in TAGS}
    row = next(r for r in result.homographs if r.surface_a == "Hotel")
    assert row.per_million_a == pytest.approx(plain.train["en"]["Hotel"] * 1e6 / words["en"])
    assert row.per_million_b == pytest.approx(plain.train["de"]["Hotel"] * 1e6 / words["de"])
    # van Heuven et al. (2014): Zipf = log10(frequency per million words) + 3.
    assert row.zipf_a == pytest.approx(math.log10(row.per_million_a) + 3)
    assert row.log10_ratio == pytest.approx(math.log10(row.per_million_a / row.per_million_b))


def test_homograph_vocabulary_status_follows_each_policy(generated):
    result = generated.result
    status = dict(zip(result.conditions, next(r for r in result.homographs if r.surface_a == "Hotel").in_vocab))
    assert status["shared"] == "shared"
    assert status["fully-tagged"] == "separate"
    assert status["custom"] == "shared"            # forced by share = ["Hotel"]
    dot = dict(zip(result.conditions, next(r for r in result.homographs if r.surface_a == ".").in_vocab))
    assert dot["word-tagged"] == "shared" and dot["custom"] == "separate"


def test_case_and_diacritic_variants_are_reported_separately(generated):
    result, plain = generated.result, generated.plain
    pairs = {(r.surface_a, r.surface_b): r.kind for r in result.variants}
    assert pairs[("kind", "Kind")] == "case"
    assert pairs[("cafe", "café")] == "marks"
    assert pairs[("uber", "Über")] == "case+marks"
    assert pairs[("gift", "Gift")] == "case"
    # Every pair found by grouping plainly on NFD-without-marks + casefold, and no other.
    def fold(s: str) -> str:
        return "".join(c for c in unicodedata.normalize("NFD", s) if not unicodedata.combining(c)).casefold()
    groups = defaultdict(list)
    for b in plain.B - plain.A:
        groups[fold(b)].append(b)
    expected = {(a, b) for a in plain.A - plain.B for b in groups.get(fold(a), [])}
    assert set(pairs) == expected


def test_near_homographs_are_all_unshared_word_pairs_at_edit_distance_one(result, plain):
    words_a = sorted(t for t in plain.A - plain.B if plain_class(t) == "word" and len(t) >= 3)
    words_b = sorted(t for t in plain.B - plain.A if plain_class(t) == "word" and len(t) >= 3)
    matrix = cdist(words_a, words_b, scorer=Levenshtein.distance, dtype=np.int32)
    expected = {(words_a[i], words_b[j]) for i, j in zip(*np.nonzero(matrix == 1))}
    variants = {(r.surface_a, r.surface_b) for r in result.variants}
    assert {(r.surface_a, r.surface_b) for r in result.near} == expected - variants


def test_planted_near_homograph_is_found(generated):
    assert ("fish", "fisch") in {(r.surface_a, r.surface_b) for r in generated.result.near}


@pytest.fixture(scope="module")
def written(generated: Case) -> Path:
    """The generated build's audit directory (the shared sample build is never written to)."""
    return write_audit(generated.result)


def test_homographs_tsv_has_one_row_per_homograph(written, generated):
    result = generated.result
    frame = pd.read_csv(written / "homographs.tsv", sep="\t", keep_default_na=False, dtype=str)
    assert len(frame) == len(result.homographs)
    assert list(frame.columns[:4]) == ["surface", "class", "count_en", "count_de"]
    assert set(frame["surface"]) == {r.surface_a for r in result.homographs}
    assert {f"in_{c}" for c in result.conditions} <= set(frame.columns)
    assert '"' in set(frame["surface"])  # a quote character survives the CSV quoting


def test_summary_json_holds_the_statistics(written, generated):
    result = generated.result
    data = json.loads((written / "summary.json").read_text(encoding="utf-8"))
    assert data["policy_sizes"] == result.summary["policy_sizes"]
    assert data["homographs"]["count"] == len(result.homographs)
    assert set(data) >= {"build", "languages", "overlap", "policy_sizes", "conditions", "homographs",
                         "variants", "near_homographs"}
