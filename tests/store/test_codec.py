"""The array blob: little-endian IEEE 754 binary64 values after a shape header.

The byte layout is checked against Python's ``struct`` module ('<d' is IEEE 754 binary64,
little-endian), which is independent of numpy.
"""

from __future__ import annotations

import struct

import numpy as np
import pytest

from flakebook.errors import ProjectError
from flakebook.store.codec import decode_array, encode_array


def test_layout_is_little_endian_float64_with_shape():
    blob = encode_array([1.5, -2.0, 1e300])
    assert blob[:4] == b"FBA1"
    assert struct.unpack_from("<I", blob, 4) == (1,)
    assert struct.unpack_from("<Q", blob, 8) == (3,)
    assert struct.unpack_from("<3d", blob, 16) == (1.5, -2.0, 1e300)


@pytest.mark.parametrize(
    "values",
    [
        np.array([]),
        np.zeros((0, 2)),
        np.arange(12.0).reshape(4, 3),
        np.array([np.nan, np.inf, -0.0]),
    ],
)
def test_round_trip(values):
    out = decode_array(encode_array(values))
    assert out.shape == values.shape
    assert np.array_equal(out, values, equal_nan=True)
    assert np.signbit(out).tolist() == np.signbit(values).tolist()


def test_big_endian_input_is_stored_little_endian():
    values = np.arange(5, dtype=">f8")
    blob = encode_array(values)
    assert struct.unpack_from("<5d", blob, 16) == (0.0, 1.0, 2.0, 3.0, 4.0)


@pytest.mark.parametrize(
    "blob", [b"", b"FBA1", b"XXXX\x01\x00\x00\x00", encode_array([1.0, 2.0])[:-1]]
)
def test_damaged_blob_is_refused(blob):
    with pytest.raises(ProjectError, match="damaged"):
        decode_array(blob)


def test_any_float64_array_round_trips_bit_for_bit():
    """Property test over random shapes and values, NaN payloads and signed zeros included
    (IEEE 754 binary64 bit patterns compared as integers)."""
    from hypothesis import given, settings
    from hypothesis.extra.numpy import array_shapes, arrays

    @settings(max_examples=60, deadline=None)
    @given(arrays(np.float64, array_shapes(min_dims=0, max_dims=3, min_side=0, max_side=6)))
    def check(values):
        out = decode_array(encode_array(values))
        assert out.shape == values.shape
        assert np.array_equal(out.view(np.uint64), values.view(np.uint64))

    check()
