"""The compiled grouping of short text values (core.text_kernels) against pandas.factorize.

Reference: ``pandas.factorize`` numbers distinct values in order of first
appearance, as ``group_short_keys`` must; first rows are checked by numpy.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

from core.text_kernels import SHORT_BYTES, group_short_keys


def _buffers(values):
    arr = pa.array(values, type=pa.large_string())
    n = len(arr)
    offsets = np.frombuffer(arr.buffers()[1], dtype="<i8")[arr.offset: arr.offset + n + 1].copy()
    buf = arr.buffers()[2]
    data = np.frombuffer(buf, dtype=np.uint8) if buf is not None else np.zeros(1, np.uint8)
    valid = np.asarray(arr.is_valid().to_numpy(zero_copy_only=False), dtype=np.bool_)
    return offsets, data, valid


def _reference(values):
    # nulls are one value of their own here; pandas.factorize gives them -1, so code them apart
    marked = ["\x00null" if v is None else v for v in values]
    codes, _ = pd.factorize(np.asarray(marked, dtype=object))
    return codes.astype(np.int64)


@pytest.mark.parametrize("n_distinct", [1, 3, 700, 5_000, 60_000])
def test_codes_and_first_rows_equal_pandas_factorize(n_distinct):
    rng = np.random.default_rng(n_distinct)
    # ids of 1 to 7 bytes, some with a two-byte letter (cut to 7 bytes: a few merge)
    pool = [(f"P{v}" + "é" * (v % 2)).encode("utf-8")[:SHORT_BYTES].decode("utf-8", "ignore")
            for v in range(n_distinct)]
    assert max(len(v.encode("utf-8")) for v in pool) <= SHORT_BYTES
    values = [pool[i] for i in rng.integers(0, len(pool), 4 * n_distinct + 10)]
    values[::17] = [None] * len(values[::17])
    values[5::23] = [""] * len(values[5::23])  # the empty string is not the null
    codes, first = group_short_keys(*_buffers(values))
    assert np.array_equal(codes, _reference(values))
    # each code's first row: the first row holding that value
    assert np.array_equal(first, np.unique(codes, return_index=True)[1])
    assert np.array_equal(codes[first], np.arange(first.size))


def test_keys_differ_by_length_and_byte():
    values = ["", "\x00", "\x00\x00", "a", "a\x00", "ab", "ba", "abcdefg", "abcdefh", None, "a"]
    codes, first = group_short_keys(*_buffers(values))
    assert codes.tolist() == [0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 3]
    assert first.tolist() == list(range(10))
