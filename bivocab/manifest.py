"""Build manifest (build.json), hashing, atomic writes, the build-directory lock and the
markers that tell a complete build from an interrupted one."""

from __future__ import annotations

import contextlib
import dataclasses
import errno
import fcntl
import fnmatch
import hashlib
import io
import json
import os
import platform
import re
import sys
import time
import unicodedata
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from importlib import metadata
from pathlib import Path
from typing import IO, Any, Callable, Iterable, Iterator

import numpy as np

from .errors import InputError, OutputError
from .sources import file_sha256

MANIFEST = "build.json"
LOCK = ".bivocab.lock"
WORK = ".bivocab-work"
# Present from the start of a build until build.json is in place: the directory is incomplete.
INCOMPLETE = ".bivocab-incomplete"
# Completed shards of the running build, one JSON line each (see bivocab.resume).
JOURNAL = ".bivocab-journal.jsonl"
CONTROL_FILES = frozenset({MANIFEST, LOCK, INCOMPLETE, JOURNAL})
# What `bivocab audit` and `bivocab probe` write into a build directory: analyses of the build,
# not part of it (not in build.json, not compared by verify).
ANALYSIS_DIRS = ("audit", "probe")
_TEMP_RE = re.compile(r"^\..+\.tmp-\d+$")
# Test hook: a build pauses at the named point (fnmatch pattern) so a test can kill it there.
PAUSE_ENV = "BIVOCAB_TEST_PAUSE"
PAUSE_SECONDS = 120
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


def checkpoint(point: str) -> None:
    """Pause here when ``$BIVOCAB_TEST_PAUSE`` matches ``point`` (crash-safety tests kill the
    build while it waits); a no-op otherwise. Points: ``stage:<name>``, ``write:<path>``
    (a file's bytes are in its temporary file, not yet renamed), ``manifest``, ``finish``."""
    pattern = os.environ.get(PAUSE_ENV)
    if pattern and fnmatch.fnmatchcase(point, pattern):
        print(f"paused at {point}", file=sys.stderr, flush=True)
        time.sleep(PAUSE_SECONDS)


def write_error(path: Path, exc: OSError) -> OutputError:
    """The one-line message for a failed write, saying 'disk full' when it is."""
    full = " (disk full)" if exc.errno in (errno.ENOSPC, errno.EDQUOT) else ""
    return OutputError(f"{path}: cannot write: {exc.strerror or exc}{full}")


def temp_name(path: Path) -> Path:
    return path.with_name(f".{path.name}.tmp-{os.getpid()}")


class _HashingWriter:
    """A binary output file that hashes the bytes written through it, so the sha256 of a file
    this process wrote needs no second read.  Seeking is refused: a writer that rewrote earlier
    bytes would make the running digest wrong."""

    def __init__(self, raw: IO[bytes], hashed: bool = True):
        self.raw = raw
        self.digest = hashlib.sha256()
        self.hashed = hashed    # False: the bytes are only counted (their digest is known)
        self.size = 0

    def write(self, data: Any) -> int:
        view = memoryview(data).cast("B")
        if self.hashed:
            self.digest.update(view)
        self.size += view.nbytes
        return self.raw.write(view)

    def seekable(self) -> bool:
        return False

    def seek(self, *args: Any) -> int:
        raise io.UnsupportedOperation("seek")

    def __getattr__(self, name: str) -> Any:  # tell, flush, closed, fileno...: the real file's
        return getattr(self.raw, name)


@dataclass(frozen=True)
class _WrittenFile:
    """Digests of a file this process wrote, valid while the file keeps the stat it had then."""

    sha256: str
    bytes: int
    stat: tuple[int, int, int, int]
    content_sha256: Future[str] | None = None


# Absolute path -> digests of files written by atomic_open in this process (taken by file_record).
_WRITTEN: dict[str, _WrittenFile] = {}
# Content digests run beside the writing (hashlib and numpy release the GIL on large buffers),
# so the shard threads do not wait for them; memory stays bounded because each shard thread
# waits for its shard's digests when it journals the shard (two threads keep up with two writers).
# A build with --jobs 1 computes them in its own thread (see :func:`background_digests`).
_DIGESTS = ThreadPoolExecutor(max_workers=2, thread_name_prefix="bivocab-digest")
_digests_in_background = True


@contextlib.contextmanager
def background_digests(enabled: bool) -> Iterator[None]:
    """Within the block, content digests are computed by background threads (``enabled``) or
    at once by the writing thread (a build told to use one core)."""
    global _digests_in_background
    previous, _digests_in_background = _digests_in_background, enabled
    try:
        yield
    finally:
        _digests_in_background = previous


def _stat_key(path: Path) -> tuple[int, int, int, int]:
    st = path.stat()
    return st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns


