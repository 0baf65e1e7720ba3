"""Resuming an interrupted build: a journal of the shards a build has completed, with hashes.

After every shard (all of its files renamed into place) the build appends one JSON line to
``DIR/.bivocab-journal.jsonl``; the first line holds the build's fingerprint (resolved recipe,
input hashes, library versions and bivocab's own source).  ``build --resume`` reuses a shard
only when the fingerprint is unchanged, this run encodes with the same look-up tables, special
ids and subword models as the shard was encoded with, and every file of the shard still has its
recorded size and sha256; everything else is written again.  A torn last line (a kill mid-append) is ignored.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import threading
from pathlib import Path
from typing import Any

from .manifest import JOURNAL, canonical_json, environment, file_record, sha256_file, write_error

_SOURCE_DIR = Path(__file__).resolve().parent


def code_digest() -> str:
    """sha256 over bivocab's own source files: a development change voids resumable shards
    even when the version number stays the same."""
    digest = hashlib.sha256()
    for path in sorted(_SOURCE_DIR.glob("*.py")):
        digest.update(path.name.encode("utf-8") + b"\0" + path.read_bytes() + b"\0")
    return digest.hexdigest()


def build_fingerprint(resolved_recipe: dict[str, Any], input_hashes: dict[str, str]) -> str:
    """Everything that determines a build's bytes (DESIGN.md section 6), as one digest."""
    data = {"recipe": resolved_recipe, "inputs": input_hashes, "environment": environment(),
            "code": code_digest()}
    return hashlib.sha256(canonical_json(data).encode("utf-8")).hexdigest()


class ShardJournal:
    """Records completed shards of the running build and finds reusable ones of an interrupted one."""

    def __init__(self, out: Path, resume: bool):
        self.path = out / JOURNAL
        self.out = out
        self.resume = resume
        self.previous: dict[str, dict[str, Any]] = {}
        self.previous_fingerprint: str | None = None
        self.vocabularies = ""   # digest of this run's vocabularies, set by bind_vocabularies
        self.reused: list[str] = []
        self.written: list[str] = []
        # build.json "files" entries of the shards of this build, hashed once when journaled
        self.records: dict[str, dict[str, Any]] = {}
        self._lock = threading.Lock()   # shards are recorded by the threads that wrote them
        self._read_previous()

    def _read_previous(self) -> None:
        try:
            lines = self.path.read_text(encoding="utf-8").splitlines()
        except (OSError, UnicodeDecodeError):
            return
        for number, line in enumerate(lines):
            try:
                entry = json.loads(line)
            except ValueError:
                break  # torn by a kill mid-append: nothing after it was completed
            if number == 0:
                self.previous_fingerprint = entry.get("fingerprint")
            elif isinstance(entry, dict) and "shard" in entry:
                self.previous[entry["shard"]] = entry

    def known_paths(self) -> set[str]:
        """Every file a previous (interrupted) build recorded: candidates for stale removal."""
        return {f["path"] for entry in self.previous.values() for f in entry.get("files", [])}

    def begin(self, fingerprint: str) -> None:
        """Start this build's journal; keep the old records only for a resume of the same build."""
        if not (self.resume and fingerprint == self.previous_fingerprint):
            self.previous = {}
        try:
            with open(self.path, "w", encoding="utf-8") as handle:
                handle.write(json.dumps({"fingerprint": fingerprint}) + "\n")
                for entry in self.previous.values():
                    handle.write(json.dumps(entry, sort_keys=True) + "\n")
                handle.flush()
                os.fsync(handle.fileno())
        except OSError as exc:
            raise write_error(self.path, exc) from None

    def bind_vocabularies(self, texts: list[bytes]) -> None:
        """Record what this run encodes with (each condition's look-up tables and special ids,
        subword models): a shard encoded with anything else is not reused, even if the
        fingerprint matched."""
        digest = hashlib.sha256()
        for text in texts:
            digest.update(hashlib.sha256(text).digest())
        self.vocabularies = digest.hexdigest()

    def reusable(self, shard: str, paths: list[str]) -> dict[str, Any] | None:
        """The recorded statistics of ``shard`` if every one of its files is intact, else None."""
        entry = self.previous.get(shard)
        if entry is None or entry.get("vocabularies") != self.vocabularies \
                or sorted(f["path"] for f in entry["files"]) != sorted(paths):
            return None
        for record in entry["files"]:
            full = self.out / record["path"]
            try:
                if full.stat().st_size != record["bytes"] or sha256_file(full) != record["sha256"]:
                    return None
            except OSError:
                return None
        self.reused.append(shard)
        self.records.update({f["path"]: f for f in entry["files"]})
        return entry["stats"]

    def record(self, shard: str, paths: list[str], stats: dict[str, Any]) -> None:
        """Append a completed shard (its files are already renamed into place).  The line is not
        synced to disk: a line that a power cut loses or tears only makes a resume write that
        shard again (a torn line ends the journal; a listed shard is hash-checked before reuse),
        and a sync per shard would hold up the thread that writes shards."""
        files = [file_record(self.out, p) for p in paths]
        line = json.dumps({"shard": shard, "files": files, "stats": stats, "vocabularies": self.vocabularies},
                          sort_keys=True) + "\n"
        with self._lock:
            try:
                with open(self.path, "a", encoding="utf-8") as handle:
                    handle.write(line)
            except OSError as exc:
                raise write_error(self.path, exc) from None
            self.written.append(shard)
            self.records.update({f["path"]: f for f in files})

    def remove(self) -> None:
        with contextlib.suppress(FileNotFoundError):
            self.path.unlink()
