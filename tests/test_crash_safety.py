"""Crash safety: a build killed with SIGKILL at any point never leaves a build.json that lists
missing or truncated files; a rerun is byte-identical; --resume reuses hash-checked shards; a
second build into a busy directory is refused; a full or read-only disk gives a clear error."""

from __future__ import annotations

import builtins
import contextlib
import errno
import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Iterator

import pytest
from click.testing import CliRunner

from bivocab.build import build
from bivocab.cli import main
from bivocab.errors import CheckFailed, OutputError
from bivocab.manifest import INCOMPLETE, JOURNAL, MANIFEST, PAUSE_ENV, WORK
from bivocab.shards import open_shards
from bivocab.verify import verify

from corpus_factory import tree_bytes, write_corpus, write_recipe

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def project(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, bytes]]:
    """A corpus, a recipe with ~10 train shards, and the reference bytes of its build."""
    root = tmp_path_factory.mktemp("crash")
    write_corpus(root, sentences=600)
    recipe = write_recipe(root, max_tokens=1000)
    build(recipe, root / "reference")
    return root, tree_bytes(root / "reference")


@pytest.fixture
def out(project: tuple[Path, dict[str, bytes]]) -> Iterator[Path]:
    root, _ = project
    path = root / "out"
    yield path
    shutil.rmtree(path, ignore_errors=True)


@contextlib.contextmanager
def paused_build(recipe: Path, out: Path, point: str, *args: str) -> Iterator[subprocess.Popen]:
    """Run `bivocab build` in a subprocess until it pauses at ``point``; SIGKILL it on exit."""
    env = {**os.environ, PAUSE_ENV: point, "PYTHONPATH": str(REPO)}
    proc = subprocess.Popen([sys.executable, "-m", "bivocab", "build", str(recipe), "--out", str(out),
                             "--quiet", *args], env=env, stderr=subprocess.PIPE, text=True)
    try:
        line = proc.stderr.readline()
        assert line.startswith("paused at "), f"build did not pause at {point}: {line}{proc.stderr.read()}"
        yield proc
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
        proc.stderr.close()


def assert_manifest_tells_the_truth(out: Path) -> None:
    """If a build.json exists, every file it lists is on disk with its recorded size and sha256."""
    if not (out / MANIFEST).exists():
        return
    for entry in json.loads((out / MANIFEST).read_text())["files"]:
        data = (out / entry["path"]).read_bytes()
        assert len(data) == entry["bytes"] and hashlib.sha256(data).hexdigest() == entry["sha256"], entry["path"]


KILL_POINTS = [
    "stage:scan",                                   # pass 1 running, work files open
    "stage:shards",                                 # vocabularies built, no shard yet
    "write:*/shared/train/shard-00002.tokens.npy",  # mid-shard: its provenance is in place, tokens not renamed
    "write:*/fully-tagged/valid/shard-00000.langs.npy",
    "stage:vocab files",                            # every shard written
    "manifest",                                     # everything but build.json written
    "finish",                                       # build.json renamed, marker still there
]


@pytest.mark.parametrize("point", KILL_POINTS)
def test_killed_build_leaves_an_incomplete_directory_and_a_rerun_is_byte_identical(
        project: tuple[Path, dict[str, bytes]], out: Path, point: str) -> None:
    root, reference = project
    with paused_build(root / "recipe.toml", out, point):
        pass
    assert (out / INCOMPLETE).exists()
    assert_manifest_tells_the_truth(out)
    with pytest.raises(CheckFailed, match="incomplete build .the build that wrote it was interrupted"):
        verify(out)
    with pytest.raises(OutputError, match="incomplete build"):
        open_shards(out, "shared", "train")
    build(root / "recipe.toml", out)
    assert tree_bytes(out) == reference


def test_kill_while_rewriting_a_build_with_more_shards_leaves_no_stale_files(
        project: tuple[Path, dict[str, bytes]], out: Path) -> None:
    root, reference = project
    finer = write_recipe(root / "finer", max_tokens=300, en="../en/*.txt", de="../de/*.txt")
    build(finer, out)
    assert len(tree_bytes(out)) > len(reference)
    with paused_build(root / "recipe.toml", out, "write:*/shared/train/shard-00001.tokens.npy"):
        pass
    build(root / "recipe.toml", out)
    assert tree_bytes(out) == reference


def test_resume_reuses_the_completed_shards_without_rewriting_them(
        project: tuple[Path, dict[str, bytes]], out: Path) -> None:
    root, reference = project
    with paused_build(root / "recipe.toml", out, "write:*/provenance/train/shard-00004.npy"):
        pass
    done = sorted(p for p in out.rglob("train/shard-0000[0-3]*.npy"))
    assert len(done) == 4 * (1 + 3 * 3)  # shards 0..3: provenance + 3 conditions x 3 arrays
    before = {p: (p.stat().st_ino, p.stat().st_mtime_ns) for p in done}
    result = CliRunner().invoke(main, ["build", str(root / "recipe.toml"), "--out", str(out), "--resume"])
    assert result.exit_code == 0, result.output
    assert f"note: {out} held an incomplete build (interrupted or failed); it was resumed\n" in result.stderr
    # The valid and test shards (one each) are written before train's (smaller splits first).
    assert "resume: reused 6 of" in result.stderr
    assert {p: (p.stat().st_ino, p.stat().st_mtime_ns) for p in done} == before
    assert tree_bytes(out) == reference
    assert not (out / JOURNAL).exists()


