"""Compiled exact grouping of short text values (see :mod:`core.fingerprint`).

Group and cluster columns (a site, a patient id) arrive as Arrow string
arrays whose values are mostly a few bytes long. A value of at most 7 bytes
is one 64-bit key: its bytes (little-endian) with its length in the top byte
-- injective, so two values share a key exactly when they are equal. A
null is the key with 255 in the top byte. :func:`group_short_keys` numbers
the distinct keys in order of first appearance in one pass over the rows
with an open-addressing hash table (compiled by numba, ``cache=True``): no
temporary the size of the data, and no comparison beyond the keys.
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["SHORT_BYTES", "group_short_keys"]

#: Values up to this many bytes are one injective 64-bit key.
SHORT_BYTES = 7

_NULL_KEY = np.uint64(255) << np.uint64(56)
_MIX = np.uint64(0x9E3779B97F4A7C15)


@numba.njit(cache=True, nogil=True)
def group_short_keys(offsets, data, valid):  # pragma: no cover - compiled
    """``(codes, first_rows)`` of string values of at most 7 bytes.

    ``offsets`` (n + 1,) int64 and ``data`` (uint8) are an Arrow large_string
    array's buffers; ``valid`` (n,) bool (False: null). Codes (int64) number
    the distinct values (nulls one value) in order of first appearance;
    ``first_rows`` holds each code's first row. The table holds (key,
    code + 1) pairs side by side, so a probe touches one cache line (0 marks
    an empty slot); it starts at 1,024 slots and doubles when three quarters
    full.
    """
    n = offsets.shape[0] - 1
    bits = 10
    size = 1 << bits
    table = np.zeros(2 * size, dtype=np.uint64)
    codes = np.empty(n, dtype=np.int64)
    first = np.empty(n, dtype=np.int64)
    group_key = np.empty(n, dtype=np.uint64)
    k = 0
    for i in range(n):
        if valid[i]:
            a = offsets[i]
            b = offsets[i + 1]
            key = np.uint64(b - a) << np.uint64(56)
            for p in range(a, b):
                key |= np.uint64(data[p]) << np.uint64(8 * (p - a))
        else:
            key = _NULL_KEY
        s = np.int64((key * _MIX) >> np.uint64(64 - bits))  # the product's high bits
        while True:
            g = table[2 * s + 1]
            if g == 0:
                table[2 * s] = key
                table[2 * s + 1] = np.uint64(k + 1)
                first[k] = i
                group_key[k] = key
                codes[i] = k
                k += 1
                break
            if table[2 * s] == key:
                codes[i] = np.int64(g) - 1
                break
            s = (s + 1) & (size - 1)
        if 4 * k > 3 * size:  # three quarters full: double the table and re-insert every key
            bits += 1
            size = 1 << bits
            table = np.zeros(2 * size, dtype=np.uint64)
            for gg in range(k):
                kk = group_key[gg]
                s2 = np.int64((kk * _MIX) >> np.uint64(64 - bits))
                while table[2 * s2 + 1] != 0:
                    s2 = (s2 + 1) & (size - 1)
                table[2 * s2] = kk
                table[2 * s2 + 1] = np.uint64(gg + 1)
    return codes, first[:k].copy()
