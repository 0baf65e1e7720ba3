"""Same recipe + same inputs => byte-identical build directory, whatever --jobs is."""

from __future__ import annotations

from pathlib import Path

import bivocab


def tree_bytes(root: Path) -> dict[str, bytes]:
    return {str(p.relative_to(root)): p.read_bytes() for p in sorted(root.rglob("*"))
            if p.is_file() and p.name != ".bivocab.lock"}


def test_two_builds_are_byte_identical(tiny):
    bivocab.build(tiny / "recipe.toml", tiny / "a")
    bivocab.build(tiny / "recipe.toml", tiny / "b")
    assert tree_bytes(tiny / "a") == tree_bytes(tiny / "b")


def test_one_and_two_jobs_give_the_same_bytes(tiny, monkeypatch):
    import bivocab.sources
    monkeypatch.setattr(bivocab.sources, "BLOCK_BYTES", 2048)  # many blocks, so jobs really interleave
    bivocab.build(tiny / "recipe.toml", tiny / "a", jobs=1)
    bivocab.build(tiny / "recipe.toml", tiny / "b", jobs=2)
    assert tree_bytes(tiny / "a") == tree_bytes(tiny / "b")


def test_rebuilding_into_the_same_directory_replaces_it_identically(tiny):
    bivocab.build(tiny / "recipe.toml", tiny / "a")
    first = tree_bytes(tiny / "a")
    bivocab.build(tiny / "recipe.toml", tiny / "a")
    assert tree_bytes(tiny / "a") == first
