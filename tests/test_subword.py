"""Subword conditions: exported sentencepiece models reproduce the shards, builds are
reproducible, policies hold on ids, and the statistics match hand-computed and published values."""

from __future__ import annotations

import hashlib
import json
import random
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import sentencepiece as spm
from sentencepiece import sentencepiece_model_pb2 as model_pb2
from tokenizers import Tokenizer

from bivocab import build, load_recipe
from bivocab.clean import normalise_text
from bivocab.corpus import iter_sentences
from bivocab.errors import BivocabError, RecipeError
from bivocab.recipe import CleanSpec, recipe_from_manifest
from bivocab.shards import open_shards
from bivocab.mix import smoothed_probabilities
from bivocab.subword import (allocate, count_word_pieces, draw_rows, export_model, merge_pieces,
                             pieces_per_word, subword_statistics, train_model, word_spans)

REPO = Path(__file__).resolve().parent.parent
Piece = model_pb2.ModelProto.SentencePiece

# Invented demo text about the harbour town of Kellhaven (our own scenario).
_EN = ("the harbour of Kellhaven opens at dawn and fishing boats leave with nets while gulls circle "
       "over the old lighthouse keeper who counts 12 crates of herring for 3,50 € each ( fresh ) ! "
       "quay tide ferry captain market rope salt").split()
_DE = ("der Hafen von Kellhaven öffnet bei Tagesanbruch und Fischerboote fahren mit Netzen hinaus "
       "während Möwen über dem alten Leuchtturmwärter kreisen der 12 Kisten Hering für 3,50 € zählt "
       "( frisch ) ! Kai Flut Fähre Kapitän Markt Seil Salz").split()
_SYLLABLES = "ka lo ven mar tis un ber gho sel fa ri dom".split()

def subword_recipe(name: str, seed: int, *conditions: str) -> str:
    """A recipe over ``corpus/<tag>/*.txt`` (see write_subword_corpus) with the given conditions."""
    return (f'\n[build]\nname = "{name}"\nseed = {seed}\n[languages.en]\ninputs = ["corpus/en/*.txt"]\n'
            f'[languages.de]\ninputs = ["corpus/de/*.txt"]\n' + "".join(conditions))


def condition_table(name: str, policy: str, **keys: object) -> str:
    """One [[condition]] table; string values are quoted, numbers and booleans written as TOML."""
    lines = [f'name = "{name}"', f'policy = "{policy}"']
    for key, value in keys.items():
        text = f'"{value}"' if isinstance(value, str) else str(value).lower() if isinstance(value, bool) else str(value)
        lines.append(f"{key} = {text}")
    return "[[condition]]\n" + "\n".join(lines) + "\n"


# The subword conditions the test modules share: small sizes, so a build takes a few seconds.
JOINT = condition_table("joint", "shared", units="unigram", size=400)
SEPARATE = condition_table("separate", "fully-tagged", units="unigram", size_per_language=330,
                     unknown="per-language", eos="per-language")
JOINT_NO_BYTES = condition_table("joint-no-bytes", "shared", units="unigram", size=150, byte_fallback=False)


RECIPE = subword_recipe("subword-test", 11, condition_table("words", "shared"), JOINT,
                        condition_table("joint-smoothed", "shared", units="bpe", size=400, sample_sentences=400,
                                  sample_alpha=0.5),
                        SEPARATE, condition_table("tagged-words", "word-tagged", units="bpe", size=800), JOINT_NO_BYTES)


def write_subword_corpus(root: Path, sentences: int = 1500, seed: int = 3, skew: float = 1.0) -> None:
    """A corpus with enough distinct spellings for a few hundred pieces per language (the
    conftest corpus has too few characters and words for a subword model)."""
    rng = random.Random(seed)
    en = _EN + ["".join(rng.choice(_SYLLABLES) for _ in range(rng.randint(2, 4))) for _ in range(300)]
    de = _DE + ["".join(rng.choice(_SYLLABLES) for _ in range(rng.randint(2, 4))) + rng.choice(["en", "ung", "ß", "ä"])
                for _ in range(300)]
    for lang, words, n in (("en", en, sentences), ("de", de, int(sentences * skew))):
        (root / "corpus" / lang).mkdir(parents=True, exist_ok=True)
        lines = [" ".join(rng.choice(words) for _ in range(rng.randint(4, 14))) + " ." for _ in range(n)]
        # Sentences with a character seen nowhere else: those outside the train split exercise
        # the unknown token when byte fallback is off.
        lines += [f"{rng.choice(words)} {chr(0x0100 + 2 * i + (lang == 'de'))} ." for i in range(12)]
        (root / "corpus" / lang / "a.txt").write_text("\n".join(lines) + "\n", encoding="utf-8")


