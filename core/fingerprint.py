"""SHA-256 fingerprint of the canonical mapped data and its mapping.

The fingerprint keys every cache and appears in every decision record. It is
computed over the *mapped* data, not the file: the same cases read from CSV,
TSV, Excel or Parquet get one fingerprint; a column mapped differently (or a
different event value) gets another.

Canonical form, in sorted name order, for each mapped array that is present:
its name, a type tag and its length, then its values as bytes --

* floats as little-endian float64 with -0.0 written as +0.0;
* labels as uint8 0/1;
* times as int64 nanoseconds since the epoch (NaT as the int64 minimum);
* text (groups, clusters) as the 64-bit keyed hash of each value's ``str``
  from ``pandas.util.hash_array`` (fixed key, so stable across runs), missing
  values as a fixed marker;

followed by the mapping as canonical JSON (sorted keys, compact separators).
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pandas as pd

__all__ = ["fingerprint_arrays"]

_MISSING = np.uint64(0x9E3779B97F4A7C15)


def _canonical_bytes(values: np.ndarray) -> tuple[str, bytes]:
    a = np.asarray(values)
    if a.dtype == np.bool_:
        return "u8", a.astype("<u1").tobytes()
    if a.dtype.kind == "M":
        return "t", a.astype("datetime64[ns]").view("<i8").tobytes()
    if a.dtype.kind in "iuf":
        f = np.asarray(a, dtype="<f8") + 0.0
        return "f8", f.tobytes()
    ser = pd.Series(a, dtype=object)
    missing = ser.isna().to_numpy()
    text = ser.astype(str).to_numpy(dtype=object)
    h = pd.util.hash_array(text, categorize=True)
    h[missing] = _MISSING
    return "s", h.astype("<u8").tobytes()


def fingerprint_arrays(arrays: dict[str, np.ndarray | None], mapping: dict) -> str:
    """Hex SHA-256 over the named arrays (None entries skipped) and the mapping."""
    digest = hashlib.sha256()
    for name in sorted(arrays):
        values = arrays[name]
        if values is None:
            continue
        tag, payload = _canonical_bytes(values)
        digest.update(f"{name}\x1f{tag}\x1f{len(values)}\x1e".encode())
        digest.update(payload)
    digest.update(json.dumps(mapping, sort_keys=True, separators=(",", ":"), default=str).encode())
    return digest.hexdigest()
