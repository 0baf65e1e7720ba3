"""Verifying a build: re-hash its files against build.json, or rebuild it from the recipe and
inputs recorded there and compare every file, telling changed data from a changed container.

The reference is always ``build.json``: a CI job that keeps only the recipe and build.json
(not the shards) can verify too.  Output files that are on disk are checked against their
records as well, and serve to locate the first difference of a file that changed.
"""

from __future__ import annotations

import json
import os
import tempfile
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np

from .errors import CheckFailed, InputError, OutputError
from .manifest import (ANALYSIS_DIRS, CONTENT_SCHEME, CONTROL_FILES, INCOMPLETE, MANIFEST, canonical_json,
                       content_scheme, content_sha256, environment, incomplete_reason, is_temp_file, read_manifest,
                       sha256_file)
from .recipe import Recipe, recipe_from_manifest, resolve_recipe_inputs
from .sources import file_sha256

IDENTICAL = "identical"
MISSING = "missing"                  # listed in build.json, not produced by the rebuild
EXTRA = "extra"                      # produced by the rebuild, not listed in build.json
DIFFERENT = "different bytes"        # both exist, bytes differ (detail: same content or not)
MISSING_ON_DISK = "missing on disk"
CHANGED_ON_DISK = "changed on disk"  # the file in DIR no longer matches build.json
EXTRA_ON_DISK = "extra on disk"
SAME_CONTENT = "same content, container differs"
# build.json keys that legitimately differ between a build and its rebuild elsewhere.
# "content_digest" names how the content digests were computed, not what was built.
_UNCOMPARED_KEYS = {"environment", "recipe_file", "recipe_sha256", "files", "content_digest"}


@dataclass(frozen=True)
class FileCheck:
    path: str
    status: str
    detail: str = ""


@dataclass(frozen=True)
class InputCheck:
    path: str
    status: str                      # identical | missing | changed
    detail: str = ""


@dataclass(frozen=True)
class VerifyReport:
    out: str
    mode: str                        # "hashes" (re-hash only) or "rebuild"
    inputs: tuple[InputCheck, ...] = ()
    files: tuple[FileCheck, ...] = ()
    warnings: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    counts: dict[str, int] = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return all(c.status == IDENTICAL for c in self.inputs) and all(c.status == IDENTICAL for c in self.files)

    def failure_line(self) -> str:
        bad_inputs = [c for c in self.inputs if c.status != IDENTICAL]
        if bad_inputs:
            return (f"{self.out}: {len(bad_inputs)} input file(s) no longer match build.json "
                    f"(first: {bad_inputs[0].path}, {bad_inputs[0].status}); not rebuilt")
        bad = [c for c in self.files if c.status != IDENTICAL]
        same = sum(1 for c in bad if c.detail == SAME_CONTENT)
        return (f"{self.out}: verification failed: {len(bad)} file(s) differ"
                + (f" ({same} with the same content in a different container)" if same else ""))


Progress = Callable[[str], None]


def _quiet(_: str) -> None:
    pass


