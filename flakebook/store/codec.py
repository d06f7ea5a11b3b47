"""Arrays in the project file: little-endian float64 blobs that carry their own shape.

A blob is ``b"FBA1"``, the number of dimensions (uint32, little-endian), each dimension's length
(uint64, little-endian), then the values as little-endian float64 in row-major order. Decoding
checks that the byte count matches the stated shape. Nothing else (no pickle) is ever used.
"""

from __future__ import annotations

import struct

import numpy as np

from flakebook.errors import ProjectError

MAGIC = b"FBA1"
_MAX_NDIM = 8


def encode_array(values) -> bytes:
    """The blob of ``values`` (anything numpy turns into a float64 array, 0 to 8 dimensions)."""
    arr = np.asarray(values, dtype="<f8")
    if arr.ndim > _MAX_NDIM:
        raise ValueError(f"arrays of at most {_MAX_NDIM} dimensions can be stored, not {arr.ndim}")
    header = MAGIC + struct.pack("<I", arr.ndim) + struct.pack(f"<{arr.ndim}Q", *arr.shape)
    return header + np.ascontiguousarray(arr).tobytes()


def decode_array(blob: bytes | memoryview | None) -> np.ndarray | None:
    """The read-only float64 array stored in ``blob`` (None stays None).

    Raises :class:`ProjectError` when the blob is not an array written by :func:`encode_array`.
    """
    if blob is None:
        return None
    data = bytes(blob)
    if len(data) < 8 or data[:4] != MAGIC:
        raise ProjectError("a stored array is damaged: it does not start with the array header")
    (ndim,) = struct.unpack_from("<I", data, 4)
    if ndim > _MAX_NDIM or len(data) < 8 + 8 * ndim:
        raise ProjectError("a stored array is damaged: its header is cut short")
    shape = struct.unpack_from(f"<{ndim}Q", data, 8)
    start = 8 + 8 * ndim
    count = int(np.prod(shape, dtype=np.int64)) if ndim else 1
    if len(data) - start != 8 * count:
        raise ProjectError(
            f"a stored array is damaged: its header says {count} values, "
            f"its data holds {(len(data) - start) / 8:g}"
        )
    arr = np.frombuffer(data, dtype="<f8", offset=start, count=count).reshape(shape)
    arr = arr.astype(np.float64, copy=False)
    arr.flags.writeable = False
    return arr
