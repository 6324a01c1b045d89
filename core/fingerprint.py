"""SHA-256 fingerprint of the canonical mapped data and its mapping.

The fingerprint keys every cache and appears in every decision record. It is
computed over the *mapped* data, not the file: the same cases read from CSV,
TSV, Excel or Parquet get one fingerprint; a column mapped differently (or a
different event value) gets another.

Canonical form, in sorted name order, for each mapped array that is present:
its name, a type tag and its length, then its values as bytes --

* floats as little-endian float64 with -0.0 written as +0.0 and every NaN as
  one quiet-NaN bit pattern;
* labels as uint8 0/1;
* times as int64 nanoseconds since the epoch (NaT as the int64 minimum);
* text (groups, clusters) as canonical text (:func:`canonical_text`: numbers
  that are whole written without a decimal point, surrounding spaces
  removed, the missing-value words of :data:`core.reading.MISSING_TEXT` as
  missing), hashed exactly as the distinct texts in order of first
  appearance (their UTF-8 bytes and lengths) followed by every row's code
  into them (-1 where missing);

followed by the mapping as canonical JSON (:func:`canonical_mapping`: sorted
keys, compact separators, the event value as canonical text, numbers as
floats).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math

import numpy as np
import pandas as pd

from core.reading import MISSING_TEXT

__all__ = [
    "canonical_mapping",
    "canonical_text",
    "fingerprint_arrays",
    "recode",
    "text_codes",
    "texts_from_codes",
    "value_text",
]

_NAN = np.frombuffer(np.array([np.nan], dtype="<f8").tobytes(), dtype="<f8")[0]
_MISSING_WORDS = frozenset(MISSING_TEXT)


def value_text(value) -> str | None:
    """One value as canonical text, or None when it is missing.

    Booleans as ``"True"`` / ``"False"``; whole numbers without a decimal
    point (``1.0`` -> ``"1"``); other floats by their shortest round-trip
    repr; times in ISO 8601; text with surrounding spaces removed.
    """
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, (bool, np.bool_)):
        return "True" if value else "False"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if math.isnan(v):
            return None
        if math.isfinite(v) and v == math.floor(v) and abs(v) < 2**63:
            return str(int(v))
        return repr(v)
    if isinstance(value, (pd.Timestamp, _dt.datetime, _dt.date, np.datetime64)):
        ts = pd.Timestamp(value)
        return None if pd.isna(ts) else ts.isoformat()
    if isinstance(value, bytes):
        value = value.decode("utf-8", errors="replace")
    text = str(value).strip()
    if text in _MISSING_WORDS:
        return None
    return text


def _as_series(values) -> pd.Series:
    if isinstance(values, pd.Series):
        return values
    if isinstance(values, pd.Index):
        return pd.Series(values)
    arr = np.asarray(values)
    if arr.dtype.kind in "US":
        arr = arr.astype(object)
    return pd.Series(arr)


def _merge(codes: np.ndarray, texts: list) -> tuple[np.ndarray, np.ndarray]:
    """Codes over distinct values -> codes over distinct canonical texts.

    ``texts[i]`` is the text of distinct value ``i`` (None when missing).
    Distinct values are in order of first appearance, so the first value
    giving a text marks that text's first appearance: the merged codes are
    again numbered in order of first appearance.
    """
    lookup: dict[str, int] = {}
    remap = np.empty(len(texts) + 1, dtype=np.int64)
    dictionary: list[str] = []
    for i, t in enumerate(texts):
        if t is None:
            remap[i] = -1
            continue
        k = lookup.get(t)
        if k is None:
            k = lookup[t] = len(dictionary)
            dictionary.append(t)
        remap[i] = k
    remap[-1] = -1
    out = np.empty(len(dictionary), dtype=object)
    out[:] = dictionary
    return remap[codes], out


def _arrow_text_codes(arr) -> tuple[np.ndarray, np.ndarray]:
    """text_codes of a pyarrow string array, vectorised.

    The raw strings are dictionary-encoded first (indices in order of first
    appearance); only the distinct strings are then trimmed and checked for
    missing-value words, and re-encoded when that merges or removes any.
    Re-encoding the dictionary in its own order keeps the codes numbered by
    first appearance in the rows.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks() if arr.num_chunks != 1 else arr.chunk(0)
    if pa.types.is_large_string(arr.type):
        arr = arr.cast(pa.string())
    enc = arr.dictionary_encode()
    codes = enc.indices.fill_null(-1).to_numpy(zero_copy_only=False).astype(np.int64)
    raw = enc.dictionary
    clean = pc.utf8_trim_whitespace(raw)
    words = pc.is_in(clean, value_set=pa.array(sorted(_MISSING_WORDS), type=pa.string()))
    if pc.any(words).as_py() or not clean.equals(raw):
        clean = pc.if_else(words, pa.scalar(None, type=pa.string()), clean)
        enc2 = clean.dictionary_encode()
        remap = np.append(enc2.indices.fill_null(-1).to_numpy(zero_copy_only=False), -1)
        codes = remap.astype(np.int64)[codes]
        clean = enc2.dictionary
    dictionary = clean.to_numpy(zero_copy_only=False).astype(object)
    return codes, dictionary


