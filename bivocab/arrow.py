"""Arrow arrays made straight from their buffers.

``pyarrow.array`` asks pandas (importing it when installed, about 0.3 s) whether its argument
is a pandas object; the build's hot paths make their few arrow arrays from buffers instead, so
a word-level build never imports pandas.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc


def int64_array(values: np.ndarray) -> pa.Array:
    """An arrow int64 array of ``values`` (copied only when not already contiguous int64).

    >>> int64_array(np.array([3, -1], np.int32)).to_pylist()
    [3, -1]
    """
    data = np.ascontiguousarray(values, dtype=np.int64)
    return pa.Array.from_buffers(pa.int64(), len(data), [None, pa.py_buffer(data)])


def string_array(texts: list[str]) -> pa.Array:
    """An arrow large string array of Python strings.

    The strings are joined and encoded in one call each, and cut apart again with numpy at
    the joins (one per-string encode when a string holds the joining character itself).

    >>> string_array(["a", "été", ""]).to_pylist()
    ['a', 'été', '']
    >>> string_array(["a\\x00b", "c"]).to_pylist()
    ['a\\x00b', 'c']
    """
    n = len(texts)
    raw = np.frombuffer("\x00".join(texts).encode("utf-8"), dtype=np.uint8)
    cuts = np.flatnonzero(raw == 0)
    offsets = np.zeros(n + 1, dtype=np.int64)
    if len(cuts) == max(n - 1, 0):
        offsets[1:n] = cuts - np.arange(len(cuts))
        offsets[n] = len(raw) - len(cuts)
        data = np.delete(raw, cuts) if len(cuts) else raw
    else:
        encoded = [text.encode("utf-8") for text in texts]
        np.cumsum(np.fromiter(map(len, encoded), dtype=np.int64, count=n), out=offsets[1:])
        data = np.frombuffer(b"".join(encoded), dtype=np.uint8)
    return pa.LargeStringArray.from_buffers(n, pa.py_buffer(offsets), pa.py_buffer(data))


def strings_holding(values: pa.Array, chars: bytes) -> np.ndarray:
    """Indices of the strings of ``values`` (a string array without nulls) that hold one of the
    ASCII ``chars``, found by one numpy pass over the UTF-8 bytes (an ASCII byte is never part
    of another character's encoding).

    >>> strings_holding(string_array(["a", "b\\tc", "é", '"']).slice(1), b'\\t"').tolist()
    [0, 2]
    """
    values = values.cast(pa.large_string())
    _, offsets_buffer, data_buffer = values.buffers()
    offsets = np.frombuffer(offsets_buffer, dtype=np.int64, count=len(values) + 1, offset=values.offset * 8)
    if data_buffer is None or not len(values):
        return np.zeros(0, dtype=np.int64)
    data = np.frombuffer(data_buffer, dtype=np.uint8)[offsets[0]:offsets[-1]]
    codes = sorted(set(chars))
    below = 0       # the codes 0, 1, ... below this are all wanted: one comparison for them
    while below < len(codes) and codes[below] == below:
        below += 1
    found = data < below
    for code in codes[below:]:
        found |= data == code
    positions = np.flatnonzero(found) + offsets[0]
    return np.unique(np.searchsorted(offsets, positions, side="right") - 1)


def string_scalar(text: str) -> pa.Scalar:
    """An arrow large string scalar (``pyarrow.scalar`` of a str imports pandas, see above)."""
    return string_array([text])[0]


def joined_bytes(values: pa.Array, separator: str) -> bytes:
    """The UTF-8 of a string array's values joined with ``separator``, made by arrow.

    >>> joined_bytes(string_array(["a", "b", "c"]), ", ")
    b'a, b, c'
    """
    lists = pa.LargeListArray.from_arrays(int64_array(np.array([0, len(values)])),
                                          values.cast(pa.large_string()))
    whole = pc.binary_join(lists, string_scalar(separator))
    offsets = np.frombuffer(whole.buffers()[1], dtype=np.int64, count=2, offset=whole.offset * 8)
    return whole.buffers()[2][int(offsets[0]):int(offsets[1])].to_pybytes() if offsets[1] > offsets[0] else b""


_NUMPY_TYPES = {pa.int8(): np.int8, pa.int16(): np.int16, pa.int32(): np.int32, pa.int64(): np.int64,
                pa.uint8(): np.uint8, pa.uint16(): np.uint16, pa.uint32(): np.uint32, pa.uint64(): np.uint64}


def numpy_view(values: pa.Array) -> np.ndarray:
    """The numbers of an integer arrow array without nulls, as a numpy view of its buffer.

    >>> numpy_view(int64_array(np.arange(5)).slice(2)).tolist()
    [2, 3, 4]
    """
    dtype = np.dtype(_NUMPY_TYPES[values.type])
    if values.null_count:
        raise ValueError("an array with nulls has no plain numpy view")
    return np.frombuffer(values.buffers()[1], dtype=dtype, count=len(values), offset=values.offset * dtype.itemsize)


def bool_numpy(values: pa.Array) -> np.ndarray:
    """A boolean arrow array without nulls as a numpy bool array.

    >>> bool_numpy(pa.array([False, True, False, True]).slice(1)).tolist()
    [True, False, True]
    """
    if values.null_count:
        raise ValueError("an array with nulls has no plain numpy view")
    bits = np.frombuffer(values.buffers()[1], dtype=np.uint8)
    return np.unpackbits(bits, bitorder="little", count=values.offset + len(values))[values.offset:].view(np.bool_)