def verify(out: str | os.PathLike[str], hashes_only: bool = False, jobs: int = 1,
           progress: Progress = _quiet, scratch: str | os.PathLike[str] | None = None) -> VerifyReport:
    """Verify the build in ``out``. With ``hashes_only`` re-hash the files on disk against
    build.json; otherwise check the inputs' sha256 (stopping there if any changed), rebuild
    into a temporary directory (inside ``scratch`` if given) and compare every file. Raises
    :class:`CheckFailed` for an incomplete directory, :class:`OutputError` when ``out`` is not a build."""
    out = Path(out)
    reason = incomplete_reason(out)
    if reason:
        raise (CheckFailed if (out / INCOMPLETE).exists() else OutputError)(reason)
    manifest = read_manifest(out)
    if manifest is None or not isinstance(manifest.get("files"), list):
        raise OutputError(f"{out / MANIFEST}: not a bivocab build manifest (no file list)")
    warnings = environment_warnings(manifest)
    records = {f["path"]: f for f in manifest["files"]}
    scheme = content_scheme(manifest)
    disk = check_files_on_disk(out, records, manifest.get("recipe_file", ""), scheme)
    if hashes_only:
        return VerifyReport(str(out), "hashes", (), tuple(disk), tuple(warnings), (), _counts(disk))

    recipe = recipe_from_manifest(manifest, out)
    notes = _recipe_notes(manifest, recipe)
    progress("inputs")
    inputs = check_inputs(manifest, recipe)
    if any(c.status != IDENTICAL for c in inputs):
        return VerifyReport(str(out), "rebuild", tuple(inputs), (), tuple(warnings), tuple(notes))
    on_disk = [c for c in disk if c.status != MISSING_ON_DISK]
    if not any(c.status in (IDENTICAL, CHANGED_ON_DISK) for c in on_disk):
        notes.append("no output files on disk: the rebuild is compared with the hashes in build.json")
        disk = [c for c in disk if c.status == EXTRA_ON_DISK]
    from .build import build  # verify is a client of the build, not a part of it

    progress("rebuild")
    with tempfile.TemporaryDirectory(prefix="bivocab-verify-", dir=scratch) as tmp:
        rebuilt_dir = Path(tmp) / "build"
        rebuilt = build(recipe, rebuilt_dir, jobs=jobs).manifest
        progress("compare")
        intact = {c.path for c in disk if c.status == IDENTICAL}
        compared = compare_rebuild(records, {f["path"]: f for f in rebuilt["files"]},
                                   out, rebuilt_dir, intact, scheme)
        compared.append(compare_manifests(manifest, rebuilt))
    files = [c for c in disk if c.status != IDENTICAL] + compared
    return VerifyReport(str(out), "rebuild", tuple(inputs), tuple(files), tuple(warnings), tuple(notes),
                        _counts(files))


def environment_warnings(manifest: dict[str, Any]) -> list[str]:
    """One warning naming every library (or Python, Unicode) whose version differs from the build's."""
    recorded = manifest.get("environment") or {}
    current = environment()
    changed = [f"{name} {recorded.get(name, 'absent')} (build) vs {current.get(name, 'absent')} (now)"
               for name in sorted(set(recorded) | set(current)) if recorded.get(name) != current.get(name)]
    if not changed:
        return []
    return ["environment differs from the build's, so bytes may differ: " + "; ".join(changed)]


def check_files_on_disk(out: Path, records: dict[str, dict[str, Any]], recipe_file: str = "",
                        scheme: int = CONTENT_SCHEME) -> list[FileCheck]:
    """Each recorded file against its size and sha256 on disk, plus files the build did not write
    (the recipe file, when it lives in the build directory, is expected there). ``scheme``: the
    content digest scheme of the records."""
    checks = []
    for path, record in sorted(records.items()):
        full = out / path
        if not full.is_file():
            checks.append(FileCheck(path, MISSING_ON_DISK))
            continue
        size = full.stat().st_size
        if size == record.get("bytes") and sha256_file(full) == record.get("sha256"):
            checks.append(FileCheck(path, IDENTICAL))
            continue
        detail = f"{size:,} bytes, build.json records {record.get('bytes', 0):,}" if size != record.get("bytes") \
            else "sha256 differs"
        content = _safe_content(full, scheme)
        if content is not None and record.get("content_sha256"):
            detail += "; content " + ("intact" if content == record["content_sha256"] else "changed")
        checks.append(FileCheck(path, CHANGED_ON_DISK, detail))
    recipe_rel = Path(os.path.normpath(recipe_file)).as_posix() if recipe_file else None
    for root, dirs, names in os.walk(out):
        if Path(root) == out:
            dirs[:] = [d for d in dirs if d not in ANALYSIS_DIRS]
        for name in names:
            rel = Path(os.path.relpath(os.path.join(root, name), out)).as_posix()
            if rel in records or rel in CONTROL_FILES or rel == recipe_rel:
                continue
            checks.append(FileCheck(rel, EXTRA_ON_DISK, "left by an interrupted writer" if is_temp_file(name) else ""))
    return checks


