"""What a build writes, checked with the libraries users already have: numpy, pandas and the
tokenizers library (the reference: its tokenizer.<tag>.json must reproduce the shard ids)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from tokenizers import Tokenizer

import bivocab
from bivocab.corpus import iter_sentences
from bivocab.recipe import SPLITS, recipe_from_manifest
from bivocab.segment import segment


def _provenance_texts(build: Path) -> dict[tuple[int, int], str]:
    manifest = json.loads((build / "build.json").read_text())
    recipe = recipe_from_manifest(manifest, build)
    return {(s.input_index, s.line): s.text for s in iter_sentences(recipe)}


def _sentences_with_text(build: Path, condition: str):
    """(language, ids, normalised text) of every shard sentence, joined through provenance."""
    texts = _provenance_texts(build)
    manifest = json.loads((build / "build.json").read_text())
    for split in SPLITS:
        reader = bivocab.open_shards(build, condition, split)
        for stem, shard in zip(reader.paths, reader.shards):
            prov = np.load(build / "provenance" / f"{stem.split('/', 1)[1]}.npy")
            langs = np.asarray(shard.langs)
            for i in range(len(shard)):
                tag = manifest["inputs"][prov["input"][i]]["language"]
                assert reader.tags[langs[i]] == tag
                yield tag, shard.sentence(i), texts[(int(prov["input"][i]), int(prov["line"][i]))]


@pytest.mark.parametrize("condition", ["shared", "word-tagged", "fully-tagged"])
def test_exported_tokenizer_reproduces_every_shard_sentence(sample_build, condition):
    # Reference library: Hugging Face `tokenizers` (PyPI), loading our tokenizer.<tag>.json.
    tokenizers = {t: Tokenizer.from_file(str(sample_build / condition / f"tokenizer.{t}.json"))
                  for t in ("en", "de")}
    count = 0
    for tag, ids, text in _sentences_with_text(sample_build, condition):
        assert tokenizers[tag].encode(text).ids == ids.tolist(), text
        count += 1
    assert count >= 3000


@pytest.mark.parametrize("condition", ["shared", "word-tagged", "fully-tagged"])
def test_decoding_shards_gives_back_the_segmented_sentence(sample_build, condition):
    vocab = pd.read_csv(sample_build / condition / "vocab.tsv", sep="\t", keep_default_na=False)
    surface = vocab["surface"].tolist()
    lang = vocab["lang"].tolist()
    unk = set(vocab.loc[vocab["surface"].str.startswith("<unk"), "id"])
    types_train = {t: set(pd.read_csv(sample_build / "types" / f"{t}.tsv", sep="\t", keep_default_na=False)
                          .query("count_train > 0")["surface"]) for t in ("en", "de")}
    for tag, ids, text in _sentences_with_text(sample_build, condition):
        tokens = segment(text)
        ids = ids.tolist()
        assert surface[ids[-1]].startswith("<eos")
        assert len(ids) - 1 == len(tokens)
        for token, i in zip(tokens, ids[:-1]):
            if i in unk:  # only a type never seen in this language's training text may be unknown
                assert token not in types_train[tag] or lang[i] != "*"
            else:
                assert surface[i] == token and lang[i] in ("*", tag)


def test_shards_load_with_numpy_memory_mapping(sample_build):
    manifest = json.loads((sample_build / "build.json").read_text())
    for name, cond in manifest["conditions"].items():
        for split, stems in cond["shards"].items():
            for stem in stems:
                tokens = np.load(sample_build / f"{stem}.tokens.npy", mmap_mode="r")
                offsets = np.load(sample_build / f"{stem}.offsets.npy", mmap_mode="r")
                langs = np.load(sample_build / f"{stem}.langs.npy", mmap_mode="r")
                assert tokens.dtype == np.dtype(cond["dtype"]) == np.uint16
                assert offsets.dtype == np.int64 and offsets[0] == 0 and offsets[-1] == len(tokens)
                assert len(langs) == len(offsets) - 1 and langs.dtype == np.uint8
                assert np.all(np.diff(offsets) >= 2)  # every sentence: >= 1 token + <eos>
                assert int(tokens.max()) < cond["size"]


def test_manifest_lists_every_file_with_its_hash(sample_build):
    import hashlib
    manifest = json.loads((sample_build / "build.json").read_text())
    listed = {f["path"]: f for f in manifest["files"]}
    on_disk = {str(p.relative_to(sample_build)) for p in sample_build.rglob("*") if p.is_file()}
    assert on_disk - set(listed) == {"build.json", ".bivocab.lock"}
    for path, entry in listed.items():
        data = (sample_build / path).read_bytes()
        assert hashlib.sha256(data).hexdigest() == entry["sha256"] and len(data) == entry["bytes"]
    text = (sample_build / "build.json").read_text()
    assert str(sample_build) not in text and "/tmp" not in text  # no absolute paths
    assert list(json.loads(text)) == sorted(json.loads(text))  # keys sorted


def test_split_sentence_counts_add_up_to_the_kept_sentences(sample_build):
    manifest = json.loads((sample_build / "build.json").read_text())
    kept = sum(i["report"]["sentences_kept"] for i in manifest["inputs"])
    for cond in manifest["conditions"].values():
        assert sum(s["sentences"] for s in cond["stats"].values()) == kept


def test_regex_and_tokenizers_pre_tokenizer_split_the_whole_sample_corpus_identically():
    # Reference library: tokenizers' Split pre-tokenizer (Oniguruma) with our pattern.
    from tokenizers import Regex, pre_tokenizers
    from bivocab.recipe import load_recipe
    from bivocab.segment import TOKEN_PATTERN
    from conftest import SAMPLE_RECIPE

    splitter = pre_tokenizers.Split(Regex(TOKEN_PATTERN), behavior="removed", invert=True)
    n = 0
    for sentence in iter_sentences(load_recipe(SAMPLE_RECIPE)):
        assert [p for p, _ in splitter.pre_tokenize_str(sentence.text)] == segment(sentence.text)
        n += 1
    assert n >= 3000