def note_content(path: Path, content: Callable[[], str]) -> None:
    """Attach the content digest of a shard file just written by :func:`atomic_open`, computed
    (in a background thread) from the data that was written, so :func:`file_record` need not
    read the file back.  The data must not change until file_record has taken the digest."""
    key = os.path.abspath(path)
    if key in _WRITTEN:
        if _digests_in_background:
            digest = _DIGESTS.submit(content)
        else:
            digest = Future()
            digest.set_result(content())
        _WRITTEN[key] = dataclasses.replace(_WRITTEN[key], content_sha256=digest)


@contextlib.contextmanager
def atomic_open(path: Path, mode: str = "wb", same_as: Path | None = None) -> Iterator[IO[Any]]:
    """Write to a temporary name in the same directory, fsync (unless within
    :func:`deferred_syncs`), then rename into place.  On any error the temporary file is removed
    and ``path`` is left untouched; an OSError becomes an :class:`OutputError` naming ``path``.
    The sha256 of the bytes written is kept for :func:`file_record`.  ``same_as``: a file this
    process wrote with exactly the bytes about to be written: its digests are taken instead of
    hashing the bytes again (the sizes must agree)."""
    tmp = temp_name(path)
    key = os.path.abspath(path)
    _WRITTEN.pop(key, None)
    twin = _WRITTEN.get(os.path.abspath(same_as)) if same_as is not None else None
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        with open(tmp, mode) as handle:
            hashing = _HashingWriter(handle, hashed=twin is None)
            yield hashing
            handle.flush()
            checkpoint(f"write:{path}")
            if not _syncs_deferred:
                os.fsync(handle.fileno())
        if twin is not None and twin.bytes != hashing.size:
            raise RuntimeError(f"{path}: written as a copy of {same_as}, but its size differs")
        os.replace(tmp, path)
        _WRITTEN[key] = (_WrittenFile(hashing.digest.hexdigest(), hashing.size, _stat_key(path)) if twin is None
                         else _WrittenFile(twin.sha256, twin.bytes, _stat_key(path), twin.content_sha256))
        if _early_syncs is not None:
            _schedule_early_sync(key)
    except BaseException as exc:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        if isinstance(exc, OSError):
            raise write_error(path, exc) from None
        raise


# Set by deferred_syncs: files are renamed into place without an fsync each; the caller syncs
# them all (sync_files) before anything that vouches for them (build.json) is written.
_syncs_deferred = False
# Meanwhile one thread fsyncs each file soon after it is in place, so that the disk works while
# the build computes and the caller's sync pass finds little left to write; it only waits
# for the disk (no CPU, no GIL). Best effort: the caller's pass is the one that counts.
_early_syncs: ThreadPoolExecutor | None = None


def _schedule_early_sync(path: str) -> None:
    early = _early_syncs
    if early is not None:
        with contextlib.suppress(RuntimeError):   # shut down: the caller's sync pass has it
            early.submit(_early_sync, path)