def _safe_content(path: Path, scheme: int = CONTENT_SCHEME) -> str | None:
    try:
        return content_sha256(path, scheme)
    except (OSError, ValueError, EOFError):  # a corrupted file may not even parse
        return None


def check_inputs(manifest: dict[str, Any], recipe: Recipe) -> list[InputCheck]:
    """Every input recorded in build.json against its sha256 now."""
    checks = []
    for entry in manifest.get("inputs", []):
        path = recipe.base_dir / entry["path"]
        try:
            digest = file_sha256(path)
        except FileNotFoundError:
            checks.append(InputCheck(entry["path"], MISSING, f"not found at {path}"))
            continue
        except OSError as exc:
            raise InputError(f"{entry['path']}: cannot read input: {exc.strerror or exc}") from None
        checks.append(InputCheck(entry["path"], IDENTICAL) if digest == entry["sha256"] else
                      InputCheck(entry["path"], "changed", f"sha256 {digest[:12]}..., build.json records "
                                                           f"{entry['sha256'][:12]}..."))
    return checks


def _recipe_notes(manifest: dict[str, Any], recipe: Recipe) -> list[str]:
    notes = []
    recipe_path = Path(recipe.path)
    if recipe_path.is_file() and sha256_file(recipe_path) != manifest.get("recipe_sha256"):
        notes.append(f"{recipe.path} changed since the build; verifying the recipe as recorded in build.json")
    try:
        now = resolve_recipe_inputs(recipe)
    except InputError as exc:
        return notes + [f"the recipe's input globs no longer resolve ({exc}); using the recorded file list"]
    for old, new in zip(recipe.languages, now.languages):
        added = sorted(set(new.files) - set(old.files))
        if added:
            notes.append(f"[languages.{old.tag}] globs now also match {len(added)} file(s) the build did not "
                         f"read (first: {added[0]}); verifying the recorded file list")
    return notes


def compare_rebuild(records: dict[str, dict[str, Any]], rebuilt: dict[str, dict[str, Any]], out: Path,
                    rebuilt_dir: Path, intact: set[str], scheme: int = CONTENT_SCHEME) -> list[FileCheck]:
    """Recorded files against rebuilt ones; ``intact`` are the originals on disk that still match
    their records, used to point at the first difference; ``scheme``: the content digest
    scheme of the records (a rebuilt file is digested again in it when it is not this version's)."""
    checks = []
    for path in sorted(set(records) | set(rebuilt)):
        old, new = records.get(path), rebuilt.get(path)
        if new is None:
            checks.append(FileCheck(path, MISSING, "listed in build.json, not produced by the rebuild"))
        elif old is None:
            checks.append(FileCheck(path, EXTRA, "produced by the rebuild, not listed in build.json"))
        elif old.get("sha256") == new["sha256"]:
            checks.append(FileCheck(path, IDENTICAL))
        else:
            original = out / path if path in intact else None
            if scheme != CONTENT_SCHEME and new.get("content_sha256"):
                new = {**new, "content_sha256": _safe_content(rebuilt_dir / path, scheme)}
            checks.append(FileCheck(path, DIFFERENT, _difference(old, new, original, rebuilt_dir / path)))
    return checks


def _difference(old: dict[str, Any], new: dict[str, Any], original: Path | None, rebuilt: Path) -> str:
    if old.get("content_sha256") and new.get("content_sha256"):
        if old["content_sha256"] == new["content_sha256"]:
            return SAME_CONTENT
        detail = "content differs"
    elif new.get("content_sha256"):
        detail = "content not recorded in build.json"
    else:
        detail = f"{new['bytes']:,} bytes, build.json records {old.get('bytes', 0):,}"
    if original is not None:
        where = first_difference(original, rebuilt)
        if where:
            detail += f"; {where}"
    return detail


