"""Parquet shards equal the npy shards and load in datasets and pandas; the training reader's
sentences, blocks and batches equal plain numpy slices of the shard files."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest

from bivocab.build import build
from bivocab.errors import BivocabError
from bivocab.shards import open_shards, torch_dataset
from recipe_factory import kellhaven_lines, write_corpus

SHARDS = '[shards]\nformat = "{fmt}"\nmax_tokens = 120\n'


@pytest.fixture(scope="module")
def both(tmp_path_factory) -> Path:
    tmp = tmp_path_factory.mktemp("both")
    recipe = write_corpus(tmp, kellhaven_lines("en", 80), kellhaven_lines("de", 60), SHARDS.format(fmt="npy+parquet"))
    build(recipe, tmp / "out")
    return tmp / "out"


def manifest_of(out: Path) -> dict:
    return json.loads((out / "build.json").read_text(encoding="utf-8"))


def npy_rows(out: Path, stem: str, manifest: dict) -> list[dict]:
    """The sentences of one npy shard as rows, computed with numpy only."""
    tokens = np.load(out / f"{stem}.tokens.npy")
    offsets = np.load(out / f"{stem}.offsets.npy")
    langs = np.load(out / f"{stem}.langs.npy")
    prov = np.load(out / "provenance" / f"{stem.split('/', 1)[1]}.npy")
    tags = [lang["tag"] for lang in manifest["recipe"]["languages"]]
    paths = [entry["path"] for entry in manifest["inputs"]]
    return [{"language": tags[langs[i]], "ids": tokens[offsets[i]:offsets[i + 1]].tolist(),
             "input": paths[prov["input"][i]], "line": int(prov["line"][i])} for i in range(len(langs))]


def all_stems(manifest: dict) -> list[str]:
    return [stem for cond in manifest["conditions"].values() for stems in cond["shards"].values() for stem in stems]


def test_build_writes_several_shards_per_split(both: Path) -> None:
    manifest = manifest_of(both)
    assert len(manifest["conditions"]["shared"]["shards"]["train"]) >= 3


def test_parquet_shards_load_in_datasets_and_equal_the_npy_shards(both: Path, tmp_path: Path) -> None:
    datasets = pytest.importorskip("datasets", reason="the optional 'datasets' package is not installed")
    manifest = manifest_of(both)
    for stem in all_stems(manifest):
        # Reference library: Hugging Face datasets' own Parquet loader.
        loaded = datasets.load_dataset("parquet", data_files=str(both / f"{stem}.parquet"), split="train",
                                       cache_dir=str(tmp_path / "hf"))
        assert loaded.to_list() == npy_rows(both, stem, manifest)


def test_parquet_shards_read_in_pandas_equal_the_npy_shards(both: Path) -> None:
    manifest = manifest_of(both)
    for stem in all_stems(manifest):
        frame = pd.read_parquet(both / f"{stem}.parquet")
        rows = [{"language": r.language, "ids": list(map(int, r.ids)), "input": r.input, "line": int(r.line)}
                for r in frame.itertuples()]
        assert rows == npy_rows(both, stem, manifest)


def test_parquet_shards_are_written_with_the_fixed_options_and_no_extra_metadata(both: Path) -> None:
    stem = manifest_of(both)["conditions"]["shared"]["shards"]["train"][0]
    meta = pq.ParquetFile(both / f"{stem}.parquet").metadata
    assert meta.metadata is None                  # no pandas or ARROW:schema key-value metadata
    column = meta.row_group(0).column(1)
    assert column.compression == "ZSTD"
    assert not column.is_stats_set
    assert meta.format_version == "2.6"


def test_parquet_shards_are_byte_identical_across_builds(tmp_path: Path) -> None:
    digests = []
    for name in ("a", "b"):
        (tmp_path / name).mkdir()
        recipe = write_corpus(tmp_path / name, kellhaven_lines("en", 40), kellhaven_lines("de", 40),
                              SHARDS.format(fmt="parquet"))
        manifest = build(recipe, tmp_path / name / "out").manifest
        digests.append({f["path"]: f["sha256"] for f in manifest["files"] if f["path"].endswith(".parquet")})
    assert digests[0] and digests[0] == digests[1]


def test_parquet_only_build_reads_back_like_the_npy_build(both: Path, tmp_path: Path) -> None:
    recipe = write_corpus(tmp_path, kellhaven_lines("en", 80), kellhaven_lines("de", 60), SHARDS.format(fmt="parquet"))
    build(recipe, tmp_path / "out")
    assert not list((tmp_path / "out").rglob("*.tokens.npy"))
    for split in ("train", "test"):
        parquet = open_shards(tmp_path / "out", "word-tagged", split)
        npy = open_shards(both, "word-tagged", split)
        assert parquet.token_stream().tolist() == npy.token_stream().tolist()
        assert [(t, i.tolist()) for t, i in parquet.sentences()] == [(t, i.tolist()) for t, i in npy.sentences()]


def concatenated(out: Path, condition: str, split: str, lang: int | None = None) -> np.ndarray:
    """Independent computation: np.load every shard file and concatenate (optionally only one
    language's sentences, sentence by sentence)."""
    parts = []
    for stem in manifest_of(out)["conditions"][condition]["shards"][split]:
        tokens = np.load(out / f"{stem}.tokens.npy")
        offsets = np.load(out / f"{stem}.offsets.npy")
        langs = np.load(out / f"{stem}.langs.npy")
        for i in range(len(langs)):
            if lang is None or langs[i] == lang:
                parts.append(tokens[offsets[i]:offsets[i + 1]])
    return np.concatenate(parts)


@pytest.mark.parametrize("length", [1, 7, 64, 500])
def test_blocks_equal_numpy_slices_of_the_concatenated_stream(both: Path, length: int) -> None:
    stream = concatenated(both, "shared", "train")
    blocks = list(open_shards(both, "shared", "train").blocks(length))
    assert len(blocks) == len(stream) // length
    for k, block in enumerate(blocks):
        assert block.tolist() == stream[k * length:(k + 1) * length].tolist()


def test_blocks_of_one_language_use_only_that_languages_sentences(both: Path) -> None:
    stream = concatenated(both, "word-tagged", "train", lang=1)
    blocks = list(open_shards(both, "word-tagged", "train").blocks(9, lang="de", drop_last=False))
    assert np.concatenate(blocks).tolist() == stream.tolist()
    assert len(blocks[-1]) == len(stream) % 9 or len(stream) % 9 == 0


def test_batches_stack_consecutive_blocks(both: Path) -> None:
    reader = open_shards(both, "shared", "train")
    batches = list(reader.batches(4, 10))
    stream = concatenated(both, "shared", "train")
    assert all(b.shape == (4, 10) for b in batches)
    assert np.concatenate([b.reshape(-1) for b in batches]).tolist() == stream[:len(batches) * 40].tolist()


def test_sentence_batches_pad_each_sentence_after_its_end(both: Path) -> None:
    reader = open_shards(both, "shared", "valid")
    sentences = [ids.tolist() for _, ids in reader.sentences()]
    rows = []
    for batch in reader.sentence_batches(3, pad_id=0):
        for ids, n in zip(batch.ids.tolist(), batch.lengths.tolist()):
            assert all(v == 0 for v in ids[n:])
            rows.append(ids[:n])
    assert rows == sentences


def test_reader_rejects_an_unknown_language(both: Path) -> None:
    with pytest.raises(BivocabError, match="no language 'fr'"):
        list(open_shards(both, "shared", "train").blocks(4, lang="fr"))


def test_torch_dataset_yields_the_reader_blocks_across_workers(both: Path) -> None:
    torch = pytest.importorskip("torch", reason="optional dependency torch is not installed (pip install torch)")
    expected = [b.tolist() for b in open_shards(both, "shared", "train").blocks(16)]
    dataset = torch_dataset(both, "shared", "train", length=16)
    single = [t.tolist() for t in dataset]
    assert single == expected
    loader = torch.utils.data.DataLoader(dataset, batch_size=None, num_workers=2)
    got = [t.tolist() for t in loader]
    assert sorted(got) == sorted(expected) and all(isinstance(t, list) for t in got)
    first = next(iter(dataset))
    assert first.dtype == torch.int64


def test_file_hashes_in_the_manifest_cover_the_parquet_shards(both: Path) -> None:
    manifest = manifest_of(both)
    for entry in manifest["files"]:
        if entry["path"].endswith(".parquet"):
            assert hashlib.sha256((both / entry["path"]).read_bytes()).hexdigest() == entry["sha256"]


def test_torch_adapter_without_torch_is_one_clear_error(both: Path, monkeypatch) -> None:
    import builtins

    real_import = builtins.__import__

    def no_torch(name, *args, **kwargs):
        if name == "torch" or name.startswith("torch."):
            raise ImportError("no torch")
        return real_import(name, *args, **kwargs)

    monkeypatch.delitem(__import__("sys").modules, "bivocab.torchdata", raising=False)
    monkeypatch.setattr(builtins, "__import__", no_torch)
    with pytest.raises(BivocabError, match=r"needs the optional package torch"):
        torch_dataset(both, "shared", "train", length=8)