def _early_sync(path: str) -> None:
    with contextlib.suppress(OSError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


@contextlib.contextmanager
def deferred_syncs() -> Iterator[None]:
    """Within the block, :func:`atomic_open` does not fsync each file: the kernel writes them
    back while the build goes on, instead of the writer waiting for the disk file by file.
    The caller must :func:`sync_files` them before it writes a file that describes them."""
    global _syncs_deferred, _early_syncs
    previous, _syncs_deferred = _syncs_deferred, True
    outer, _early_syncs = _early_syncs, ThreadPoolExecutor(max_workers=1, thread_name_prefix="bivocab-writeback")
    try:
        yield
    finally:
        early, _syncs_deferred, _early_syncs = _early_syncs, previous, outer
        early.shutdown(wait=True, cancel_futures=True)   # what is still queued is left to sync_files


def sync_files(paths: Iterable[Path]) -> None:
    """fsync each file (what the kernel has not written back yet goes to the disk now)."""
    for path in paths:
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def atomic_write_text(path: Path, text: str | bytes) -> None:
    """Write ``text`` as UTF-8 (bytes are taken as already encoded) through :func:`atomic_open`."""
    with atomic_open(path, "wb") as handle:
        handle.write(text.encode("utf-8") if isinstance(text, str) else text)


def canonical_json(data: Any) -> str:
    """Sorted keys, two-space indent, UTF-8, a final newline: stable bytes for equal data."""
    return json.dumps(data, sort_keys=True, indent=2, ensure_ascii=False) + "\n"


def fsync_dir(directory: Path) -> None:
    """Make the renames inside ``directory`` durable (a rename is only on disk once its
    directory is synced)."""
    fd = os.open(directory, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def remove_temp_files(out: Path) -> int:
    """Delete temporary files an interrupted writer left under ``out``; return how many."""
    removed = 0
    for root, _dirs, names in os.walk(out):
        for name in names:
            if _TEMP_RE.match(name):
                with contextlib.suppress(FileNotFoundError):
                    os.unlink(os.path.join(root, name))
                removed += 1
    return removed


def is_temp_file(name: str) -> bool:
    return bool(_TEMP_RE.match(name))


# How content digests hash integers (build.json "content_digest"; a build.json without the key
# used scheme 1): 1 widened every integer to little-endian int64; 2 uses the narrowest
# little-endian width that holds the array's values (unsigned unless a value is negative), so
# a uint32 token array is hashed as it is stored, with no conversion and half the bytes.
CONTENT_SCHEME = 2
_WIDTHS = (1, 2, 4, 8)


def content_scheme(manifest: dict[str, Any]) -> int:
    """The content digest scheme a build.json's ``content_sha256`` values were made with."""
    scheme = manifest.get("content_digest", 1)
    if scheme not in (1, CONTENT_SCHEME) or isinstance(scheme, bool):
        raise OutputError(f"{MANIFEST}: content_digest {scheme!r} is not a scheme this version of bivocab "
                          f"knows (1 or {CONTENT_SCHEME}); verify it with the version that built it")
    return scheme


def array_digest(array: np.ndarray, scheme: int = CONTENT_SCHEME) -> str:
    """sha256 of the values of an array, independent of how they are stored: integers are
    hashed little-endian in a width that depends on the values only (``scheme``), so a uint16
    and a uint32 array of equal ids agree; the fields of a structured array one after
    another by name.

    >>> array_digest(np.array([1, 2], np.uint16)) == array_digest(np.array([1, 2], np.int64))
    True
    >>> array_digest(np.array([1, 2], np.uint16), 1) == array_digest(np.array([1, 2], np.int64), 1)
    True
    """
    digest = hashlib.sha256()
    _update_array(digest, array, scheme)
    return digest.hexdigest()


def _integer_target(array: np.ndarray, scheme: int) -> str:
    """The little-endian dtype an integer (or boolean) array's values are hashed as."""
    if scheme == 1:
        return "<u8" if array.dtype.kind == "u" and array.dtype.itemsize == 8 else "<i8"
    if array.size == 0:
        return "|u1"
    low, high = int(array.min()), int(array.max())
    if low >= 0:
        width = next(w for w in _WIDTHS if high < 1 << (8 * w))
        return "|u1" if width == 1 else f"<u{width}"
    width = next(w for w in _WIDTHS if -(1 << (8 * w - 1)) <= low and high < 1 << (8 * w - 1))
    return "|i1" if width == 1 else f"<i{width}"


def _update_array(digest: Any, array: np.ndarray, scheme: int = CONTENT_SCHEME) -> None:
    if array.dtype.names:
        for name in array.dtype.names:
            digest.update(f"field {name}\n".encode("utf-8"))
            _update_array(digest, array[name], scheme)
        return
    flat = array.reshape(-1)
    target = _integer_target(array, scheme) if array.dtype.kind in "iub" else None
    digest.update(f"{target or array.dtype.str} {array.shape}\n".encode("utf-8"))
    same = target is not None and np.dtype(target) == array.dtype
    step = 1 << 20  # bounded memory for large memory-mapped shards
    for start in range(0, len(flat), step):
        part = np.asarray(flat[start:start + step])
        # hashlib reads the array's buffer: no bytes copy beside a conversion.
        if target is None or same:
            digest.update(np.ascontiguousarray(part).view(np.uint8))
        else:
            digest.update(part.astype(target))


def _column_digest(digest: Any, column: Any, scheme: int) -> None:
    import pyarrow as pa

    array = column.combine_chunks() if isinstance(column, pa.ChunkedArray) else column
    if pa.types.is_list(array.type) or pa.types.is_large_list(array.type):
        offsets = np.asarray(array.offsets)
        _update_array(digest, offsets - offsets[0], scheme)
        _column_digest(digest, array.flatten(), scheme)
    elif pa.types.is_integer(array.type) and array.null_count == 0:
        _update_array(digest, array.to_numpy(), scheme)
    else:  # strings, dictionaries, nulls: compare by value
        digest.update(canonical_json(array.to_pylist()).encode("utf-8"))


def content_sha256(path: Path, scheme: int = CONTENT_SCHEME) -> str | None:
    """Digest of the data in a shard file (``.npy``: the array; ``.parquet``: each column by
    name), so that a rebuild can tell changed data from a changed container (npy header,
    integer width, Parquet writer metadata). None for other files, whose bytes are their content."""
    if path.suffix == ".npy":
        return array_digest(np.load(path, mmap_mode="r", allow_pickle=False), scheme)
    if path.suffix == ".parquet":
        import pyarrow.parquet as pq

        return table_digest(pq.read_table(path), scheme)
    return None


def table_digest(table: Any, scheme: int = CONTENT_SCHEME) -> str:
    """The content digest of a Parquet shard from its (pyarrow) table: each column by name."""
    digest = hashlib.sha256()
    for name in sorted(table.column_names):
        digest.update(f"column {name}\n".encode("utf-8"))
        _column_digest(digest, table.column(name), scheme)
    return digest.hexdigest()


def file_record(out: Path, path: str) -> dict[str, Any]:
    """The build.json ``files`` entry of one output file: from the digests taken while this
    process wrote it when the file is unchanged since, else by reading it."""
    full = out / path
    written = _WRITTEN.pop(os.path.abspath(full), None)
    if written is not None and written.stat == _stat_key(full):
        record: dict[str, Any] = {"path": path, "sha256": written.sha256, "bytes": written.bytes}
        content = written.content_sha256.result() if written.content_sha256 else content_sha256(full)
    else:
        record = {"path": path, "sha256": sha256_file(full), "bytes": full.stat().st_size}
        content = content_sha256(full)
    if content is not None:
        record["content_sha256"] = content
    return record


@dataclass(frozen=True)
class InputState:
    """An input file as it was hashed: its digest and the stat fields that a change moves."""

    sha256: str
    size: int
    mtime_ns: int
    inode: int


def hash_inputs(files: Iterable[Any]) -> dict[str, InputState]:
    """sha256 and stat of every input (``InputFile``; a saved dataset directory is hashed
    member by member), keyed by its display path."""
    return start_hashing_inputs(files, background=False)()


# Inputs are hashed beside the scan, which reads the same files (from the page cache).
_INPUT_HASHES = ThreadPoolExecutor(max_workers=1, thread_name_prefix="bivocab-inputs")


def start_hashing_inputs(files: Iterable[Any], background: bool = True) -> Callable[[], dict[str, InputState]]:
    """Take the stat of every input now (a missing or unreadable input is reported at once) and
    hash the inputs in a background thread (else at once); the returned function waits for the
    states (see :func:`hash_inputs`).  A change after the stat is caught by
    :func:`check_inputs_unchanged`."""
    files = list(files)
    befores = [_input_stat(source) for source in files]

    def states() -> dict[str, InputState]:
        out = {}
        for source, before in zip(files, befores):
            try:
                digest = file_sha256(source.path)
            except OSError as exc:
                raise _input_error(source, exc) from None
            out[source.display] = InputState(digest, before.st_size, before.st_mtime_ns, before.st_ino)
        return out

    if background:
        return _INPUT_HASHES.submit(states).result
    done = states()
    return lambda: done


def _input_stat(source: Any) -> os.stat_result:
    try:
        return os.stat(source.path)
    except OSError as exc:
        raise _input_error(source, exc) from None


def _input_error(source: Any, exc: OSError) -> InputError:
    if isinstance(exc, FileNotFoundError):
        return InputError(f"{source.display}: input file not found")
    return InputError(f"{source.display}: cannot read input: {exc.strerror or exc}")


def check_inputs_unchanged(files: Iterable[Any], states: dict[str, InputState]) -> None:
    """Raise if an input changed between hashing and the end of reading: the recorded sha256
    would then not describe the text the build used."""
    for source in files:
        state = states[source.display]
        try:
            now = os.stat(source.path)
        except OSError:
            now = None
        if now is None or (now.st_size, now.st_mtime_ns, now.st_ino) != (state.size, state.mtime_ns, state.inode):
            raise InputError(f"{source.display}: input file changed while the build was reading it; "
                             "rebuild when it is stable")


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


def is_locked(out: Path) -> bool:
    """True while a build holds the lock of ``out`` (never creates the lock file)."""
    try:
        handle = open(out / LOCK, "r")
    except OSError:
        return False
    with handle:
        try:
            fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            return True
        fcntl.flock(handle.fileno(), fcntl.LOCK_UN)
    return False


def incomplete_reason(out: Path) -> str | None:
    """Why ``out`` is not a complete build that may be read, or None when it is one."""
    if (out / INCOMPLETE).exists():
        how = ("a build is writing to it now" if is_locked(out)
               else "the build that wrote it was interrupted or failed")
        return (f"{out}: incomplete build ({how}); run `bivocab build` again "
                "(--resume reuses the finished shards)")
    if not (out / MANIFEST).exists():
        return f"{out}: no {MANIFEST}: not a bivocab build directory"
    return None


def complete_manifest(out: Path) -> dict[str, Any]:
    """build.json of a complete build; an :class:`OutputError` for an incomplete directory."""
    reason = incomplete_reason(Path(out))
    if reason:
        raise OutputError(reason)
    manifest = read_manifest(Path(out))
    if manifest is None:  # removed since the check above
        raise OutputError(f"{out}: no {MANIFEST}: not a bivocab build directory")
    return manifest