def first_difference(original: Path, rebuilt: Path) -> str:
    """Where two versions of a file first differ: element of an array, or line of a text file."""
    if original.suffix == ".npy":
        a = np.load(original, mmap_mode="r", allow_pickle=False)
        b = np.load(rebuilt, mmap_mode="r", allow_pickle=False)
        fields = a.dtype.names or (None,)
        if a.dtype.names != b.dtype.names:
            return f"fields {a.dtype.names} vs {b.dtype.names}"
        if a.shape != b.shape:
            return f"{a.size:,} elements in build, {b.size:,} in rebuild"
        for name in fields:
            x, y = (a, b) if name is None else (a[name], b[name])
            unequal = np.flatnonzero(np.asarray(x).reshape(-1) != np.asarray(y).reshape(-1))
            if len(unequal):
                label = "" if name is None else f"field {name}: "
                return (f"{label}{len(unequal):,} of {x.size:,} elements differ, first at index {unequal[0]} "
                        f"({x.reshape(-1)[unequal[0]]} vs {y.reshape(-1)[unequal[0]]})")
        return ""
    with open(original, "rb") as f, open(rebuilt, "rb") as g:
        for number, (x, y) in enumerate(zip(f, g), start=1):
            if x != y:
                return f"first difference at line {number}"
    return "one file is a prefix of the other"


def compare_manifests(recorded: dict[str, Any], rebuilt: dict[str, Any]) -> FileCheck:
    """build.json itself: every key but the environment, paths and file list must be equal."""
    rebuilt = json.loads(canonical_json(rebuilt))  # as it would be read back (tuples become lists)
    keys = sorted(k for k in set(recorded) | set(rebuilt)
                  if k not in _UNCOMPARED_KEYS and recorded.get(k) != rebuilt.get(k))
    if not keys:
        return FileCheck(MANIFEST, IDENTICAL)
    return FileCheck(MANIFEST, DIFFERENT, "keys differ: " + ", ".join(keys))


def _counts(checks: list[FileCheck]) -> dict[str, int]:
    counts: dict[str, int] = {}
    for check in checks:
        counts[check.status] = counts.get(check.status, 0) + 1
    return dict(sorted(counts.items()))


def report_text(report: VerifyReport) -> str:
    """The verdict, then a table of every input or file that is not identical."""
    how = ("re-hashed the files on disk against build.json" if report.mode == "hashes"
           else "rebuilt from build.json into a temporary directory and compared every file")
    lines = [f"verify {report.out}: {how}"]
    lines += [f"note: {n}" for n in report.notes]
    if report.inputs:
        bad = [c for c in report.inputs if c.status != IDENTICAL]
        lines.append(f"inputs: {len(report.inputs)} file(s), "
                     + (f"{len(bad)} no longer match build.json (nothing rebuilt)" if bad
                        else "all match their recorded sha256"))
    if report.files:
        lines.append("files: " + ", ".join(f"{n} {status}" for status, n in report.counts.items()))
        shards = [c for c in report.files if c.status == DIFFERENT and c.path.endswith((".npy", ".parquet"))]
        if shards:
            same = sum(1 for c in shards if c.detail == SAME_CONTENT)
            lines.append(f"shard files with different bytes: {len(shards)}; same data in a different container: "
                         f"{same}; data changed: {len(shards) - same}")
    rows = [("input " + c.path, c.status, c.detail) for c in report.inputs if c.status != IDENTICAL]
    rows += [(c.path, c.status, c.detail) for c in report.files if c.status != IDENTICAL]
    if rows:
        widths = [max(len(r[i]) for r in [("path", "status", "detail"), *rows]) for i in range(2)]
        lines.append(f"{'path'.ljust(widths[0])}  {'status'.ljust(widths[1])}  detail")
        lines += [f"{p.ljust(widths[0])}  {s.ljust(widths[1])}  {d}".rstrip() for p, s, d in rows]
    lines.append("ok: the build is verified" if report.ok else "FAILED: see the table above")
    return "\n".join(lines)


def report_json(report: VerifyReport) -> str:
    data = asdict(report)
    data["ok"] = report.ok
    return canonical_json(data)


def verify_or_fail(report: VerifyReport) -> None:
    """Raise :class:`CheckFailed` (exit code 1) unless the report is clean."""
    if not report.ok:
        raise CheckFailed(report.failure_line())

