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


#: Mask of the low k bytes of a little-endian 64-bit word, k = 0..8.
_LOW_BYTES = np.array([(1 << (8 * k)) - 1 for k in range(8)] + [(1 << 64) - 1], dtype=np.uint64)
#: Strings up to this many bytes are grouped through 64-bit words; longer ones by Arrow's hashing.
_WORD_BYTES = 32
#: A sample with fewer distinct keys than 1/_FEW of its size is grouped by a hash table.
_FEW = 8


#: Odd multipliers of the 64-bit mixes (speed only: every grouping is checked exactly).
_MIX = (np.uint64(0x9E3779B97F4A7C15), np.uint64(0xBF58476D1CE4E5B9))


def _first_rows(codes: np.ndarray, k: int | None = None) -> np.ndarray:
    """Row of each code's first appearance, for codes numbered in order of first appearance.

    With ``k`` (the number of codes) given, a short head of the rows is
    searched first: few codes usually all appear there.
    """
    if codes.size == 0:
        return np.empty(0, dtype=np.int64)
    sizes = (4096, codes.shape[0]) if k is not None and codes.shape[0] > 4096 else (codes.shape[0],)
    for size in sizes:
        top = np.maximum.accumulate(codes[:size])
        if k is None or top[-1] == k - 1 or size == codes.shape[0]:
            break
    new = np.empty(top.shape[0], dtype=bool)
    new[0] = True
    np.greater(top[1:], top[:-1], out=new[1:])
    return np.flatnonzero(new)


def _n_distinct(values: np.ndarray) -> int:
    """Number of distinct values (one SIMD sort)."""
    s = np.sort(values)
    return int(np.count_nonzero(s[1:] != s[:-1])) + 1 if s.size else 0