def _numeric_texts(uniques: np.ndarray) -> list:
    """Canonical text of distinct numbers (vectorised for whole numbers)."""
    import pyarrow as pa

    u = np.asarray(uniques)
    if u.dtype.kind in "iu":
        return pa.array(u).cast(pa.string()).to_pylist()
    f = u.astype(np.float64)
    whole = np.isfinite(f) & (np.floor(f) == f) & (np.abs(f) < 2.0**63)
    texts: list = [None] * f.shape[0]
    if whole.any():
        ints = pa.array(f[whole].astype(np.int64)).cast(pa.string()).to_pylist()
        for i, t in zip(np.flatnonzero(whole), ints):
            texts[i] = t
    for i in np.flatnonzero(~whole):  # few in practice: only non-whole distinct values
        texts[i] = value_text(f[i])
    return texts


def text_codes(values) -> tuple[np.ndarray, np.ndarray]:
    """Canonical text of each value as ``(codes, dictionary)``.

    ``dictionary`` holds the distinct canonical texts (``str``) in order of
    first appearance and ``codes`` (int64) indexes it, -1 where the value is
    missing -- so ``(codes, dictionary)`` is a function of the sequence of
    canonical texts alone, whatever the source type. Vectorised: text goes
    through pyarrow compute (trim, missing words, dictionary encoding);
    numbers are factorised and only their distinct values converted; mixed
    Python objects (an Excel column of numbers and text) are factorised and
    each distinct value converted by :func:`value_text`.
    """
    import pyarrow as pa

    ser = _as_series(values)
    dtype = ser.dtype
    if isinstance(dtype, pd.CategoricalDtype):
        ser = ser.astype(object)
        dtype = ser.dtype
    if pd.api.types.is_bool_dtype(dtype):
        codes, uniques = pd.factorize(ser, use_na_sentinel=True)
        return _merge(np.asarray(codes, dtype=np.int64), [value_text(u) for u in uniques])
    if pd.api.types.is_numeric_dtype(dtype):
        codes, uniques = pd.factorize(ser, use_na_sentinel=True)
        return _merge(np.asarray(codes, dtype=np.int64), _numeric_texts(np.asarray(uniques)))
    arrow = getattr(ser.array, "_pa_array", None)
    if arrow is not None and (
        pa.types.is_string(arrow.type) or pa.types.is_large_string(arrow.type)
    ):
        return _arrow_text_codes(arrow)
    if dtype == object:
        try:
            arr = pa.array(ser.to_numpy(dtype=object), from_pandas=True)
        except (pa.ArrowInvalid, pa.ArrowTypeError):
            arr = None
        if arr is not None and (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
            return _arrow_text_codes(arr)
        if arr is not None and (pa.types.is_integer(arr.type) or pa.types.is_floating(arr.type)):
            return text_codes(pd.Series(arr.to_numpy(zero_copy_only=False)))
    codes, uniques = pd.factorize(ser, use_na_sentinel=True)
    return _merge(np.asarray(codes, dtype=np.int64), [value_text(u) for u in uniques])


def texts_from_codes(codes: np.ndarray, dictionary: np.ndarray) -> np.ndarray:
    """The object array of canonical text (None where missing) from ``text_codes``."""
    table = np.empty(len(dictionary) + 1, dtype=object)
    table[:-1] = dictionary
    table[-1] = None
    return table[codes]


def recode(
    codes: np.ndarray, dictionary: np.ndarray, keep: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """``text_codes`` of the kept rows, from the codes of all rows (no text touched)."""
    sub = np.asarray(codes)[keep]
    present = sub >= 0
    new, old = pd.factorize(sub[present])
    out = np.full(sub.shape, -1, dtype=np.int64)
    out[present] = new
    return out, np.asarray(dictionary, dtype=object)[np.asarray(old, dtype=np.int64)]


def canonical_text(values) -> np.ndarray:
    """Values as an object array of canonical text (``str``), None where missing.

    See :func:`text_codes` and :func:`value_text`: whole numbers without a
    decimal point, surrounding spaces removed, the missing-value words as
    missing.
    """
    return texts_from_codes(*text_codes(values))


def canonical_mapping(mapping: dict) -> dict:
    """The mapping as JSON-ready canonical values (see the module docstring)."""
    out = {}
    for key, val in mapping.items():
        if key == "positive_label":
            val = value_text(val)
        elif isinstance(val, (tuple, list)):
            val = [str(v) for v in val]
        elif isinstance(val, (bool, np.bool_)) or val is None:
            val = None if val is None else bool(val)
        elif isinstance(val, (int, float, np.integer, np.floating)):
            val = float(val)
        elif not isinstance(val, str):
            val = str(val)
        out[key] = val
    return out


def _text_payload(codes: np.ndarray, dictionary: np.ndarray) -> bytes:
    import pyarrow as pa

    arr = pa.array(list(dictionary), type=pa.large_string())
    offsets = np.frombuffer(arr.buffers()[1], dtype="<i8")[arr.offset : arr.offset + len(arr) + 1]
    data = arr.buffers()[2]
    start, end = int(offsets[0]), int(offsets[-1])
    body = b"" if data is None or end == start else memoryview(data)[start:end].tobytes()
    head = f"{len(dictionary)}\x1d".encode()
    return (
        head
        + np.diff(offsets).astype("<i8").tobytes()
        + body
        + np.asarray(codes, dtype="<i8").tobytes()
    )


def _canonical_bytes(values, text: bool, codes=None) -> tuple[str, bytes]:
    if codes is not None:
        return "s", _text_payload(*codes)
    a = values if isinstance(values, pd.Series) else np.asarray(values)
    if not text:
        a = np.asarray(a)
        if a.dtype == np.bool_:
            return "u8", a.astype("<u1").tobytes()
        if a.dtype.kind == "M":
            return "t", a.astype("datetime64[ns]").view("<i8").tobytes()
        if a.dtype.kind in "iuf":
            f = np.asarray(a, dtype="<f8") + 0.0
            f = np.where(np.isnan(f), _NAN, f)
            return "f8", f.tobytes()
    return "s", _text_payload(*text_codes(a))


def fingerprint_arrays(
    arrays: dict[str, np.ndarray | None],
    mapping: dict,
    *,
    text: frozenset | set | tuple = (),
    text_codes_of: dict | None = None,
) -> str:
    """Hex SHA-256 over the named arrays (None entries skipped) and the mapping.

    Parameters
    ----------
    arrays : dict
        Name -> array; arrays of object dtype are hashed as text.
    mapping : dict
        The mapping that produced them (canonicalised by :func:`canonical_mapping`).
    text : collection of str
        Names whose arrays are categorical (groups, clusters): hashed as
        canonical text whatever their dtype, so ``[1, 2]`` and ``["1", "2"]``
        agree. Text is hashed as its :func:`text_codes` (distinct texts in
        order of first appearance, then the code of every row).
    text_codes_of : dict, optional
        Name -> ``(codes, dictionary)`` already computed by
        :func:`text_codes` for that array, to save recomputing it.
    """
    digest = hashlib.sha256()
    text = set(text)
    known = text_codes_of or {}
    for name in sorted(arrays):
        values = arrays[name]
        if values is None:
            continue
        tag, payload = _canonical_bytes(values, name in text, known.get(name))
        digest.update(f"{name}\x1f{tag}\x1f{len(values)}\x1e".encode())
        digest.update(payload)
    digest.update(
        json.dumps(
            canonical_mapping(mapping), sort_keys=True, separators=(",", ":"), allow_nan=False
        ).encode()
    )
    return digest.hexdigest()