def test_resume_rewrites_a_completed_shard_whose_file_was_damaged(
        project: tuple[Path, dict[str, bytes]], out: Path) -> None:
    root, reference = project
    with paused_build(root / "recipe.toml", out, "write:*/provenance/train/shard-00003.npy"):
        pass
    damaged = out / "word-tagged" / "train" / "shard-00001.tokens.npy"
    damaged.write_bytes(damaged.read_bytes()[:-2])
    result = build(root / "recipe.toml", out, resume=True)
    assert result.reused_shards == ("valid/shard-00000", "test/shard-00000", "train/shard-00000",
                                    "train/shard-00002")
    assert tree_bytes(out) == reference


def test_resume_after_a_recipe_change_reuses_nothing(project: tuple[Path, dict[str, bytes]], out: Path) -> None:
    root, _ = project
    with paused_build(root / "recipe.toml", out, "stage:vocab files"):
        pass
    changed = write_recipe(root / "changed", max_tokens=1000, en="../en/*.txt", de="../de/*.txt",
                           extra="[clean]\nlowercase = true\n")
    result = build(changed, out, resume=True)
    assert result.reused_shards == () and result.total_shards > 0
    assert verify(out, hashes_only=True).ok


def test_rerun_without_resume_rewrites_every_shard(project: tuple[Path, dict[str, bytes]], out: Path) -> None:
    root, reference = project
    with paused_build(root / "recipe.toml", out, "stage:vocab files"):
        pass
    result = build(root / "recipe.toml", out)
    assert result.reused_shards == () and result.was_incomplete
    assert tree_bytes(out) == reference
    assert not build(root / "recipe.toml", out).was_incomplete


def test_second_build_into_a_busy_directory_is_refused(project: tuple[Path, dict[str, bytes]], out: Path) -> None:
    root, reference = project
    with paused_build(root / "recipe.toml", out, "stage:shards"):
        with pytest.raises(OutputError, match="another bivocab build is writing to this directory"):
            build(root / "recipe.toml", out)
        result = CliRunner().invoke(main, ["build", str(root / "recipe.toml"), "--out", str(out)])
        assert result.exit_code == 2 and result.stderr.count("\n") == 1
        with pytest.raises(CheckFailed, match="a build is writing to it now"):
            verify(out)
    # The OS released the lock of the killed process.
    build(root / "recipe.toml", out)
    assert tree_bytes(out) == reference


def test_every_output_file_is_written_under_a_temporary_name(
        project: tuple[Path, dict[str, bytes]], out: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    root, _ = project
    opened: list[str] = []
    real_open = builtins.open

    def recording_open(file, mode="r", *args, **kwargs):
        if any(c in mode for c in "wax+"):
            opened.append(os.path.relpath(os.fspath(file), out))
        return real_open(file, mode, *args, **kwargs)

    monkeypatch.setattr(builtins, "open", recording_open)
    build(root / "recipe.toml", out)
    monkeypatch.undo()
    direct = [p for p in opened if not Path(p).name.startswith(".") or ".tmp-" not in Path(p).name]
    assert {p for p in direct if not p.startswith(WORK)} <= {JOURNAL, ".bivocab.lock"}
    assert len(opened) > len(json.loads((out / MANIFEST).read_text())["files"])


class _FullDisk:
    """A file whose writes fail with ENOSPC once ``budget`` bytes are written."""

    def __init__(self, handle, budget: list[int]):
        self._handle, self._budget = handle, budget

    def write(self, data) -> int:
        self._budget[0] -= len(data)
        if self._budget[0] < 0:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return self._handle.write(data)

    def __getattr__(self, name):
        return getattr(self._handle, name)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self._handle.close()


def test_disk_full_gives_one_clear_error_and_leaves_no_partial_file(
        project: tuple[Path, dict[str, bytes]], out: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import bivocab.manifest

    root, _ = project
    budget = [60_000]
    real_open = builtins.open
    monkeypatch.setattr(bivocab.manifest, "open", lambda f, mode="r", *a, **k: _FullDisk(real_open(f, mode, *a, **k), budget),
                        raising=False)
    with pytest.raises(OutputError, match=r"cannot write: No space left on device \(disk full\)$") as caught:
        build(root / "recipe.toml", out)
    assert str(out) in str(caught.value)
    assert not list(out.rglob("*.tmp-*")) and not (out / MANIFEST).exists() and (out / INCOMPLETE).exists()


@contextlib.contextmanager
def tmpfs(path: Path, options: str) -> Iterator[Path]:
    path.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(path)], capture_output=True)
    if done.returncode:
        pytest.skip(f"cannot mount a tmpfs here: {done.stderr.decode().strip()}")
    try:
        yield path
    finally:
        subprocess.run(["umount", str(path)], check=True)


