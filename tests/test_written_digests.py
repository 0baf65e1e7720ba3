"""The digests in build.json and the resume journal are taken while the files are written;
they must equal the digests of the files read back from disk."""

from __future__ import annotations

import hashlib
import io
import json
from pathlib import Path

import numpy as np
import pytest

import bivocab
from bivocab import manifest
from bivocab.manifest import atomic_open, content_sha256, file_record, sha256_file
from bivocab.shards import write_npy

from conftest import write_recipe


def _counting(monkeypatch, name: str) -> list[Path]:
    calls: list[Path] = []
    original = getattr(manifest, name)

    def counted(path: Path):
        if path.suffix in (".npy", ".parquet"):   # (the recipe itself is hashed by reading it)
            calls.append(path)
        return original(path)

    monkeypatch.setattr(manifest, name, counted)
    return calls


def test_build_records_digests_equal_to_the_files_read_back(tiny: Path, monkeypatch) -> None:
    write_recipe(tiny, '[shards]\nformat = "npy+parquet"\nmax_tokens = 1500\n')
    hashed, decoded = _counting(monkeypatch, "sha256_file"), _counting(monkeypatch, "content_sha256")
    bivocab.build(tiny / "recipe.toml", tiny / "out")
    assert hashed == [] and decoded == []  # every digest came from the data as it was written
    monkeypatch.undo()
    files = json.loads((tiny / "out" / "build.json").read_text())["files"]
    assert sum(f["path"].endswith(".parquet") for f in files) > 3  # several shards per split
    for record in files:
        full = tiny / "out" / record["path"]
        assert record["sha256"] == sha256_file(full), record["path"]
        assert record["bytes"] == full.stat().st_size
        assert record.get("content_sha256") == content_sha256(full), record["path"]


def test_hashing_writer_digest_equals_hashlib_of_the_file(tmp_path: Path) -> None:
    path = tmp_path / "a.bin"
    with atomic_open(path) as handle:
        handle.write(b"harbour")
        handle.write(memoryview(np.arange(5, dtype=np.int32)))
    expected = hashlib.sha256(path.read_bytes()).hexdigest()  # Python's hashlib as the reference
    assert file_record(tmp_path, "a.bin") == {"path": "a.bin", "sha256": expected, "bytes": 27}


def test_file_changed_after_writing_is_read_again(tmp_path: Path) -> None:
    path = tmp_path / "x.npy"
    write_npy(path, np.array([1, 2, 3], np.uint16))
    np.save(path, np.array([4, 5, 6, 7], np.uint32))  # replaced behind the writer's back
    record = file_record(tmp_path, "x.npy")
    assert record["sha256"] == sha256_file(path)
    assert record["content_sha256"] == content_sha256(path)


@pytest.mark.parametrize("array", [np.arange(10, dtype=np.uint16), np.zeros(0, np.int64), np.arange(7, dtype=np.uint8),
                                   np.arange(70_000, dtype=np.uint32),
                                   np.array([(1, 5), (2, 7)], dtype=[("input", "<u4"), ("line", "<i8")])])
def test_write_npy_writes_the_bytes_of_numpy_save(array: np.ndarray, tmp_path: Path) -> None:
    # Reference: numpy.save itself (the NPY format of numpy.lib.format).
    expected = io.BytesIO()
    np.save(expected, array, allow_pickle=False)
    write_npy(tmp_path / "a.npy", array)
    assert (tmp_path / "a.npy").read_bytes() == expected.getvalue()


def test_a_file_written_as_a_copy_takes_the_digests_of_its_twin(tmp_path: Path) -> None:
    # Conditions that share a shard layout write the same offsets and langs arrays: the later
    # files take the first one's digests, which must be those of their own bytes.
    offsets = np.cumsum(np.arange(50, dtype=np.int64))
    write_npy(tmp_path / "a.npy", offsets)
    write_npy(tmp_path / "b.npy", offsets, same_as=tmp_path / "a.npy")
    record = file_record(tmp_path, "b.npy")
    assert record["sha256"] == sha256_file(tmp_path / "b.npy")   # hashlib of the bytes read back
    assert record["content_sha256"] == content_sha256(tmp_path / "b.npy")
    with pytest.raises(RuntimeError, match="size differs"):
        write_npy(tmp_path / "c.npy", offsets[:-1], same_as=tmp_path / "a.npy")
    assert not (tmp_path / "c.npy").exists()
