"""Build manifest (build.json), hashing, atomic writes and the build-directory lock."""

from __future__ import annotations

import contextlib
import fcntl
import hashlib
import json
import os
import platform
import unicodedata
from importlib import metadata
from pathlib import Path
from typing import IO, Any, Iterator

from .errors import OutputError

MANIFEST = "build.json"
LOCK = ".bivocab.lock"
WORK = ".bivocab-work"
# Libraries whose versions can change what a build writes.
OUTPUT_LIBRARIES = ("bivocab", "numpy", "regex", "tokenizers", "pyarrow", "langcodes", "zstandard",
                    "sentencepiece", "protobuf")


def sha256_file(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for chunk in iter(lambda: handle.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def environment() -> dict[str, str]:
    """Versions of Python, the Unicode tables and every library that affects the output."""
    env = {"python": platform.python_version(), "unicodedata": unicodedata.unidata_version}
    for name in OUTPUT_LIBRARIES:
        try:
            env[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            env[name] = "not installed"
    return env


@contextlib.contextmanager
def atomic_open(path: Path, mode: str = "wb") -> Iterator[IO[Any]]:
    """Write to a temporary name in the same directory, fsync, then rename into place.
    On any error the temporary file is removed and ``path`` is left untouched."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        with open(tmp, mode) as handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        raise


def atomic_write_text(path: Path, text: str) -> None:
    with atomic_open(path, "wb") as handle:
        handle.write(text.encode("utf-8"))


def canonical_json(data: Any) -> str:
    """Sorted keys, two-space indent, UTF-8, a final newline: stable bytes for equal data."""
    return json.dumps(data, sort_keys=True, indent=2, ensure_ascii=False) + "\n"


def read_manifest(out: Path) -> dict[str, Any] | None:
    path = out / MANIFEST
    if not path.exists():
        return None
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise OutputError(f"{path}: not a readable build manifest ({exc})") from None


@contextlib.contextmanager
def build_lock(out: Path) -> Iterator[None]:
    """An exclusive OS-level lock on ``out/.bivocab.lock``; the OS releases it if we crash."""
    out.mkdir(parents=True, exist_ok=True)
    handle = open(out / LOCK, "a+")
    try:
        fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        handle.close()
        raise OutputError(f"{out}: another bivocab build is writing to this directory; wait for it to finish") from None
    try:
        yield
    finally:
        fcntl.flock(handle.fileno(), fcntl.LOCK_UN)
        handle.close()