def make_project(root: Path, recipe: str = RECIPE, **corpus: float) -> Path:
    write_subword_corpus(root, **corpus)
    path = root / "recipe.toml"
    path.write_text(recipe, encoding="utf-8")
    return path


def file_hashes(out: Path) -> dict[str, str]:
    return {str(p.relative_to(out)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(out.rglob("*")) if p.is_file() and not p.name.startswith(".bivocab")}


@pytest.fixture(scope="module")
def built(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("subword")
    recipe = make_project(root)
    build(recipe, root / "out", jobs=1)
    return root / "out"


def read_vocab(path: Path) -> pd.DataFrame:
    return pd.read_csv(path, sep="\t", keep_default_na=False, dtype=str)


def manifest_of(out: Path) -> dict:
    return json.loads((out / "build.json").read_text(encoding="utf-8"))


def subword_conditions(out: Path) -> dict[str, dict]:
    return {n: c for n, c in manifest_of(out)["conditions"].items() if c["units"] != "word"}


def sentences_by_position(out: Path, split: str) -> dict[tuple[int, int], object]:
    recipe = recipe_from_manifest(manifest_of(out), out)
    return {(s.input_index, s.line): s for s in iter_sentences(recipe, (split,))}


def shard_sentences(out: Path, condition: str, split: str):
    """(provenance row, token ids) of every sentence of a condition's split, in shard order."""
    reader = open_shards(out, condition, split)
    for stem, shard in zip(reader.paths, reader.shards):
        provenance = np.load(out / "provenance" / f"{stem.split('/', 1)[1]}.npy")
        for i in range(len(shard)):
            yield provenance[i], shard.sentence(i).tolist()


# --- exported models ------------------------------------------------------------------------------

@pytest.mark.parametrize("split", ["train", "valid", "test"])
def test_each_exported_model_reproduces_the_shard_ids_and_decodes_to_the_normalised_text(built, split):
    # Reference library: sentencepiece itself loads the exported .model files.
    sentences = sentences_by_position(built, split)
    for name, entry in subword_conditions(built).items():
        models = {t: spm.SentencePieceProcessor(model_file=str(built / p)) for t, p in entry["models"].items()}
        checked = 0
        for prov, ids in shard_sentences(built, name, split):
            sentence = sentences[(int(prov["input"]), int(prov["line"]))]
            model = models[sentence.lang]
            assert ids == model.encode(sentence.text) + [model.eos_id()], (name, sentence.text)
            if model.unk_id() not in ids:
                assert model.decode(ids) == sentence.text
            checked += 1
        assert checked == len(sentences)


@pytest.mark.parametrize("split", ["train", "valid", "test"])
def test_unigram_tokenizer_json_reproduces_the_shard_ids_and_decodes_to_the_normalised_text(built, split):
    # Reference library: tokenizers loads the exported tokenizer.<tag>.json files.
    sentences = sentences_by_position(built, split)
    unigram = {n: e for n, e in subword_conditions(built).items() if e["units"] == "unigram"}
    assert len(unigram) == 3
    for name, entry in unigram.items():
        tokenizers = {t: Tokenizer.from_file(str(built / p)) for t, p in entry["tokenizers"].items()}
        unk = {t: spm.SentencePieceProcessor(model_file=str(built / p)).unk_id() for t, p in entry["models"].items()}
        for prov, ids in shard_sentences(built, name, split):
            sentence = sentences[(int(prov["input"]), int(prov["line"]))]
            tokenizer = tokenizers[sentence.lang]
            assert tokenizer.encode(sentence.text).ids == ids, (name, sentence.text)
            if unk[sentence.lang] not in ids:
                assert tokenizer.decode(ids[:-1]) == sentence.text


def test_without_byte_fallback_unseen_characters_become_the_unknown_token(built):
    summary = manifest_of(built)["conditions"]["joint-no-bytes"]["stats"]
    assert sum(summary["test"]["oov"].values()) + sum(summary["valid"]["oov"].values()) > 0
    assert sum(summary["train"]["oov"].values()) == 0      # character_coverage 1: train is covered


def test_the_exported_model_encodes_exactly_like_the_model_sentencepiece_trained(tmp_path):
    # The merged id space must not change the segmentation: encoding with the exported model
    # (other language's pieces as UNUSED placeholders, specials moved first) gives the trained
    # model's pieces, shifted into the merged ids.
    write_subword_corpus(tmp_path, sentences=600)
    recipe = load_recipe(make_project(tmp_path))
    condition = next(c for c in recipe.conditions if c.name == "separate")
    texts = {t: (tmp_path / "corpus" / t / "a.txt").read_text(encoding="utf-8").splitlines() for t in recipe.tags}
    for units in ("unigram", "bpe"):
        models = [train_model(iter(texts[t]), units, 331, condition.subword, t) for t in recipe.tags]
        pieces = merge_pieces(models, recipe.tags, condition)
        specials = [("<pad>", "*"), ("<unk:en>", "en"), ("<unk:de>", "de")]
        for li, tag in enumerate(recipe.tags):
            exported = spm.SentencePieceProcessor(model_proto=export_model(models[li], li, recipe.tags, specials,
                                                                          pieces, 1 + li, None, 0))
            trained = spm.SentencePieceProcessor(model_proto=models[li].SerializeToString())
            for line in texts[tag] + texts[recipe.tags[1 - li]][:200]:
                assert exported.encode(line, out_type=str) == trained.encode(line, out_type=str)


@pytest.mark.parametrize("normal_form", ["NFC", "NFKC", "none"])
def test_cleaning_never_leaves_the_placeholder_mark_so_foreign_pieces_cannot_match(normal_form):
    # The other language's pieces are named U+001F tag U+001F piece inside a model file; they are
    # unreachable only because no normalised sentence can hold U+001F.
    assert "\x1f" not in normalise_text("Hafen\x1fde\x1f\u2581Kai", CleanSpec(normal_form=normal_form))


def test_model_files_embed_no_input_path_or_machine_dependent_setting(built):
    for entry in subword_conditions(built).values():
        for path in entry["models"].values():
            proto = model_pb2.ModelProto()
            proto.ParseFromString((built / path).read_bytes())
            spec = proto.trainer_spec
            assert list(spec.input) == [] and spec.model_prefix == ""
            assert spec.num_threads == 1                     # the recipe default, not --jobs
            assert spec.input_sentence_size == 0             # we sample; sentencepiece does not
            assert proto.normalizer_spec.name == "identity"  # our cleaning is the only normaliser


def test_vocab_tsv_follows_the_word_level_contract_and_counts_the_train_shards(built):
    for name, entry in subword_conditions(built).items():
        table = read_vocab(built / entry["vocab"])
        assert list(table.columns) == ["id", "token", "surface", "lang", "class", "count", "count_en", "count_de"]
        rows = table.astype(str).values.tolist()
        assert [int(r[0]) for r in rows] == list(range(len(rows))) == list(range(entry["size"]))
        assert len({r[1] for r in rows}) == len(rows)
        counts = np.zeros((2, len(rows)), dtype=np.int64)
        reader = open_shards(built, name, "train")
        for lang, ids in reader.sentences():
            counts[("en", "de").index(lang)] += np.bincount(ids[:-1], minlength=len(rows))
        assert [int(r[6]) for r in rows] == counts[0].tolist()
        assert [int(r[7]) for r in rows] == counts[1].tolist()


# --- reproducibility ------------------------------------------------------------------------------

def test_two_builds_are_byte_identical(built, tmp_path):
    shutil.copytree(built.parent / "corpus", tmp_path / "corpus")
    recipe = tmp_path / "recipe.toml"
    recipe.write_text(RECIPE, encoding="utf-8")
    build(recipe, tmp_path / "again", jobs=1)
    assert file_hashes(tmp_path / "again") == file_hashes(built)


def test_jobs_one_and_jobs_two_give_identical_builds(built, tmp_path):
    shutil.copytree(built.parent / "corpus", tmp_path / "corpus")
    recipe = tmp_path / "recipe.toml"
    recipe.write_text(RECIPE, encoding="utf-8")
    build(recipe, tmp_path / "two", jobs=2)
    assert file_hashes(tmp_path / "two") == file_hashes(built)


# --- policies on ids ------------------------------------------------------------------------------

def ids_per_language(out: Path, condition: str) -> dict[str, set[int]]:
    used: dict[str, set[int]] = {"en": set(), "de": set()}
    for split in ("train", "valid", "test"):
        for lang, ids in open_shards(out, condition, split).sentences():
            used[lang].update(ids.tolist())
    return used


def test_fully_tagged_subword_condition_uses_no_id_in_both_languages(built):
    used = ids_per_language(built, "separate")
    assert used["en"] and used["de"]
    assert used["en"].isdisjoint(used["de"])


def test_word_tagged_shares_only_punctuation_and_symbol_pieces_and_uses_them_in_both(built):
    rows = read_vocab(built / "tagged-words" / "vocab.tsv").astype(str).values.tolist()
    shared = {int(r[0]) for r in rows if r[3] == "*" and r[4] != "special"}
    assert shared and all(rows[i][4] in ("punct", "symbol") for i in shared)
    assert not any(ch.isalnum() for i in shared for ch in rows[i][2])
    used = ids_per_language(built, "tagged-words")
    both = used["en"] & used["de"]
    assert both - {2} <= shared        # 2 is the shared <eos>
    assert both & shared


def test_shared_subword_condition_has_pieces_used_by_both_languages(built):
    stats = subword_statistics(built)["conditions"]["joint"]
    assert stats["pieces_used_by_both"] > 0
    assert 0 < stats["share_of_tokens_on_pieces_used_by_both"] <= 1


@pytest.mark.skipif(not (REPO / "sample_corpus").is_dir(), reason="sample corpus not in this checkout")
def test_subword_recipe_builds_on_the_sample_corpus_with_shared_pieces(tmp_path):
    out = tmp_path / "out"
    build(REPO / "recipes" / "subword.toml", out, jobs=1)
    stats = subword_statistics(out)["conditions"]
    assert stats["joint-unigram"]["pieces_used_by_both"] > 0
    assert stats["joint-unigram"]["share_of_tokens_on_pieces_used_by_both"] > 0
    assert stats["separate-unigram"]["pieces_used_by_both"] == 0
    assert all(c["size_identity"]["holds"] for c in stats.values())


def test_vocabulary_size_identities_hold(built):
    manifest = manifest_of(built)
    separate = manifest["conditions"]["separate"]
    # fully tagged: |V| = specials + |P_en| + |P_de| (pad + two unknowns + two end markers)
    assert separate["size"] == 5 + 2 * 330
    assert manifest["conditions"]["joint"]["size"] == 400
    stats = subword_statistics(built)["conditions"]
    assert all(c["size_identity"]["holds"] for c in stats.values())
    assert stats["separate"]["size_identity"]["pieces_in_both_models"] == 0
    tagged = manifest["conditions"]["tagged-words"]
    merged = tagged["subword"]["merged_pieces"]
    assert merged > 0 and tagged["size"] == 800 - merged


# --- sampling -------------------------------------------------------------------------------------

def test_exponent_smoothed_shares_match_a_worked_example():
    # Lample & Conneau (2019), q_i = p_i^alpha / sum_j p_j^alpha, alpha = 0.5 (value from memory).
    # Worked by hand: p = (0.9, 0.1); sqrt(0.9) = 3 sqrt(0.1), so q = (3/4, 1/4).
    assert smoothed_probabilities([900, 100], 0.5).tolist() == pytest.approx([0.75, 0.25], abs=1e-12)
    # Conneau et al. (2020) use alpha = 0.3 (value from memory): p = (0.8, 0.2) gives
    # q_1 = 0.8^0.3 / (0.8^0.3 + 0.2^0.3) = 0.93522 / (0.93522 + 0.61703) = 0.60250 (hand, 5 places).
    assert smoothed_probabilities([8, 2], 0.3)[0] == pytest.approx(0.60250, abs=5e-5)
    assert smoothed_probabilities([8, 2], 1.0).tolist() == pytest.approx([0.8, 0.2])


def test_allocation_always_adds_up_to_the_requested_total():
    assert allocate(10, [0.75, 0.25]) == [8, 2]
    assert allocate(7, [0.5, 0.5]) == [4, 3]
    shares = smoothed_probabilities([1234, 99], 0.3)
    assert sum(allocate(1001, shares)) == 1001


def test_smaller_samples_are_prefixes_of_larger_ones_and_upsampling_repeats_the_order():
    rows = np.arange(10, 20)
    big = draw_rows(rows, 25, seed=5, lang_index=1)
    assert draw_rows(rows, 4, seed=5, lang_index=1).tolist() == big[:4].tolist()
    assert sorted(big[:10].tolist()) == rows.tolist()
    assert big[10:20].tolist() == big[:10].tolist()
    assert draw_rows(rows, 4, seed=6, lang_index=1).tolist() != big[:4].tolist()


def test_joint_model_sample_follows_the_smoothed_probabilities(tmp_path):
    out = tmp_path / "out"
    recipe = make_project(tmp_path, RECIPE, sentences=1200, skew=0.25)
    build(recipe, out)
    sample = manifest_of(out)["conditions"]["joint-smoothed"]["subword"]["sample"]
    available = [sample[t]["train_sentences"] for t in ("en", "de")]
    expected = allocate(800, smoothed_probabilities(available, 0.5))
    assert [sample[t]["drawn"] for t in ("en", "de")] == expected
    assert expected[1] > 800 * available[1] / sum(available)   # the smaller language gains


# --- statistics -----------------------------------------------------------------------------------

def hand_model() -> spm.SentencePieceProcessor:
    """A unigram model written by hand, so the segmentation of the example is known."""
    proto = model_pb2.ModelProto()
    proto.trainer_spec.model_type = model_pb2.TrainerSpec.UNIGRAM
    proto.normalizer_spec.name = "identity"
    proto.normalizer_spec.add_dummy_prefix = True
    proto.normalizer_spec.remove_extra_whitespaces = False
    proto.pieces.add(piece="<unk>", score=0.0, type=Piece.UNKNOWN)
    for piece in ["\u2581Kell", "haven", "\u2581harbour", ".", "\u2581"]:
        proto.pieces.add(piece=piece, score=-1.0, type=Piece.NORMAL)
    for ch in "Kelhavnrbou":
        proto.pieces.add(piece=ch, score=-10.0, type=Piece.NORMAL)
    return spm.SentencePieceProcessor(model_proto=proto.SerializeToString())


def test_fertility_and_continued_words_match_a_hand_computed_example():
    # Definitions: Rust et al. (2021, ACL), fertility = subword tokens per word, proportion of
    # continued words = share of words split into two or more subword tokens.
    model = hand_model()
    first = "Kellhaven harbour."    # words Kellhaven | harbour | .   pieces ▁Kell haven ▁harbour .
    second = "harbour ."            # words harbour | .               pieces ▁harbour ▁ .
    assert model.encode(first, out_type=str) == ["\u2581Kell", "haven", "\u2581harbour", "."]
    assert model.encode(second, out_type=str) == ["\u2581harbour", "\u2581", "."]
    total = count_word_pieces(model, first) + count_word_pieces(model, second)
    # By hand: 5 words, 4 + 3 = 7 pieces, 1 continued word (Kellhaven).
    assert (total.words, total.pieces, total.continued) == (5, 7, 1)
    assert total.fertility == pytest.approx(7 / 5)
    assert total.continued_proportion == pytest.approx(1 / 5)


def test_word_spans_are_utf8_byte_spans_of_the_segmentation():
    assert word_spans("Fähre, 3,50 €") == [(0, 6), (6, 7), (8, 12), (13, 16)]


def test_a_byte_fallback_character_counts_as_pieces_of_its_word():
    # "ø" in UTF-8 is two bytes: sentencepiece reports a zero-width first byte piece.
    assert pieces_per_word([(0, 3)], [(0, 1, False), (1, 1, True), (1, 3, True)]).tolist() == [3]


def test_statistics_count_the_same_pieces_as_the_shards(built):
    stats = subword_statistics(built, split="valid")
    for name, entry in stats["conditions"].items():
        for tag, lang in entry["languages"].items():
            assert lang["pieces"] == lang["shard_tokens"] > 0
            assert lang["fertility"] >= 1.0
            assert 0 < lang["continued_word_proportion"] < 1
        fert = [entry["languages"][t]["fertility"] for t in ("en", "de")]
        assert entry["parity_ratio"]["en/de"] == pytest.approx(fert[0] / fert[1])


# --- recipe errors --------------------------------------------------------------------------------

@pytest.mark.parametrize("extra, problem", [
    ('units = "unigram"\nsize = 300\nsize_per_language = 200', "exactly one of size and size_per_language"),
    ('size = 300', "applies to subword units only"),
    ('units = "unigram"\nsize_per_language = 300', "one joint model"),
    ('units = "bpe"\nsize = 300\nshare = ["Hafen"]', 'applies to units = "word" only'),
    ('units = "unigram"\nsize = 300\nsample_alpha = 1.5', "must be between 0 (equal shares) and 1"),
    ('units = "wordpiece"\nsize = 300', "expected one of"),
])
def test_bad_subword_keys_are_one_line_errors_naming_file_and_line(tmp_path, extra, problem):
    write_subword_corpus(tmp_path, sentences=20)
    text = RECIPE.split("[[condition]]")[0] + f'[[condition]]\nname = "bad"\npolicy = "shared"\n{extra}\n'
    path = tmp_path / "recipe.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(RecipeError) as err:
        load_recipe(path)
    message = str(err.value)
    assert problem in message and "\n" not in message
    assert message.startswith(f"{path}:")


def test_a_size_the_corpus_cannot_fill_is_a_clear_error(tmp_path):
    recipe = RECIPE.split("[[condition]]")[0] + '[[condition]]\nname = "huge"\npolicy = "shared"\nunits = "unigram"\nsize = 90000\n'
    path = make_project(tmp_path, recipe, sentences=200)
    with pytest.raises(BivocabError, match=r"condition 'huge': sentencepiece could not train 89998 pieces"):
        build(path, tmp_path / "out")
    assert not (tmp_path / "out" / "build.json").exists()


def test_exact_size_false_lets_a_small_corpus_stop_short_of_the_size(tmp_path):
    recipe = (RECIPE.split("[[condition]]")[0] + '[[condition]]\nname = "soft"\npolicy = "fully-tagged"\n'
              'units = "unigram"\nsize_per_language = 5000\nexact_size = false\n')
    out = tmp_path / "out"
    build(make_project(tmp_path, recipe, sentences=300), out)
    entry = manifest_of(out)["conditions"]["soft"]
    assert entry["size"] < 3 + 2 * 5000
    assert entry["size"] == 3 + sum(entry["subword"]["model_pieces"].values())
    assert subword_statistics(out)["conditions"]["soft"]["size_identity"]["holds"]


def test_long_train_sentences_are_left_out_of_the_sample_and_counted(tmp_path):
    recipe = (RECIPE.split("[[condition]]")[0] + '[[condition]]\nname = "short"\npolicy = "fully-tagged"\n'
              'units = "bpe"\nsize_per_language = 5000\nexact_size = false\nmax_sentence_bytes = 60\n')
    out = tmp_path / "out"
    build(make_project(tmp_path, recipe, sentences=300), out)
    sample = manifest_of(out)["conditions"]["short"]["subword"]["sample"]
    texts = [s.text for s in iter_sentences(load_recipe(tmp_path / "recipe.toml"), ("train",), "en")]
    too_long = sum(len(t.encode("utf-8")) > 60 for t in texts)
    assert sample["en"]["too_long"] == too_long > 0
    assert sample["en"]["drawn"] == sample["en"]["train_sentences"] - too_long


def test_every_piece_but_a_bare_boundary_belongs_to_exactly_one_word(built):
    sentences = sentences_by_position(built, "test").values()
    for name, entry in subword_conditions(built).items():
        models = {t: spm.SentencePieceProcessor(model_file=str(built / p)) for t, p in entry["models"].items()}
        for sentence in sentences:
            model = models[sentence.lang]
            encoded = model.encode(sentence.text, out_type="proto").pieces
            spans = [(p.begin, p.end, model.is_byte(p.id)) for p in encoded]
            per_word = pieces_per_word(word_spans(sentence.text), spans)
            bare = sum(1 for p in encoded if p.piece == "\u2581")
            assert per_word.sum() + bare == len(encoded), (name, sentence.text)
            assert (per_word >= 1).all()
