"""`bivocab verify`: re-hash or rebuild a build from its build.json and report every difference."""

from __future__ import annotations

import hashlib
import importlib
import json
import os
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from bivocab.build import build
from bivocab.cli import main
from bivocab.errors import CheckFailed, OutputError
from bivocab.manifest import INCOMPLETE, MANIFEST, array_digest, content_sha256
from bivocab.verify import (CHANGED_ON_DISK, DIFFERENT, EXTRA_ON_DISK, IDENTICAL, MISSING_ON_DISK,
                            SAME_CONTENT, first_difference, verify)

from corpus_factory import write_corpus, write_recipe

build_module = importlib.import_module("bivocab.build")  # the package attribute `build` is the function


@pytest.fixture(scope="module")
def built(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A pristine build; tests that alter it work on a copy."""
    root = tmp_path_factory.mktemp("verify")
    write_corpus(root, sentences=150)
    build(write_recipe(root, max_tokens=800), root / "out")
    return root / "out"


@pytest.fixture
def copy(built: Path, tmp_path: Path) -> Path:
    """A copy of the build at the same depth below a copy of its corpus (recipe_file still resolves)."""
    import shutil

    shutil.copytree(built.parent, tmp_path / "project", ignore=shutil.ignore_patterns(".bivocab.lock"))
    return tmp_path / "project" / "out"


def bad(report) -> dict[str, tuple[str, str]]:
    return {c.path: (c.status, c.detail) for c in (*report.inputs, *report.files) if c.status != IDENTICAL}


def first_shard(out: Path, suffix: str = "tokens") -> str:
    manifest = json.loads((out / MANIFEST).read_text())
    return f"{manifest['conditions']['shared']['shards']['train'][0]}.{suffix}.npy"


def test_fresh_build_verifies_with_exit_0(built: Path) -> None:
    result = CliRunner().invoke(main, ["verify", str(built)])
    assert result.exit_code == 0, result.output
    assert "ok: the build is verified" in result.output


def test_hashes_only_passes_on_an_untouched_build(built: Path) -> None:
    report = verify(built, hashes_only=True)
    assert report.ok and report.mode == "hashes"
    assert report.counts == {IDENTICAL: len(json.loads((built / MANIFEST).read_text())["files"])}


def test_hashes_only_finds_a_flipped_byte_and_says_the_content_changed(copy: Path) -> None:
    path = first_shard(copy)
    data = bytearray((copy / path).read_bytes())
    data[-1] ^= 0xFF
    (copy / path).write_bytes(bytes(data))
    report = verify(copy, hashes_only=True)
    assert bad(report) == {path: (CHANGED_ON_DISK, "sha256 differs; content changed")}


def test_hashes_only_reports_missing_and_extra_files(copy: Path) -> None:
    path = first_shard(copy, "offsets")
    (copy / path).unlink()
    (copy / "shared" / "notes.txt").write_text("mine")
    assert bad(verify(copy, hashes_only=True)) == {path: (MISSING_ON_DISK, ""), "shared/notes.txt": (EXTRA_ON_DISK, "")}


def test_changed_input_is_reported_by_file_before_any_rebuild(copy: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    with open(copy.parent / "de" / "part.txt", "a", encoding="utf-8") as handle:
        handle.write("Der Sturm kommt.\n")
    monkeypatch.setattr(build_module, "build", lambda *a, **k: pytest.fail("rebuilt despite a changed input"))
    report = verify(copy)
    assert not report.ok and report.files == ()
    assert [(c.path, c.status) for c in report.inputs if c.status != IDENTICAL] == [("de/part.txt", "changed")]
    assert "de/part.txt" in report.failure_line()


def test_cli_prints_the_table_and_one_error_line_with_exit_1(copy: Path) -> None:
    (copy.parent / "en" / "part.txt").unlink()
    result = CliRunner().invoke(main, ["verify", str(copy)])
    assert result.exit_code == 1
    assert "input en/part.txt  missing" in result.stdout
    assert result.stderr.count("\n") == 1 and result.stderr.startswith("error: ")


def _npy_version_2(path: Path, array: np.ndarray) -> None:
    """Write an npy file in format version 2.0: a different header, the same array."""
    from bivocab.manifest import atomic_open

    with atomic_open(path) as handle:
        np.lib.format.write_array(handle, np.ascontiguousarray(array), version=(2, 0), allow_pickle=False)


def test_container_change_is_told_apart_from_a_data_change(copy: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # The rebuild writes every npy file with another header version (as a library upgrade might),
    # and adds 1 to one token of one shard (as a code change might).
    changed = first_shard(copy)

    def write(path: Path, array: np.ndarray, same_as: Path | None = None) -> None:
        if path.as_posix().endswith(changed):
            array = array.copy()
            array[0] += 1
        _npy_version_2(path, array)

    import bivocab.shards

    monkeypatch.setattr(build_module, "write_npy", write)    # provenance
    monkeypatch.setattr(bivocab.shards, "write_npy", write)  # condition shards
    report = verify(copy)
    problems = bad(report)
    assert problems.pop(changed) == (DIFFERENT, f"content differs; 1 of {np.load(copy / changed).size:,} "
                                                f"elements differ, first at index 0 "
                                                f"({np.load(copy / changed)[0]} vs {np.load(copy / changed)[0] + 1})")
    assert problems and all(status == DIFFERENT and detail == SAME_CONTENT for status, detail in problems.values())
    assert not report.ok


def test_only_build_json_is_enough_to_verify(copy: Path) -> None:
    # The CI use: only the recipe, the inputs and build.json are committed, not the shards.
    for child in copy.iterdir():
        if child.is_dir():
            import shutil

            shutil.rmtree(child)
    report = verify(copy)
    assert report.ok, bad(report)
    assert any("no output files on disk" in n for n in report.notes)


def test_environment_difference_is_a_warning_naming_the_library(copy: Path) -> None:
    manifest = json.loads((copy / MANIFEST).read_text())
    manifest["environment"]["numpy"] = "1.0.0"
    (copy / MANIFEST).write_text(json.dumps(manifest))
    report = verify(copy, hashes_only=True)
    assert report.ok
    assert len(report.warnings) == 1 and f"numpy 1.0.0 (build) vs {np.__version__} (now)" in report.warnings[0]


def test_incomplete_directory_fails_with_a_clear_message(copy: Path) -> None:
    (copy / INCOMPLETE).write_text("tiny\n")
    with pytest.raises(CheckFailed, match="incomplete build .the build that wrote it was interrupted"):
        verify(copy)


def test_a_directory_without_build_json_is_not_a_build(tmp_path: Path) -> None:
    with pytest.raises(OutputError, match="no build.json: not a bivocab build directory"):
        verify(tmp_path)


def test_manifest_keys_that_differ_are_named(copy: Path) -> None:
    manifest = json.loads((copy / MANIFEST).read_text())
    manifest["languages"]["en"]["tokens"] += 1
    (copy / MANIFEST).write_text(json.dumps(manifest))
    assert bad(verify(copy)) == {MANIFEST: (DIFFERENT, "keys differ: languages")}


def test_content_digest_ignores_integer_width_but_not_values() -> None:
    ids = np.array([3, 1, 4, 1, 5], dtype=np.uint16)
    assert array_digest(ids) == array_digest(ids.astype(np.uint32))
    assert array_digest(ids) != array_digest(ids[::-1])


def test_content_digest_hashes_integers_in_the_narrowest_width_holding_them() -> None:
    # Scheme 2: the header names the width, then the little-endian values (sha256 from hashlib,
    # the Python standard library's FIPS 180-4 implementation).
    ids = np.array([70000, 1, 2], dtype=np.int64)
    assert array_digest(ids) == hashlib.sha256(b"<u4 (3,)\n" + ids.astype("<u4").tobytes()).hexdigest()
    small = np.array([300, 0], dtype=np.uint32)
    assert array_digest(small) == hashlib.sha256(b"<u2 (2,)\n" + small.astype("<u2").tobytes()).hexdigest()
    signed = np.array([-1, 127], dtype=np.int64)
    assert array_digest(signed) == hashlib.sha256(b"|i1 (2,)\n" + signed.astype("i1").tobytes()).hexdigest()
    assert array_digest(np.array([200, 3], np.uint8)) == array_digest(np.array([200, 3], np.int16))
    # Scheme 1 (builds before build.json named a scheme) widened everything to int64.
    assert array_digest(ids, 1) == hashlib.sha256(b"<i8 (3,)\n" + ids.astype("<i8").tobytes()).hexdigest()
    assert array_digest(ids, 1) != array_digest(ids)


def _as_scheme_1(out: Path) -> None:
    """Rewrite build.json as a build that predates content digest scheme 2 would have written it."""
    manifest = json.loads((out / MANIFEST).read_text())
    assert manifest.pop("content_digest") == 2
    for record in manifest["files"]:
        if "content_sha256" in record:
            record["content_sha256"] = content_sha256(out / record["path"], 1)
    (out / MANIFEST).write_text(json.dumps(manifest))


def test_a_build_recorded_with_the_older_content_digests_still_verifies(copy: Path,
                                                                       monkeypatch: pytest.MonkeyPatch) -> None:
    _as_scheme_1(copy)
    assert verify(copy, hashes_only=True).ok
    shard = copy / first_shard(copy)
    _npy_version_2(shard, np.load(shard))
    assert bad(verify(copy, hashes_only=True)) == {first_shard(copy): (CHANGED_ON_DISK,
                                                                        "sha256 differs; content intact")}
    _npy_version_2(shard, np.load(shard) + 1)
    assert bad(verify(copy, hashes_only=True))[first_shard(copy)][1].endswith("content changed")

    changed = first_shard(copy, "offsets")

    def write(path: Path, array: np.ndarray, same_as: Path | None = None) -> None:
        _npy_version_2(path, array + 1 if path.as_posix().endswith(changed) else array)

    import bivocab.shards

    monkeypatch.setattr(build_module, "write_npy", write)
    monkeypatch.setattr(bivocab.shards, "write_npy", write)
    problems = bad(verify(copy))
    assert problems.pop(changed)[1].startswith("content differs")
    assert problems and all(detail == SAME_CONTENT for _, detail in problems.values()), problems


def test_parquet_content_digest_ignores_writer_metadata(tmp_path: Path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.table({"lang": pa.array([0, 1, 1], pa.uint8()),
                      "ids": pa.array([[5, 6], [7], [8, 9, 10]], pa.list_(pa.uint16()))})
    pq.write_table(table, tmp_path / "a.parquet", compression="snappy")
    pq.write_table(table.replace_schema_metadata({"writer": "other"}), tmp_path / "b.parquet",
                   compression="zstd", write_statistics=False)
    pq.write_table(table.set_column(1, "ids", pa.array([[5, 6], [7], [8, 9, 11]], pa.list_(pa.uint16()))),
                   tmp_path / "c.parquet")
    assert (tmp_path / "a.parquet").read_bytes() != (tmp_path / "b.parquet").read_bytes()
    assert content_sha256(tmp_path / "a.parquet") == content_sha256(tmp_path / "b.parquet")
    assert content_sha256(tmp_path / "a.parquet") != content_sha256(tmp_path / "c.parquet")


def test_first_difference_of_text_files_names_the_line(tmp_path: Path) -> None:
    (tmp_path / "a.tsv").write_text("id\ttoken\n0\t<pad>\n1\tKai\n")
    (tmp_path / "b.tsv").write_text("id\ttoken\n0\t<pad>\n1\tkai\n")
    assert first_difference(tmp_path / "a.tsv", tmp_path / "b.tsv") == "first difference at line 3"


def test_json_report_lists_every_file(built: Path) -> None:
    result = CliRunner().invoke(main, ["verify", str(built), "--hashes-only", "--json"])
    data = json.loads(result.stdout)
    assert result.exit_code == 0 and data["ok"] is True
    assert len(data["files"]) == len(json.loads((built / MANIFEST).read_text())["files"])


def test_recipe_glob_matching_new_files_is_noted(copy: Path) -> None:
    (copy.parent / "en" / "part9.txt").write_text("The tide is high.\n")
    report = verify(copy)
    assert report.ok  # the recorded file list is what is verified
    assert any("also match 1 file(s)" in n and "en/part9.txt" in n for n in report.notes)


def test_verify_does_not_touch_the_build_directory(built: Path) -> None:
    before = {p: p.stat().st_mtime_ns for p in built.rglob("*")}
    verify(built)
    assert {p: p.stat().st_mtime_ns for p in built.rglob("*")} == before
    assert not any(name.startswith(".bivocab-verify") for name in os.listdir(built))


def test_rebuild_goes_to_the_scratch_directory_and_is_removed(built: Path, tmp_path: Path,
                                                              monkeypatch: pytest.MonkeyPatch) -> None:
    seen: list[Path] = []
    real = build_module.build
    monkeypatch.setattr(build_module, "build", lambda recipe, out, **kw: seen.append(Path(out)) or real(recipe, out, **kw))
    assert verify(built, scratch=tmp_path).ok
    assert seen and seen[0].parent.parent == tmp_path
    assert list(tmp_path.iterdir()) == []


def test_audit_and_probe_outputs_in_the_build_directory_are_not_extra_files(copy: Path) -> None:
    from bivocab.audit import AUDIT_DIR
    from bivocab.manifest import ANALYSIS_DIRS
    from bivocab.probe import PROBE_DIR

    assert set(ANALYSIS_DIRS) == {AUDIT_DIR, PROBE_DIR}
    for name in ANALYSIS_DIRS:
        (copy / name).mkdir()
        (copy / name / "summary.json").write_text("{}")
    assert verify(copy, hashes_only=True).ok


def test_an_unknown_content_digest_scheme_is_a_one_line_error(copy: Path) -> None:
    manifest = json.loads((copy / MANIFEST).read_text())
    manifest["content_digest"] = 3
    (copy / MANIFEST).write_text(json.dumps(manifest))
    result = CliRunner().invoke(main, ["verify", str(copy), "--hashes-only"])
    assert result.exit_code != 0 and "content_digest 3 is not a scheme" in result.output
    assert result.output.count("\n") == 1 and "Traceback" not in result.output
