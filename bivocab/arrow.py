"""Arrow arrays made straight from their buffers.

``pyarrow.array`` asks pandas (importing it when installed, about 0.3 s) whether its argument
is a pandas object; the build's hot paths make their few arrow arrays from buffers instead, so
a word-level build never imports pandas.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa


def int64_array(values: np.ndarray) -> pa.Array:
    """An arrow int64 array of ``values`` (copied only when not already contiguous int64).

    >>> int64_array(np.array([3, -1], np.int32)).to_pylist()
    [3, -1]
    """
    data = np.ascontiguousarray(values, dtype=np.int64)
    return pa.Array.from_buffers(pa.int64(), len(data), [None, pa.py_buffer(data)])


def string_array(texts: list[str]) -> pa.Array:
    """An arrow (large) string array of Python strings.

    >>> string_array(["a", "été", ""]).to_pylist()
    ['a', 'été', '']
    """
    encoded = [text.encode("utf-8") for text in texts]
    offsets = np.zeros(len(encoded) + 1, dtype=np.int64)
    np.cumsum(np.fromiter(map(len, encoded), dtype=np.int64, count=len(encoded)), out=offsets[1:])
    return pa.LargeStringArray.from_buffers(len(encoded), pa.py_buffer(offsets), pa.py_buffer(b"".join(encoded)))


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