def test_build_on_a_really_full_disk_fails_cleanly(project: tuple[Path, dict[str, bytes]], tmp_path: Path) -> None:
    root, _ = project
    with tmpfs(tmp_path / "small", "size=64k") as disk:
        result = CliRunner().invoke(main, ["build", str(root / "recipe.toml"), "--out", str(disk / "out")])
        assert result.exit_code == 2, result.output
        assert result.stderr.count("\n") == 1 and "(disk full)" in result.stderr
        assert not list((disk / "out").rglob("*.tmp-*")) and not (disk / "out" / MANIFEST).exists()
        assert not (disk / "out" / WORK).exists()


def test_build_into_a_read_only_directory_fails_cleanly(project: tuple[Path, dict[str, bytes]], tmp_path: Path) -> None:
    root, _ = project
    with tmpfs(tmp_path / "ro", "ro,size=64k") as disk:
        result = CliRunner().invoke(main, ["build", str(root / "recipe.toml"), "--out", str(disk / "out")])
        assert result.exit_code == 2
        assert result.stderr == f"error: {disk / 'out'}: cannot create output directory: Read-only file system\n"


def test_out_path_that_is_a_file_is_refused(project: tuple[Path, dict[str, bytes]], tmp_path: Path) -> None:
    root, _ = project
    (tmp_path / "taken").write_text("x")
    with pytest.raises(OutputError, match="exists and is not a directory"):
        build(root / "recipe.toml", tmp_path / "taken")


def test_a_killed_build_holds_no_lock(project: tuple[Path, dict[str, bytes]], out: Path) -> None:
    root, _ = project
    with paused_build(root / "recipe.toml", out, "stage:scan") as proc:
        pass
    deadline = time.monotonic() + 10
    while proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)
    with pytest.raises(CheckFailed, match="interrupted or failed"):
        verify(out)


def test_resume_reuses_parquet_shards_too(project: tuple[Path, dict[str, bytes]], tmp_path: Path) -> None:
    root, _ = project
    recipe = write_recipe(root / "pq", max_tokens=1000, en="../en/*.txt", de="../de/*.txt")
    recipe.write_text(recipe.read_text().replace("[shards]\n", '[shards]\nformat = "npy+parquet"\n'))
    build(recipe, tmp_path / "reference")
    out = tmp_path / "out"
    with paused_build(recipe, out, "write:*/provenance/train/shard-00002.npy"):
        pass
    assert (out / "shared" / "train" / "shard-00001.parquet").exists()
    result = build(recipe, out, resume=True)
    assert result.reused_shards == ("valid/shard-00000", "test/shard-00000", "train/shard-00000",
                                    "train/shard-00001")
    assert tree_bytes(out) == tree_bytes(tmp_path / "reference")
    assert verify(out, hashes_only=True).ok


@pytest.mark.parametrize("jobs", [1, 2])
def test_every_output_file_is_synced_before_build_json_is_written(
        project: tuple[Path, dict[str, bytes]], out: Path, monkeypatch: pytest.MonkeyPatch, jobs: int) -> None:
    # Files are renamed into place without an fsync each; one pass syncs them all before the
    # index that vouches for them exists (common practice: fsync before publishing a manifest).
    import importlib

    build_module = importlib.import_module("bivocab.build")
    root, reference = project
    synced: list[tuple[str, bool]] = []
    real_sync = build_module.sync_files

    def recording_sync(paths):
        paths = list(paths)
        synced.extend((os.path.relpath(p, out), (out / MANIFEST).exists()) for p in paths)
        real_sync(paths)

    monkeypatch.setattr(build_module, "sync_files", recording_sync)
    build(root / "recipe.toml", out, jobs=jobs)
    listed = {entry["path"] for entry in json.loads((out / MANIFEST).read_text())["files"]}
    assert {path for path, _ in synced} == listed
    assert not any(manifest_existed for _, manifest_existed in synced)
    assert tree_bytes(out) == reference


def test_files_are_synced_early_in_the_background_while_the_build_goes_on(
        project: tuple[Path, dict[str, bytes]], out: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # Each file is handed to a writeback thread once it is in place (the disk works while the
    # build computes); the final pass above still syncs every file before build.json.
    import bivocab.manifest

    early: list[str] = []
    real = bivocab.manifest._schedule_early_sync
    monkeypatch.setattr(bivocab.manifest, "_schedule_early_sync", lambda path: (early.append(path), real(path)))
    root, reference = project
    build(root / "recipe.toml", out, jobs=2)
    listed = {str((out / entry["path"]).resolve()) for entry in json.loads((out / MANIFEST).read_text())["files"]}
    assert listed <= {str(Path(p).resolve()) for p in early} | {str((out / MANIFEST).resolve())}
    assert bivocab.manifest._early_syncs is None   # the thread is gone once the build returns
    assert tree_bytes(out) == reference