def _group_keys(key: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Equal keys -> one code, numbered in order of first appearance: ``(codes, first_rows)``.

    Exact for any keys; only the speed depends on the route. Few distinct
    keys (judged on an even sample): a hash table (``pandas.factorize``),
    cache-resident. Many: random access into a large hash table costs more
    than a SIMD sort, so the keys are sorted (:func:`_sorted_groups`).
    """
    n = key.shape[0]
    step = max(1, n // 65536)
    sample = key[::step]
    if n < 4096 or _n_distinct(sample) * _FEW <= sample.shape[0]:
        codes, uniques = pd.factorize(key, sort=False)
        codes = np.asarray(codes, dtype=np.int64)
        return codes, _first_rows(codes, len(uniques))
    return _sorted_groups(key)


def _sorted_groups(key: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_group_keys` by sorting: runs of equal keys, renumbered by their first row.

    One plain sort of 64-bit words (high bits: a hash of the key; low bits:
    the row) brings each key's rows together in row order, so a run's first
    row is its first appearance; every run is then checked to hold one key
    (two keys sharing the hash bits would show there) and, if one does not,
    the rows are grouped by an argsort of the keys themselves instead.
    """
    n = key.shape[0]
    row_bits = max(1, int(n - 1).bit_length())
    if row_bits <= 32:
        mask = np.uint64((1 << row_bits) - 1)
        h = key * _MIX[0]
        h ^= h >> np.uint64(29)
        h *= _MIX[1]
        h &= ~mask
        h |= np.arange(n, dtype=np.uint64)
        h.sort()
        rows = (h & mask).astype(np.int64)
        h >>= np.uint64(row_bits)
        same_hash = h[1:] == h[:-1]
        del h
        ks = key[rows]
        # equal keys have equal hashes, so the runs are right unless some equal hashes hide unequal keys
        if np.count_nonzero(ks[1:] == ks[:-1]) == np.count_nonzero(same_hash):
            return _number_runs(rows, np.flatnonzero(~same_hash), n, first_is_min=True)
    order = np.argsort(key)
    ks = key[order]
    return _number_runs(order, np.flatnonzero(ks[1:] != ks[:-1]), n, first_is_min=False)


def _number_runs(order: np.ndarray, breaks: np.ndarray, n: int, *, first_is_min: bool):
    """Codes by first appearance from rows ``order`` grouped in runs ending at ``breaks``."""
    starts = np.empty(breaks.shape[0] + 1, dtype=np.int64)
    starts[0] = 0
    np.add(breaks, 1, out=starts[1:])
    # each run's first row (the rows of a run are in row order when first_is_min)
    first = order[starts] if first_is_min else np.minimum.reduceat(order, starts)
    rank = np.argsort(first)  # runs in order of first appearance
    code_of_run = np.empty(rank.shape[0], dtype=np.int64)
    code_of_run[rank] = np.arange(rank.shape[0], dtype=np.int64)
    sizes = np.diff(np.append(starts, n))
    codes = np.empty(n, dtype=np.int64)
    codes[order] = np.repeat(code_of_run, sizes)
    return codes, first[rank]


def _string_groups(arr) -> tuple[np.ndarray, np.ndarray] | None:
    """Exact grouping of a large_string array's values (nulls one group of their own).

    Each string is read as up to four little-endian 64-bit words (bytes past
    its end zeroed) plus its length (-1 for null). Strings of at most 7
    bytes are one word with the length in the top byte: an injective key,
    grouped in one compiled pass (:func:`core.text_kernels.group_short_keys`).
    Longer ones are grouped by a 64-bit mix of words and length, and every
    row is then checked equal, word by word, to its group's first row (a
    hash collision would show there). Returns ``(codes, first_rows)`` as
    :func:`_group_keys`, or None when the strings are too long or a
    collision was found (the caller then uses Arrow's hashing).
    """
    n = len(arr)
    offsets = np.frombuffer(arr.buffers()[1], dtype="<i8")[arr.offset : arr.offset + n + 1]
    lengths = np.diff(offsets)
    longest = int(lengths.max()) if n else 0
    if longest > _WORD_BYTES:
        return None
    if longest <= 7:  # one injective key per value: one compiled pass (core.text_kernels)
        from core.text_kernels import group_short_keys

        buf = arr.buffers()[2]
        data = np.frombuffer(buf, dtype=np.uint8) if buf is not None else np.zeros(1, np.uint8)
        valid = (np.ones(n, dtype=np.bool_) if not arr.null_count
                 else np.asarray(arr.is_valid().to_numpy(zero_copy_only=False), dtype=np.bool_))
        return group_short_keys(np.ascontiguousarray(offsets), data, valid)
    nwords = max(1, -(-longest // 8))
    lo, hi = int(offsets[0]), int(offsets[-1])
    padded = np.zeros(hi - lo + 8 * nwords, dtype=np.uint8)
    if hi > lo:
        padded[: hi - lo] = np.frombuffer(arr.buffers()[2], dtype=np.uint8)[lo:hi]
    # every byte position as the start of an (unaligned) little-endian 64-bit word
    at = np.ndarray(shape=(padded.shape[0] - 7,), dtype="<u8", buffer=padded, strides=(1,))
    starts = offsets[:-1] - lo if lo else offsets[:-1]
    length_code = lengths  # -1 for null (a null's length is 0 in the offsets)
    if arr.null_count:
        length_code = lengths.copy()
        length_code[~np.asarray(arr.is_valid())] = -1
    words = []
    for j in range(nwords):
        wj = at[starts + 8 * j] if j else at[starts]
        wj &= _LOW_BYTES[np.clip(lengths - 8 * j, 0, 8)]
        words.append(wj)
    key = length_code.astype(np.uint64) * _MIX[0]
    for wj in words:
        key ^= wj
        key *= _MIX[1]
        key ^= key >> np.uint64(31)
    codes, first = _group_keys(key)
    rep = first[codes]
    same = length_code[rep] == length_code
    for wj in words:
        same &= wj[rep] == wj
    if not same.all():
        return None
    return codes, first


def _arrow_text_codes(arr, *, with_arrow: bool = False):
    """text_codes of a pyarrow string array, vectorised.

    The raw strings are grouped first (codes in order of first appearance:
    :func:`_string_groups`, or Arrow's ``dictionary_encode`` for long
    strings); only the distinct strings are then trimmed and checked for
    missing-value words, and re-encoded when that merges or removes any.
    Re-encoding the dictionary in its own order keeps the codes numbered by
    first appearance in the rows. ``with_arrow``: also return the
    dictionary as an Arrow array (for the fingerprint's payload).
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks() if arr.num_chunks != 1 else arr.chunk(0)
    if not pa.types.is_large_string(arr.type):
        arr = arr.cast(pa.large_string())
    groups = _string_groups(arr)
    if groups is None:
        enc = arr.dictionary_encode()
        codes = enc.indices.fill_null(-1).to_numpy(zero_copy_only=False).astype(np.int64)
        raw = enc.dictionary
    else:
        codes, first = groups
        raw = arr.take(pa.array(first, type=pa.int64()))  # holds one null when the rows do
    clean = pc.utf8_trim_whitespace(raw)
    words = pc.is_in(clean, value_set=pa.array(sorted(_MISSING_WORDS), type=pa.large_string()))
    if raw.null_count or pc.any(words).as_py() or not clean.equals(raw):
        clean = pc.if_else(words, pa.scalar(None, type=clean.type), clean)
        enc2 = clean.dictionary_encode()
        remap = np.append(enc2.indices.fill_null(-1).to_numpy(zero_copy_only=False), -1)
        codes = remap.astype(np.int64)[codes]
        clean = enc2.dictionary
    dictionary = clean.to_numpy(zero_copy_only=False).astype(object)
    if with_arrow:
        return codes, dictionary, clean
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


def text_codes(values, *, with_arrow: bool = False) -> tuple:
    """Canonical text of each value as ``(codes, dictionary)``.

    ``dictionary`` holds the distinct canonical texts (``str``) in order of
    first appearance and ``codes`` (int64) indexes it, -1 where the value is
    missing -- so ``(codes, dictionary)`` is a function of the sequence of
    canonical texts alone, whatever the source type. Vectorised: text is
    grouped through 64-bit words of its bytes (:func:`_string_groups`) or
    Arrow's hashing, then trimmed and checked for missing-value words on the
    distinct strings only (pyarrow compute); integers are grouped by value
    and only their distinct values converted; other numbers are factorised
    and their distinct values converted; mixed Python objects (an Excel
    column of numbers and text) are factorised and each distinct value
    converted by :func:`value_text`.

    ``with_arrow``: return ``(codes, dictionary, arrow)`` where ``arrow`` is
    the dictionary as a pyarrow string array when the route made one (else
    None); :func:`fingerprint_arrays` hashes it without a round trip.
    """
    out = _text_codes(values)
    if with_arrow:
        return out if len(out) == 3 else (*out, None)
    return out[:2]


def _text_codes(values) -> tuple:
    import pyarrow as pa

    ser = _as_series(values)
    dtype = ser.dtype
    if isinstance(dtype, pd.CategoricalDtype):
        ser = ser.astype(object)
        dtype = ser.dtype
    if pd.api.types.is_bool_dtype(dtype):
        codes, uniques = pd.factorize(ser, use_na_sentinel=True)
        return _merge(np.asarray(codes, dtype=np.int64), [value_text(u) for u in uniques])
    if isinstance(dtype, np.dtype) and dtype.kind in "iu" and dtype.itemsize == 8:
        # distinct integers have distinct texts: no merging, no Python loop
        ints = np.ascontiguousarray(ser.to_numpy())
        codes, first = _group_keys(ints.view(np.uint64))
        texts = pa.array(ints[first]).cast(pa.string())
        return codes, texts.to_numpy(zero_copy_only=False).astype(object), texts
    if pd.api.types.is_numeric_dtype(dtype):
        codes, uniques = pd.factorize(ser, use_na_sentinel=True)
        return _merge(np.asarray(codes, dtype=np.int64), _numeric_texts(np.asarray(uniques)))
    arrow = getattr(ser.array, "_pa_array", None)
    if arrow is not None and (
        pa.types.is_string(arrow.type) or pa.types.is_large_string(arrow.type)
    ):
        return _arrow_text_codes(arrow, with_arrow=True)
    if dtype == object:
        try:
            arr = pa.array(ser.to_numpy(dtype=object), from_pandas=True)
        except (pa.ArrowInvalid, pa.ArrowTypeError):
            arr = None
        if arr is not None and (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
            return _arrow_text_codes(arr, with_arrow=True)
        if arr is not None and (pa.types.is_integer(arr.type) or pa.types.is_floating(arr.type)):
            return _text_codes(pd.Series(arr.to_numpy(zero_copy_only=False)))
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


def _text_payload(codes: np.ndarray, dictionary) -> list:
    """The bytes of a text column, as parts hashed in turn (see the module docstring).

    ``dictionary`` is the object array of :func:`text_codes`, or the same
    strings as a pyarrow array (no round trip through Python strings).
    """
    import pyarrow as pa

    if isinstance(dictionary, (pa.Array, pa.ChunkedArray)):
        arr = dictionary
        if isinstance(arr, pa.ChunkedArray):
            arr = arr.combine_chunks()
        if not pa.types.is_large_string(arr.type):
            arr = arr.cast(pa.large_string())
    else:
        arr = pa.array(list(dictionary), type=pa.large_string())
    offsets = np.frombuffer(arr.buffers()[1], dtype="<i8")[arr.offset : arr.offset + len(arr) + 1]
    data = arr.buffers()[2]
    start, end = int(offsets[0]), int(offsets[-1])
    body = b"" if data is None or end == start else memoryview(data)[start:end]
    return [
        f"{len(arr)}\x1d".encode(),
        np.diff(offsets).astype("<i8"),
        body,
        np.ascontiguousarray(codes, dtype="<i8"),
    ]


def _canonical_bytes(values, text: bool, codes=None) -> tuple[str, list]:
    """Type tag and the canonical bytes of one array, as parts to hash in turn."""
    if codes is not None:
        return "s", _text_payload(*codes)
    a = values if isinstance(values, pd.Series) else np.asarray(values)
    if not text:
        a = np.asarray(a)
        if a.dtype == np.bool_:
            return "u8", [np.ascontiguousarray(a).view("<u1")]  # True/False stored as 1/0
        if a.dtype.kind == "M":
            return "t", [np.ascontiguousarray(a, dtype="datetime64[ns]").view("<i8")]
        if a.dtype.kind in "iuf":
            f = np.asarray(a, dtype="<f8") + 0.0  # a new array, -0.0 written as +0.0
            nan = np.isnan(f)
            if nan.any():
                f[nan] = _NAN
            return "f8", [f]
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
        :func:`text_codes` for that array, to save recomputing it; the
        dictionary may be given as a pyarrow string array of the same texts.
    """
    digest = hashlib.sha256()
    text = set(text)
    known = text_codes_of or {}
    for name in sorted(arrays):
        values = arrays[name]
        if values is None:
            continue
        tag, parts = _canonical_bytes(values, name in text, known.get(name))
        digest.update(f"{name}\x1f{tag}\x1f{len(values)}\x1e".encode())
        for part in parts:
            digest.update(part)
    digest.update(
        json.dumps(
            canonical_mapping(mapping), sort_keys=True, separators=(",", ":"), allow_nan=False
        ).encode()
    )
    return digest.hexdigest()
