"""From a file to a validated :class:`~core.dataset.Dataset`: mapping and checks.

:func:`load_dataset` reads a file (see :mod:`core.reading`) or takes a
:class:`~core.reading.RawTable` already read, applies a
:class:`~core.dataset.Mapping` (which column is the score, the label and its
event value, weights, groups, cluster id, times, case cost -- or, for a count
table, the score with its event and non-event totals) and checks every mapped
column. Every problem raises :class:`~core.errors.InputError` with one
message naming the column, the problem, how many rows and the first few rows
(1-based data rows, the header excluded). Problems that do not stop the
analysis become :class:`~core.dataset.IntakeWarning` entries with a stable
``code`` (see :data:`WARNING_CODES`).

Nothing is dropped silently: rows with a missing score are an error unless
the mapping says ``drop_missing_scores=True``; then their count and first
positions travel in the Dataset (``dropped_rows``, ``dropped_positions``) and
in a ``dropped_missing_scores`` warning, and so into the memo. Warnings never
quote values from the rows (they may be personal data); errors quote a few
offending values so the user can find them.

All checks are vectorised (pandas / numpy over whole columns); only the
distinct values of a label or group column are looked at one by one.

The demo scenarios (invented data, see ``sample_data/README.md``) are listed
in :data:`DEMOS` with their ready mappings; :func:`demo_path` finds a demo
file and :func:`load_demo` loads it.
"""

from __future__ import annotations

import re
import warnings as _pywarnings
from collections.abc import Mapping as _AbcMapping
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from core.dataset import WEIGHT_KINDS, Dataset, IntakeWarning, Mapping
from core.errors import InputError, format_rows
from core.fingerprint import recode, text_codes, texts_from_codes, value_text
from core.reading import MISSING_TEXT, RawTable, missing_column_error, read_table, text_to_number

__all__ = [
    "DEMOS",
    "LARGE_CLUSTER_ROWS",
    "MIN_EVENTS",
    "WARNING_CODES",
    "Demo",
    "RawTable",
    "demo_path",
    "label_values",
    "load_count_table",
    "load_dataset",
    "load_demo",
    "mapped_columns",
    "read_table",
    "suggest_mapping",
]

#: Fewer events than this draws the ``few_events`` warning (Collins et al., Stat Med 2016).
MIN_EVENTS = 100
#: A cluster with more rows than this draws the ``large_clusters`` warning.
LARGE_CLUSTER_ROWS = 10
_SHOW_DROPPED = 100
_MISSING_SET = frozenset(MISSING_TEXT)
_MISSING_ARROW = pa.array(sorted(MISSING_TEXT), type=pa.string())

#: Every warning code the intake can emit, with what it means.
WARNING_CODES = {
    "dropped_missing_scores": "rows with a missing score were dropped, as the mapping asked",
    "scores_outside_unit_interval": "scores are not probabilities; calibration features stay off",
    "few_events": f"fewer than {MIN_EVENTS} events: every estimate is uncertain",
    "float32_scores": "the source stored scores as 32-bit floats",
    "large_clusters": f"some clusters hold more than {LARGE_CLUSTER_ROWS} rows",
    "encoding_fallback": "the file was not UTF-8 and was read as Windows-1252",
    "group_missing": "a group column has rows without a value",
    "label_whitespace": "label values differed only by surrounding spaces and were merged",
    "outcome_time_missing": "events without an outcome time",
    "outcome_before_score": "outcome times earlier than the score time",
    "outcome_after_horizon": "events whose outcome came after the horizon",
}

_ROLES_ROWS = ("score", "label", "weight", "cluster", "score_time", "outcome_time", "case_cost")
_ROLES_COUNTS = ("score", "events", "non_events", "event_cost", "events_sq", "non_events_sq")
_ROLE_WORDS = {
    "score": "score",
    "label": "label",
    "weight": "weight",
    "cluster": "cluster id",
    "score_time": "score time",
    "outcome_time": "outcome time",
    "case_cost": "case cost",
    "events": "event count",
    "non_events": "non-event count",
    "event_cost": "event cost total",
    "events_sq": "events' squared-weight sum",
    "non_events_sq": "non-events' squared-weight sum",
}


# =========================================================================== mapping


def _as_mapping(mapping) -> Mapping:
    if isinstance(mapping, Mapping):
        return mapping
    if isinstance(mapping, _AbcMapping):
        return Mapping.from_dict(dict(mapping))
    raise InputError("mapping", f"must be a Mapping or a dict, got {type(mapping).__name__}")


def _blank_to_none(m: Mapping) -> Mapping:
    changes = {}
    for name in _ROLES_ROWS + _ROLES_COUNTS:
        v = getattr(m, name)
        if isinstance(v, str) and not v.strip():
            changes[name] = None
    if isinstance(m.groups, (list, str)):
        changes["groups"] = (m.groups,) if isinstance(m.groups, str) else tuple(m.groups)
    for name in ("extra_scores", "extra_lower_is_riskier"):
        v = getattr(m, name)
        if isinstance(v, str):
            v = (v,)
        if not isinstance(v, tuple) or any(not isinstance(c, str) or not c.strip() for c in v):
            changes[name] = tuple(c for c in (v or ()) if isinstance(c, str) and c.strip())
    return replace(m, **changes) if changes else m


def _check_extra_scores(m: Mapping, used: dict) -> None:
    """Extra score columns: rows only, distinct from every other role, directions among them."""
    if not m.extra_scores and not m.extra_lower_is_riskier:
        return
    if m.kind != "rows":
        raise InputError(
            m.extra_scores[0] if m.extra_scores else m.extra_lower_is_riskier[0],
            "is an extra score, but a count table holds one score only; compare scores on the "
            "rows (kind='rows')",
        )
    seen = set()
    for col in m.extra_scores:
        if col == m.score:
            raise InputError(
                col,
                "is the score (the reference model) and cannot also be an extra score; choose "
                "a different column to compare with it",
            )
        if col in seen:
            raise InputError(col, "is listed twice among the extra score columns")
        seen.add(col)
        if col in used:
            raise InputError(
                col,
                f"is mapped as both the {_ROLE_WORDS[used[col]]} and an extra score; each needs "
                "its own column",
            )
        if col in m.groups:
            raise InputError(col, "is an extra score; it cannot also be a group column")
    stray = [c for c in m.extra_lower_is_riskier if c not in seen]
    if stray:
        raise InputError(
            stray[0],
            "is declared lower-is-riskier but is not among the extra score columns",
        )


def _check_mapping(m: Mapping) -> Mapping:
    """Shape checks that need no data; returns the mapping normalised."""
    m = _blank_to_none(m)
    if m.kind not in ("rows", "counts"):
        raise InputError("kind", f"must be 'rows' or 'counts', got {m.kind!r}")
    if not m.score:
        raise InputError("score", "no score column is chosen")
    if m.kind == "rows":
        if not m.label:
            raise InputError("label", "no label column is chosen")
        extra = [r for r in _ROLES_COUNTS[1:] if getattr(m, r) is not None]
        if extra:
            raise InputError(
                extra[0], "belongs to a count table, but the mapping is for rows (kind='rows')"
            )
        if m.weight is not None and m.weight_kind not in WEIGHT_KINDS:
            raise InputError(
                "weight_kind",
                f"must be 'frequency' or 'sampling' when a weight column "
                f"is chosen, got {m.weight_kind!r}",
            )
        if m.weight is None and m.weight_kind is not None:
            m = replace(m, weight_kind=None)
        if m.outcome_horizon_days is not None and m.outcome_time is None:
            # a horizon only means something with outcome times
            m = replace(m, outcome_horizon_days=None)
        if m.outcome_horizon_days is not None:
            h = m.outcome_horizon_days
            ok = isinstance(h, (int, float, np.integer, np.floating)) and not isinstance(h, bool)
            if not ok or not np.isfinite(float(h)) or float(h) <= 0:
                raise InputError(
                    "outcome_horizon_days", f"must be a positive number of days, got {h!r}"
                )
            m = replace(m, outcome_horizon_days=float(h))
        roles = _ROLES_ROWS
    else:
        for r in ("events", "non_events"):
            if not getattr(m, r):
                raise InputError(
                    r,
                    "no column is chosen; a count table needs the score, the "
                    "event count and the non-event count",
                )
        extra = [r for r in _ROLES_ROWS[1:] if getattr(m, r) is not None]
        if extra:
            raise InputError(
                extra[0],
                "is a per-case column, but the mapping is for a count table (kind='counts')",
            )
        if m.outcome_horizon_days is not None:
            raise InputError(
                "outcome_horizon_days",
                "is a per-case setting, but the mapping is for a count table (kind='counts')",
            )
        roles = _ROLES_COUNTS
        if m.weight_kind is not None:
            m = replace(m, weight_kind=None)
    used: dict[str, str] = {}
    for r in roles:
        col = getattr(m, r)
        if col is None:
            continue
        if col in used:
            raise InputError(
                col,
                f"is mapped as both the {_ROLE_WORDS[used[col]]} and the "
                f"{_ROLE_WORDS[r]}; each needs its own column",
            )
        used[col] = r
    seen = set()
    for g in m.groups:
        if g in seen:
            raise InputError(g, "is listed twice among the group columns")
        seen.add(g)
        if used.get(g) in ("score", "label", "events", "non_events"):
            raise InputError(g, f"is the {_ROLE_WORDS[used[g]]}; it cannot also be a group column")
    _check_extra_scores(m, used)
    return m


def mapped_columns(m: Mapping) -> dict[str, str]:
    """The file columns a mapping reads, each with the part it plays ("score column", ...).

    Readers pass its keys as ``columns=`` so that a wide file loads only what is mapped.
    """
    m = _as_mapping(m)
    roles = _ROLES_ROWS if m.kind == "rows" else _ROLES_COUNTS
    out = {getattr(m, r): _ROLE_WORDS[r] for r in roles if getattr(m, r) is not None}
    for g in m.groups:
        out.setdefault(g, "group column")
    for c in m.extra_scores:
        out.setdefault(c, "extra score")
    return out


# =========================================================================== column helpers


def _n(k: int, noun: str) -> str:
    """'1 row', '2 rows', '1,204 events'."""
    return f"{k:,} {noun}" + ("" if k == 1 else "s")


def _v(k: int, one: str, many: str) -> str:
    return one if k == 1 else many


class _Rows:
    """Positions of the kept rows, to report 1-based source rows."""

    def __init__(self, n: int, keep: np.ndarray | None = None):
        self.n = n
        self.keep = keep

    def bad(self, mask: np.ndarray) -> np.ndarray:
        """0-based source positions where ``mask`` holds among the kept rows."""
        if self.keep is not None:
            mask = mask & self.keep
        return np.flatnonzero(mask)


def _examples(ser: pd.Series, mask: np.ndarray, k: int = 3) -> str:
    vals = pd.unique(ser[mask].astype("str"))[:k]
    return ", ".join(repr(str(v)) for v in vals)


def _is_text(ser: pd.Series) -> bool:
    return (
        pd.api.types.is_string_dtype(ser.dtype)
        or ser.dtype == object
        or isinstance(ser.dtype, pd.CategoricalDtype)
    )


def _missing_text_mask(ser: pd.Series) -> np.ndarray:
    """Missing cells of a text column: nulls and the missing-value words."""
    miss = ser.isna().to_numpy()
    arrow = getattr(ser.array, "_pa_array", None)
    if arrow is not None and (
        pa.types.is_string(arrow.type) or pa.types.is_large_string(arrow.type)
    ):
        value_set = _MISSING_ARROW.cast(arrow.type)
        words = pc.is_in(pc.utf8_trim_whitespace(arrow), value_set=value_set)
        return miss | words.to_numpy(zero_copy_only=False).astype(bool, copy=False)
    codes, uniques = pd.factorize(ser, use_na_sentinel=True)
    if len(uniques):
        word = np.array([str(u).strip() in _MISSING_SET for u in uniques] + [False])
        miss = miss | word[codes]
    return miss


@dataclass
class _Numbers:
    values: np.ndarray  # float64, NaN where missing or bad
    missing: np.ndarray  # bool
    not_number: np.ndarray  # bool: present but not a number
    infinite: np.ndarray  # bool


def _numbers(ser: pd.Series, *, decimal: str, thousands: str | None) -> _Numbers:
    n = ser.shape[0]
    if pd.api.types.is_bool_dtype(ser.dtype):
        v = ser.to_numpy(dtype=np.float64)
        z = np.zeros(n, dtype=bool)
        return _Numbers(v, z, z.copy(), z.copy())
    if pd.api.types.is_numeric_dtype(ser.dtype) and not isinstance(ser.dtype, pd.CategoricalDtype):
        v = ser.to_numpy(dtype=np.float64, na_value=np.nan)
        miss = np.isnan(v)
        inf = np.isinf(v)
        return _Numbers(v, miss, np.zeros(n, dtype=bool), inf)
    if pd.api.types.is_datetime64_any_dtype(ser.dtype) or pd.api.types.is_timedelta64_dtype(
        ser.dtype
    ):
        miss = ser.isna().to_numpy()
        return _Numbers(np.full(n, np.nan), miss, ~miss, np.zeros(n, dtype=bool))
    if isinstance(ser.dtype, pd.CategoricalDtype):
        ser = ser.astype(object)
    miss = _missing_text_mask(ser)
    # numbers stored as Python numbers in an object column (Excel) convert directly
    num = pd.to_numeric(ser, errors="coerce") if ser.dtype == object else None
    if num is None or num.isna().to_numpy()[~miss].any():
        txt = text_to_number(ser, decimal, thousands)
        num = txt if num is None else num.fillna(txt)
    v = num.to_numpy(dtype=np.float64, na_value=np.nan)
    v = np.where(miss, np.nan, v)
    bad = ~miss & np.isnan(v)
    inf = np.isinf(v)
    return _Numbers(v, miss, bad, inf)


def _not_numbers_error(
    column: str,
    ser: pd.Series,
    positions: np.ndarray,
    mask: np.ndarray,
    info,
    what: str = "numbers",
) -> InputError:
    if pd.api.types.is_datetime64_any_dtype(ser.dtype):
        return InputError(column, f"holds dates or times, not {what}", positions)
    ex = _examples(ser, mask)
    hint = ""
    sample = [s.strip() for s in pd.unique(ser[mask].astype("str"))[:50]]
    if info.decimal != "," and any(
        re.match(r"^[+-]?\d*,\d+$", s) or re.match(r"^[+-]?\d{1,3}(\.\d{3})+,\d+$", s)
        for s in sample
    ):
        if info.format in ("csv", "tsv"):
            hint = "They look like numbers written with a decimal comma: choose decimal=','"
        else:
            hint = (
                "They look like numbers written with a decimal comma, stored as text: store "
                "them as numbers"
            )
    return InputError(column, f"holds values that are not {what}, e.g. {ex}", positions, hint=hint)


def _check_formulas(raw: RawTable, columns: dict[str, str]) -> None:
    for col in columns:
        pos = raw.info.formula_cells.get(col)
        if pos:
            raise InputError(
                col,
                "holds formulas without a saved result (the workbook was written by "
                "a program that does not calculate formulas)",
                list(pos),
                hint="Open and save it in a spreadsheet program, or export the sheet to CSV",
            )


def _times(ser: pd.Series, column: str, rows: _Rows, *, required: np.ndarray | None,
           warnings: list | None = None) -> np.ndarray:
    """datetime64[ns] (UTC-naive) of a time column; unparseable values raise.

    When every date reads both month first and day first (no day above 12)
    and the two readings differ, the month-first one is kept and
    ``warnings`` gets an ``ambiguous_dates`` warning saying so.
    """
    if pd.api.types.is_datetime64_any_dtype(ser.dtype):
        if getattr(ser.dtype, "tz", None) is not None:
            ser = ser.dt.tz_convert("UTC").dt.tz_localize(None)
        out = ser.to_numpy(dtype="datetime64[ns]")
    elif pd.api.types.is_numeric_dtype(ser.dtype) or pd.api.types.is_bool_dtype(ser.dtype):
        present = ser.notna().to_numpy()
        bad = rows.bad(present)
        if bad.size:
            raise InputError(
                column,
                "holds numbers, not dates or times",
                bad,
                hint="Write times as ISO 8601, e.g. 2025-03-01 14:30 (an Excel column "
                "formatted as dates is read as dates)",
            )
        out = np.full(ser.shape[0], np.datetime64("NaT"), dtype="datetime64[ns]")
    else:
        miss = _missing_text_mask(ser)
        work = ser.where(~miss) if miss.any() else ser
        best = None
        # ISO 8601, then the format inferred from the first value, then the same read day
        # first (13/01/2025): a first value such as 02/01/2025 reads as month first and
        # leaves every later day above 12 unparsed; the reading with fewest failures wins
        for fmt, dayfirst in (("ISO8601", False), (None, False), (None, True)):
            try:
                with _pywarnings.catch_warnings():  # "could not infer format": we count failures
                    _pywarnings.simplefilter("ignore", UserWarning)
                    parsed = pd.to_datetime(work, errors="coerce", utc=True, format=fmt,
                                            dayfirst=dayfirst)
            except (ValueError, TypeError):
                continue
            nbad = int((parsed.isna().to_numpy() & ~miss).sum())
            if best is None or nbad < best[0]:
                best = (nbad, parsed, fmt, dayfirst)
            if nbad == 0:
                break
        if best is None:
            parsed = pd.Series(pd.NaT, index=ser.index, dtype="datetime64[ns, UTC]")
        else:
            parsed = best[1]
            if warnings is not None and best[0] == 0 and best[2] is None and not best[3]:
                _warn_ambiguous_dates(work, parsed, miss, column, warnings)
        bad_mask = parsed.isna().to_numpy() & ~miss
        bad = rows.bad(bad_mask)
        if bad.size:
            raise InputError(
                column,
                f"holds values that are not dates or times, e.g. "
                f"{_examples(ser, bad_mask & (rows.keep if rows.keep is not None else True))}",
                bad,
                hint="Write times as ISO 8601, e.g. 2025-03-01 14:30",
            )
        out = parsed.dt.tz_localize(None).to_numpy(dtype="datetime64[ns]")
    if required is not None:
        miss = rows.bad(np.isnat(out) & required)
        if miss.size:
            raise InputError(column, "has missing values", miss, hint="Every case needs a time")
    return out


def _warn_ambiguous_dates(work: pd.Series, parsed: pd.Series, miss: np.ndarray, column: str,
                          warnings: list) -> None:
    """Warn when a month-first reading of every date is also a different, valid day-first one.

    The first 1,000 dates are read day first before all of them, so a month-first column
    with any day above 12 among them costs a short parse, not a second full one.
    """

    def day_first(values: pd.Series):
        with _pywarnings.catch_warnings():
            _pywarnings.simplefilter("ignore", UserWarning)
            try:
                return pd.to_datetime(values, errors="coerce", utc=True, dayfirst=True)
            except (ValueError, TypeError):
                return None

    head = day_first(work[~miss].iloc[:1_000])
    if head is None or bool(head.isna().any()):
        return  # some day is above 12 read day first: the dates are month first
    other = day_first(work)
    if other is None or bool((other.isna().to_numpy() & ~miss).any()):
        return
    differ = (other != parsed).to_numpy() & ~miss
    if not differ.any():
        return
    k = int(np.flatnonzero(differ)[0])
    warnings.append(
        IntakeWarning(
            "ambiguous_dates",
            f"{column}: every date can be read month first or day first (no day is above 12); "
            f"they were read month first ({work.iloc[k]} as "
            f"{parsed.iloc[k].strftime('%Y-%m-%d')}). If they are day first, write them as "
            f"ISO 8601 (YYYY-MM-DD) and load the file again",
            column,
        )
    )


# =========================================================================== labels


def _value_list(uniques, counts, order=None, limit: int = 6) -> str:
    order = np.argsort(-np.asarray(counts), kind="stable") if order is None else order
    parts = []
    for i in order[:limit]:
        u = uniques[i]
        t = value_text(u)
        shown = repr(t) if isinstance(u, str) else t
        c = int(counts[i])
        parts.append(f"{shown} ({c:,} row{'s' if c != 1 else ''})")
    if len(order) > limit:
        parts.append(f"{len(order) - limit} more")
    if len(parts) > 1:
        return ", ".join(parts[:-1]) + " and " + parts[-1]
    return parts[0] if parts else "none"


def _label_codes(ser: pd.Series) -> tuple[np.ndarray, list, bool]:
    """(codes with -1 for missing, distinct values, whether spaces were merged)."""
    if isinstance(ser.dtype, pd.CategoricalDtype):
        ser = ser.astype(object)
    codes, uniques = pd.factorize(ser, use_na_sentinel=True)
    codes = np.asarray(codes, dtype=np.int64)
    uniques = list(uniques)
    merged = False
    if uniques and any(isinstance(u, str) for u in uniques):
        # distinct raw values that differ only by surrounding spaces are one value
        keys: dict = {}
        remap = np.full(len(uniques) + 1, -1, dtype=np.int64)
        new_uniques: list = []
        for i, u in enumerate(uniques):
            t = u.strip() if isinstance(u, str) else u
            if isinstance(t, str) and t in _MISSING_SET:
                continue  # a missing-value word: code -1
            key = (type(t).__name__, t)
            if key in keys:
                merged = True
            else:
                keys[key] = len(new_uniques)
                new_uniques.append(t)
            remap[i] = keys[key]
        codes = remap[codes]
        uniques = new_uniques
    return codes, uniques, merged


def _match_positive(uniques: list, present: np.ndarray, positive) -> int | None:
    """Index of the distinct value that the event value names, or None."""
    idx = [i for i in range(len(uniques)) if present[i]]
    if positive is None:
        return None
    if isinstance(positive, str):
        p = positive.strip()
    else:
        p = positive
    p_text = value_text(p)
    if p_text is None:
        return None
    texts = {i: value_text(uniques[i]) for i in idx}
    hits = [i for i in idx if texts[i] == p_text]
    if len(hits) == 1:
        return hits[0]
    # numbers written differently ("1" for 1.0, "1.00"; True for 1)
    try:
        pf = float(p) if isinstance(p, (bool, np.bool_)) else float(p_text)
    except ValueError:
        pf = None
    if pf is not None:
        hits = [
            i
            for i in idx
            if isinstance(uniques[i], (int, float, np.integer, np.floating))
            and not isinstance(uniques[i], (bool, np.bool_))
            and float(uniques[i]) == pf
        ]
        if len(hits) == 1:
            return hits[0]
    folded = p_text.casefold()
    hits = [i for i in idx if texts[i] is not None and texts[i].casefold() == folded]
    if len(hits) == 1:
        return hits[0]
    if all(isinstance(uniques[i], (bool, np.bool_)) for i in idx):
        truthy = {"true", "1", "yes", "y", "t"}
        falsy = {"false", "0", "no", "n", "f"}
        want = True if folded in truthy else False if folded in falsy else None
        if want is not None:
            hits = [i for i in idx if bool(uniques[i]) is want]
            if len(hits) == 1:
                return hits[0]
    return None


def _zero_one_labels(ser: pd.Series, positive, rows: _Rows):
    """:func:`_labels` for the common case in two passes: a 0/1 (or boolean) column with
    both values present, every row kept and an event value that names one of them;
    None in any other case (the general path then gives the same answer or message)."""
    dtype = ser.dtype
    if rows.keep is not None or not isinstance(dtype, np.dtype) or dtype.kind not in "iub":
        return None
    if positive is None or (isinstance(positive, str) and not positive.strip()):
        return None
    v = ser.to_numpy()
    n = v.shape[0]
    if dtype.kind == "b":
        ones = int(np.count_nonzero(v))
        zero_one = True
    else:
        lo, hi = v.min(), v.max()
        zero_one = lo == 0 and hi == 1
        ones = int(np.count_nonzero(v)) if zero_one else 0
    if not zero_one or ones in (0, n):
        return None
    first = v[0]
    uniques = [first, ~first if dtype.kind == "b" else 1 - first]  # order of first appearance
    hit = _match_positive(uniques, np.ones(2, dtype=bool), positive)
    if hit is None:
        return None
    matched = uniques[hit].item() if isinstance(uniques[hit], np.generic) else uniques[hit]
    y = v.astype(bool) if bool(uniques[hit]) else ~v.astype(bool)
    return y, matched, False


def _labels(ser: pd.Series, column: str, positive, rows: _Rows) -> tuple[np.ndarray, object, bool]:
    fast = _zero_one_labels(ser, positive, rows)
    if fast is not None:
        return fast
    codes, uniques, merged = _label_codes(ser)
    missing = rows.bad(codes < 0)
    if missing.size:
        raise InputError(
            column,
            "has missing values",
            missing,
            hint="Every case needs a label; fill them in or remove those rows",
        )
    use = codes if rows.keep is None else codes[rows.keep]
    counts = np.bincount(use, minlength=len(uniques))
    present = counts > 0
    k = int(present.sum())
    order = [i for i in np.argsort(-counts, kind="stable") if present[i]]
    listing = _value_list(uniques, counts, order)
    if k != 2:
        if k < 2:
            raise InputError(
                column,
                f"has only one value ({listing}); it needs exactly two: the event "
                f"and the non-event",
            )
        rare = np.zeros(len(uniques) + 1, dtype=bool)
        rare[order[2:]] = True
        raise InputError(
            column,
            f"has {k} distinct values ({listing}); it needs exactly two: the event "
            f"and the non-event",
            rows.bad(rare[codes]),
            hint="Recode it to two values, or choose another label column",
        )
    if positive is None or (isinstance(positive, str) and not positive.strip()):
        raise InputError(
            column, f"needs an event value: which of its values ({listing}) marks the event?"
        )
    hit = _match_positive(uniques, present, positive)
    if hit is None:
        raise InputError(
            column, f"has no value matching the event value {positive!r}; its values are {listing}"
        )
    matched = uniques[hit]
    if isinstance(matched, np.generic):
        matched = matched.item()
    if isinstance(matched, float) and matched.is_integer():
        matched = int(matched)
    return codes == hit, matched, merged


# =========================================================================== public: helpers


def _frame_of(raw) -> pd.DataFrame:
    if isinstance(raw, RawTable):
        return raw.frame
    if isinstance(raw, pd.DataFrame):
        return raw
    raise InputError("raw", f"must be a RawTable or a DataFrame, got {type(raw).__name__}")


def label_values(raw, column: str) -> pd.DataFrame:
    """The distinct values of a label column with their row counts, most frequent first.

    Returns a DataFrame with columns ``value`` (as read; text without
    surrounding spaces), ``text`` (canonical text, what the app shows and may
    pass back as ``positive_label``), ``rows`` (how many rows hold it) and
    ``missing`` (True on one last row counting missing labels, present only
    when there are any).
    """
    frame = _frame_of(raw)
    if column not in frame.columns:
        raise missing_column_error(column, "label", [str(c) for c in frame.columns])
    codes, uniques, _ = _label_codes(frame[column])
    counts = np.bincount(codes[codes >= 0], minlength=len(uniques))
    order = np.argsort(-counts, kind="stable")
    out = pd.DataFrame(
        {
            "value": pd.Series([uniques[i] for i in order], dtype=object),
            "text": [value_text(uniques[i]) for i in order],
            "rows": counts[order].astype(np.int64),
            "missing": np.zeros(len(order), dtype=bool),
        }
    )
    n_missing = int((codes < 0).sum())
    if n_missing:
        out = pd.concat(
            [
                out,
                pd.DataFrame(
                    {
                        "value": pd.Series([None], dtype=object),
                        "text": [""],
                        "rows": [n_missing],
                        "missing": [True],
                    }
                ),
            ],
            ignore_index=True,
        )
    return out


_SCORE_WORDS = tuple(
    "score prob proba probability risk pred prediction yhat likelihood output".split()
)
_LABEL_WORDS = tuple(
    "label target outcome event class truth actual observed y fraud default deteriorated "
    "deterioration died death readmitted readmission churn positive flag is_fraud "
    "diagnosis".split()
)
_EVENT_WORDS = tuple(
    "1 yes y true t positive pos event case fraud malignant died dead default deteriorated".split()
)
_CLUSTER_WORDS = tuple(
    "patient customer person member account client subject household mrn".split()
)
_COST_WORDS = tuple("amount cost value exposure loss balance".split())


def _norm(name) -> str:
    return re.sub(r"[^a-z0-9]+", "_", str(name).lower()).strip("_")


def _has_word(name: str, words) -> bool:
    parts = set(name.split("_"))
    return any(w in parts or (len(w) > 3 and w in name) for w in words)


def suggest_mapping(raw) -> Mapping:
    """A sensible first guess of the mapping, for the app to pre-fill.

    Score: a numeric column named like a score or probability, else the first
    numeric column with non-whole values. Label: a column with exactly two
    values named like an outcome, else the first two-valued column; the
    event value is the one named like an event (1, yes, true, ...), else the
    rarer value. Also guesses a patient / customer id as the cluster, time
    columns, a case-cost amount, and text columns with 2-20 values as groups.
    A table with ``events`` and ``non_events`` columns is taken as a count
    table. The guess is only a starting point; nothing is checked here.
    """
    frame = _frame_of(raw)
    head = frame.head(50_000)
    cols = [str(c) for c in frame.columns]
    norm = {c: _norm(c) for c in cols}
    nunique = {c: int(head[c].nunique(dropna=True)) for c in cols}
    numeric = [
        c
        for c in cols
        if pd.api.types.is_numeric_dtype(head[c].dtype)
        and not pd.api.types.is_bool_dtype(head[c].dtype)
    ]
    by_name = {norm[c]: c for c in cols}

    ev = next(
        (
            by_name[k]
            for k in ("events", "n_events", "event_count", "positives", "n_pos")
            if k in by_name
        ),
        None,
    )
    ne = next(
        (
            by_name[k]
            for k in (
                "non_events",
                "nonevents",
                "n_non_events",
                "non_event_count",
                "negatives",
                "n_neg",
            )
            if k in by_name
        ),
        None,
    )

    def pick_score(exclude=()):
        cand = [c for c in numeric if c not in exclude and nunique[c] > 2]
        named = [c for c in cand if _has_word(norm[c], _SCORE_WORDS)]
        if named:
            return named[0]
        frac = [c for c in cand if pd.api.types.is_float_dtype(head[c].dtype)]
        return (frac or cand or [c for c in cols if c not in exclude] or [cols[0]])[0]

    if ev and ne:
        score = pick_score((ev, ne))
        return Mapping(score=score, kind="counts", events=ev, non_events=ne)

    two = [c for c in cols if nunique[c] == 2]
    named = [c for c in two if _has_word(norm[c], _LABEL_WORDS)]
    label = (named or two or [None])[0]
    score = pick_score((label,) if label else ())
    positive = None
    if label is not None:
        vals = label_values(frame, label)
        vals = vals[~vals["missing"]]
        texts = list(vals["text"])
        if sorted(texts) == ["0", "1"]:
            known = ["1"]
        else:  # "1" marks the event only beside "0"; in 1/2 codes the rarer value is the guess
            known = [
                t
                for t in texts
                if t is not None and t.casefold() in _EVENT_WORDS and t not in ("0", "1")
            ]
        if len(known) == 1:
            positive = vals["value"].iloc[texts.index(known[0])]
        elif len(vals) == 2:
            positive = vals["value"].iloc[1]  # the rarer value
        if isinstance(positive, np.generic):
            positive = positive.item()
    taken = {score, label}
    cluster = next(
        (
            c
            for c in cols
            if c not in taken
            and _has_word(norm[c], _CLUSTER_WORDS)
            and (
                "id" in norm[c].split("_")
                or norm[c].endswith("id")
                or "number" in norm[c]
                or norm[c] in _CLUSTER_WORDS
            )
        ),
        None,
    )
    taken.add(cluster)
    timeish = [
        c
        for c in cols
        if c not in taken
        and (
            pd.api.types.is_datetime64_any_dtype(head[c].dtype)
            or _has_word(norm[c], ("time", "date", "timestamp", "at"))
        )
    ]
    score_time = next(
        (
            c
            for c in timeish
            if _has_word(norm[c], ("score", "scored", "pred", "prediction", "alert", "assessment"))
        ),
        None,
    )
    outcome_time = next(
        (
            c
            for c in timeish
            if c != score_time
            and _has_word(
                norm[c], ("outcome", "event", "deterioration", "deteriorated", "death", "fraud")
            )
        ),
        None,
    )
    rest = [c for c in timeish if c != outcome_time]
    if score_time is None and len(rest) == 1:
        score_time = rest[0]  # the one time column that is not an outcome time
    taken |= {score_time, outcome_time}
    case_cost = next(
        (c for c in numeric if c not in taken and _has_word(norm[c], _COST_WORDS)), None
    )
    taken.add(case_cost)
    groups = tuple(
        c
        for c in cols
        if c not in taken
        and _is_text(head[c])
        and 2 <= nunique[c] <= 20
        and not _has_word(norm[c], ("id",))
    )[:3]
    return Mapping(
        score=score,
        label=label,
        positive_label=positive,
        groups=groups,
        cluster=cluster,
        score_time=score_time,
        outcome_time=outcome_time,
        case_cost=case_cost,
    )


# =========================================================================== public: load


def _warn_float32(raw: RawTable, ser: pd.Series, column: str, warnings: list) -> bool:
    f32 = ser.dtype == np.float32 or column in raw.info.float32_columns
    if f32:
        warnings.append(
            IntakeWarning(
                "float32_scores",
                f"{column}: the source stores the scores as 32-bit floats (about 7 "
                f"significant digits); they are used as float64, and scores closer "
                f"than that precision may be tied",
                column,
            )
        )
    return bool(f32)


def _warn_unit_interval(s: np.ndarray, column: str, warnings: list) -> None:
    outside = (s < 0) | (s > 1)
    k = int(outside.sum())
    if k:
        warnings.append(
            IntakeWarning(
                "scores_outside_unit_interval",
                f"{column}: {_n(k, 'score')} {_v(k, 'lies', 'lie')} outside [0, 1] (from "
                f"{s.min():.6g} to {s.max():.6g}), so the scores are not probabilities: "
                f"calibration, probability thresholds and net benefit stay off",
                column,
            )
        )


def _warn_few_events(n_events: float, column: str, warnings: list) -> None:
    if n_events < MIN_EVENTS:
        shown = f"{n_events:,.0f}" if float(n_events).is_integer() else f"{n_events:,.1f}"
        warnings.append(
            IntakeWarning(
                "few_events",
                f"{column}: only {shown} event{'' if shown == '1' else 's'}; validation studies "
                f"want at least {MIN_EVENTS} (Collins et al., Stat Med 2016), so every estimate "
                f"here is uncertain",
                column,
            )
        )


def _score_column(raw: RawTable, column: str, drop_missing: bool) -> tuple[np.ndarray, np.ndarray]:
    """(values over all rows, missing mask) of one score column after the score checks."""
    ser = raw.frame[column]
    num = _numbers(ser, decimal=raw.info.decimal or ".", thousands=raw.info.thousands)
    if num.not_number.any():
        raise _not_numbers_error(
            column, ser, np.flatnonzero(num.not_number), num.not_number, raw.info
        )
    if num.infinite.any():
        raise InputError(
            column,
            "holds infinite values",
            np.flatnonzero(num.infinite),
            hint="Every score must be a finite number",
        )
    if num.missing.any() and not drop_missing:
        raise InputError(
            column,
            "has missing values",
            np.flatnonzero(num.missing),
            hint="Fill them in, or choose to drop rows with a missing score (the "
            "count is reported in the memo)",
        )
    return num.values, num.missing


def _score(
    raw: RawTable, m: Mapping, rows: _Rows, warnings: list, extra: dict | None = None
) -> tuple[np.ndarray, np.ndarray | None]:
    """(scores over all rows, keep mask or None) after the score checks.

    Every extra score column is checked the same way; its values over all
    rows go into ``extra`` (name -> array). With ``drop_missing_scores`` a
    row missing any mapped score is dropped, and the count is reported once.
    """
    values, missing = _score_column(raw, m.score, m.drop_missing_scores)
    any_missing = missing
    short = [m.score] if missing.any() else []
    for col in m.extra_scores:
        v, miss = _score_column(raw, col, m.drop_missing_scores)
        if extra is not None:
            extra[col] = v
        if miss.any():
            short.append(col)
            any_missing = any_missing | miss
    keep = None
    if short:
        pos = np.flatnonzero(any_missing)
        keep = ~any_missing
        k = pos.size
        if not keep.any():
            if missing.all():
                raise InputError(m.score, "has no values at all (every row is missing its score)")
            raise InputError(
                short[-1] if len(short) > 1 else short[0],
                "leaves no row with every score present (each row misses at least one of "
                + ", ".join(short) + ")",
            )
        cols = ", ".join(short)
        which = "" if len(short) == 1 else " (in at least one of these columns)"
        warnings.append(
            IntakeWarning(
                "dropped_missing_scores",
                f"{cols}: {_n(k, 'row')} with a missing score{which} {_v(k, 'was', 'were')} "
                f"dropped as chosen ({format_rows(pos)}); the analysis uses the other "
                f"{int(keep.sum()):,} rows",
                short[0],
            )
        )
    rows.keep = keep
    return values, keep


def _amounts(
    raw: RawTable,
    column: str,
    rows: _Rows,
    *,
    what: str,
    need: np.ndarray | None,
    allow_missing: bool,
) -> np.ndarray:
    """A non-negative numeric column (weights, costs, counts)."""
    ser = raw.frame[column]
    num = _numbers(ser, decimal=raw.info.decimal or ".", thousands=raw.info.thousands)
    bad = rows.bad(num.not_number)
    if bad.size:
        raise _not_numbers_error(
            column,
            ser,
            bad,
            num.not_number & (rows.keep if rows.keep is not None else True),
            raw.info,
        )
    scope = np.ones(rows.n, dtype=bool) if need is None else need
    inf = rows.bad(num.infinite & scope)
    if inf.size:
        raise InputError(column, f"holds infinite {what}", inf)
    if not allow_missing:
        miss = rows.bad(num.missing & scope)
        if miss.size:
            who = "" if need is None else " for events"
            raise InputError(column, f"has missing values{who}", miss)
    neg = rows.bad((num.values < 0) & scope)
    if neg.size:
        raise InputError(column, f"holds negative {what}", neg)
    return num.values


#: From this many rows on, the text columns (groups, cluster) are encoded on a second
#: thread while the score and label are checked; below it a thread costs more than it saves.
_AHEAD_ROWS = 200_000


class _TextAhead:
    """:func:`core.fingerprint.text_codes` of the text columns, started early on a thread.

    ``get(column)`` returns the column's ``(codes, dictionary, arrow)`` -- the
    same as calling ``text_codes(..., with_arrow=True)`` there and then, an
    exception included -- so the checks keep their order and their messages.
    The grouping is compiled code that releases the GIL, so it runs beside
    the score and label checks on the other core.
    """

    def __init__(self, raw: RawTable, columns: list[str]):
        self._raw = raw
        self._futures: dict = {}
        self._pool = None
        if columns and raw.n_rows >= _AHEAD_ROWS:
            from concurrent.futures import ThreadPoolExecutor

            self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="fulcrum-text")
            for c in dict.fromkeys(columns):
                self._futures[c] = self._pool.submit(text_codes, raw.frame[c], with_arrow=True)

    def get(self, column: str) -> tuple:
        fut = self._futures.pop(column, None)
        if fut is not None:
            return fut.result()
        return text_codes(self._raw.frame[column], with_arrow=True)

    def close(self) -> None:
        """Stop the thread (work not yet started is dropped, after an error say)."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)


def _groups(raw: RawTable, m: Mapping, rows: _Rows, warnings: list,
            ahead: _TextAhead | None = None) -> dict[str, tuple]:
    """Group column -> (codes, dictionary) of its canonical text (see core.fingerprint)."""
    out = {}
    for g in m.groups:
        if ahead is not None:
            codes, dictionary = ahead.get(g)[:2]
        else:
            codes, dictionary = text_codes(raw.frame[g])
        miss = rows.bad(codes < 0)
        if miss.size:
            warnings.append(
                IntakeWarning(
                    "group_missing",
                    f"{g}: {miss.size:,} row{'s' if miss.size != 1 else ''} "
                    f"{'have' if miss.size != 1 else 'has'} no value ({format_rows(miss)}); "
                    f"{'they are' if miss.size != 1 else 'it is'} kept with the group "
                    f"value missing",
                    g,
                )
            )
        out[g] = (codes, dictionary)
    return out


def _cluster(raw: RawTable, column: str, rows: _Rows, warnings: list,
             ahead: _TextAhead | None = None) -> tuple:
    """(codes, dictionary, arrow dictionary or None) of the cluster ids; a missing id raises."""
    if ahead is not None:
        codes, dictionary, arrow = ahead.get(column)
    else:
        codes, dictionary, arrow = text_codes(raw.frame[column], with_arrow=True)
    bad = rows.bad(codes < 0)
    if bad.size:
        raise InputError(
            column,
            "has missing values",
            bad,
            hint="Every case needs its cluster id (patient or customer); or map no cluster column",
        )
    use = codes if rows.keep is None else codes[rows.keep]
    sizes = np.bincount(use, minlength=len(dictionary))
    sizes = sizes[sizes > 0]
    big = sizes > LARGE_CLUSTER_ROWS
    if big.any():
        k = int(big.sum())
        warnings.append(
            IntakeWarning(
                "large_clusters",
                f"{column}: {_n(k, 'cluster')} {_v(k, 'holds', 'hold')} more than "
                f"{LARGE_CLUSTER_ROWS} rows{_v(k, '', ' each')} (the largest "
                f"{int(sizes.max()):,} rows; {sizes.size:,} clusters in all); cases in a cluster "
                f"are not independent, so intervals should resample whole clusters",
                column,
            )
        )
    return codes, dictionary, arrow


def _texts(pair: tuple, keep: np.ndarray | None) -> tuple[np.ndarray, tuple]:
    """Canonical text array of the kept rows and its (codes, dictionary) for the fingerprint.

    ``pair`` is ``(codes, dictionary)`` or ``(codes, dictionary, arrow)``: with
    every row kept, the fingerprint hashes the Arrow copy of the dictionary
    when there is one (the same texts, without a round trip through Python strings).
    """
    codes, dictionary = pair[0], pair[1]
    if keep is not None:
        codes, dictionary = recode(codes, dictionary, keep)
        return texts_from_codes(codes, dictionary), (codes, dictionary)
    arrow = pair[2] if len(pair) > 2 else None
    return texts_from_codes(codes, dictionary), (codes, dictionary if arrow is None else arrow)


def _outcome_checks(
    m: Mapping, y: np.ndarray, st: np.ndarray | None, ot: np.ndarray, warnings: list, pos_of
) -> None:
    no_time = np.isnat(ot) & y
    if no_time.any():
        p = pos_of(no_time)
        warnings.append(
            IntakeWarning(
                "outcome_time_missing",
                f"{m.outcome_time}: {_n(p.size, 'event')} {_v(p.size, 'has', 'have')} no "
                f"outcome time ({format_rows(p)})",
                m.outcome_time,
            )
        )
    if st is None:
        return
    both = ~np.isnat(ot) & ~np.isnat(st)
    before = both & (ot < st)
    if before.any():
        p = pos_of(before)
        warnings.append(
            IntakeWarning(
                "outcome_before_score",
                f"{m.outcome_time}: {_n(p.size, 'row')} {_v(p.size, 'has', 'have')} an outcome "
                f"time earlier than the score time ({format_rows(p)})",
                m.outcome_time,
            )
        )
    if m.outcome_horizon_days is not None:
        horizon = np.timedelta64(round(m.outcome_horizon_days * 86400e9), "ns")
        late = both & y & ((ot - st) > horizon)
        if late.any():
            p = pos_of(late)
            warnings.append(
                IntakeWarning(
                    "outcome_after_horizon",
                    f"{m.outcome_time}: {_n(p.size, 'event')} came more than "
                    f"{m.outcome_horizon_days:g} days after the score time ({format_rows(p)}); "
                    f"the label column counts {_v(p.size, 'it as an event', 'them as events')} "
                    f"all the same",
                    m.outcome_time,
                )
            )


def _warn_encoding(raw: RawTable, warnings: list) -> None:
    if raw.info.encoding_fallback:
        note = next((t for t in raw.info.notes if "Windows-1252" in t), "read as Windows-1252")
        warnings.append(IntakeWarning("encoding_fallback", note, None))


def _group_texts(groups: dict, keep) -> tuple[dict, dict]:
    """Group arrays of the kept rows, and their text codes keyed as the fingerprint names them."""
    arrays, codes_of = {}, {}
    for g, pair in groups.items():
        arrays[g], codes_of[f"group:{g}"] = _texts(pair, keep)
    return arrays, codes_of


def _load_rows(raw: RawTable, m: Mapping) -> Dataset:
    ahead = _TextAhead(raw, [*m.groups, *([m.cluster] if m.cluster is not None else [])])
    try:
        return _load_rows_with(raw, m, ahead)
    finally:
        ahead.close()


def _load_rows_with(raw: RawTable, m: Mapping, ahead: _TextAhead) -> Dataset:
    n = raw.n_rows
    rows = _Rows(n)
    warnings: list[IntakeWarning] = []
    extra_all: dict[str, np.ndarray] = {}
    s_all, keep = _score(raw, m, rows, warnings, extra_all)
    y_all, matched, merged = _labels(raw.frame[m.label], m.label, m.positive_label, rows)
    if merged:
        warnings.append(
            IntakeWarning(
                "label_whitespace",
                f"{m.label}: values that differed only by surrounding spaces were taken as one",
                m.label,
            )
        )
    w_all = None
    if m.weight is not None:
        w_all = _amounts(raw, m.weight, rows, what="weights", need=None, allow_missing=False)
    groups = _groups(raw, m, rows, warnings, ahead)
    cl_all = _cluster(raw, m.cluster, rows, warnings, ahead) if m.cluster is not None else None
    st_all = ot_all = None
    if m.score_time is not None:
        st_all = _times(
            raw.frame[m.score_time], m.score_time, rows, required=np.ones(n, dtype=bool),
            warnings=warnings,
        )
    if m.outcome_time is not None:
        ot_all = _times(raw.frame[m.outcome_time], m.outcome_time, rows, required=None,
                        warnings=warnings)
    cc_all = None
    if m.case_cost is not None:
        cc_all = _amounts(raw, m.case_cost, rows, what="amounts", need=y_all, allow_missing=False)

    def final(a):
        return a if (a is None or keep is None) else a[keep]

    y = final(y_all)  # both classes present: checked by _labels on the kept rows
    s = final(s_all) + 0.0
    w = final(w_all)
    n_ev_rows = int(np.count_nonzero(y))
    if w is not None and (float(w[y].sum()) <= 0 or float(w[~y].sum()) <= 0):
        which = "events" if float(w[y].sum()) <= 0 else "non-events"
        raise InputError(
            m.weight,
            f"gives the {which} a total weight of zero; both classes need positive weight",
        )
    st = final(st_all)
    ot = final(ot_all)
    if ot is not None:
        pos_idx = np.flatnonzero(keep) if keep is not None else None

        def pos_of(mask):
            p = np.flatnonzero(mask)
            return p if pos_idx is None else pos_idx[p]

        _outcome_checks(m, y, st, ot, warnings, pos_of)
    f32 = _warn_float32(raw, raw.frame[m.score], m.score, warnings)
    _warn_unit_interval(s, m.score, warnings)
    extra_scores = {}
    for col, v in extra_all.items():
        extra_scores[col] = final(v) + 0.0
        _warn_float32(raw, raw.frame[col], col, warnings)
        _warn_unit_interval(extra_scores[col], col, warnings)
    n_events = float(w[y].sum()) if (w is not None and m.weight_kind == "frequency") else n_ev_rows
    _warn_few_events(n_events, m.label, warnings)
    _warn_encoding(raw, warnings)
    dropped = np.flatnonzero(~keep) if keep is not None else np.empty(0, dtype=np.int64)
    mapping = replace(m, positive_label=matched)
    group_arrays, codes_of = _group_texts(groups, keep)
    cluster = None
    if cl_all is not None:
        cluster, codes_of["cluster"] = _texts(cl_all, keep)
    ds = Dataset(
        kind="rows",
        mapping=mapping,
        y_score=s,
        y_true=y,
        sample_weight=w,
        weight_kind=mapping.weight_kind,
        groups=group_arrays,
        cluster=cluster,
        score_time=st,
        outcome_time=ot,
        case_cost=final(cc_all),
        file_name=raw.info.file_name,
        warnings=tuple(warnings),
        dropped_rows=int(dropped.size),
        dropped_positions=tuple(int(p) + 1 for p in dropped[:_SHOW_DROPPED]),
        source_rows=n,
        source_float32=f32,
        read_notes=raw.info.notes,
        extra_scores=extra_scores,
    )
    if cluster is not None:  # the grouping's codes are cluster_codes' (first appearance)
        ds.keep_cluster_codes(codes_of["cluster"][0], len(codes_of["cluster"][1]))
    return ds.with_fingerprint(text_codes_of=codes_of)


def _load_counts(raw: RawTable, m: Mapping) -> Dataset:
    n = raw.n_rows
    rows = _Rows(n)
    warnings: list[IntakeWarning] = []
    s_all, keep = _score(raw, m, rows, warnings)
    vals = {}
    for role, what in (
        ("events", "counts"),
        ("non_events", "counts"),
        ("event_cost", "amounts"),
        ("events_sq", "sums"),
        ("non_events_sq", "sums"),
    ):
        col = getattr(m, role)
        if col is not None:
            vals[role] = _amounts(raw, col, rows, what=what, need=None, allow_missing=False)
    groups = _groups(raw, m, rows, warnings)

    def final(a):
        return a if (a is None or keep is None) else a[keep]

    e, ne = final(vals["events"]), final(vals["non_events"])
    if float(e.sum()) <= 0:
        raise InputError(
            m.events, "sums to zero: the table holds no events; both classes are needed"
        )
    if float(ne.sum()) <= 0:
        raise InputError(
            m.non_events, "sums to zero: the table holds no non-events; both classes are needed"
        )
    s = final(s_all) + 0.0
    f32 = _warn_float32(raw, raw.frame[m.score], m.score, warnings)
    _warn_unit_interval(s, m.score, warnings)
    _warn_few_events(float(e.sum()), m.events, warnings)
    _warn_encoding(raw, warnings)
    dropped = np.flatnonzero(~keep) if keep is not None else np.empty(0, dtype=np.int64)
    group_arrays, codes_of = _group_texts(groups, keep)
    ds = Dataset(
        kind="counts",
        mapping=m,
        y_score=s,
        events=e,
        non_events=ne,
        event_cost=final(vals.get("event_cost")),
        events_sq=final(vals.get("events_sq")),
        non_events_sq=final(vals.get("non_events_sq")),
        groups=group_arrays,
        file_name=raw.info.file_name,
        warnings=tuple(warnings),
        dropped_rows=int(dropped.size),
        dropped_positions=tuple(int(p) + 1 for p in dropped[:_SHOW_DROPPED]),
        source_rows=n,
        source_float32=f32,
        read_notes=raw.info.notes,
    )
    return ds.with_fingerprint(text_codes_of=codes_of)


def load_dataset(source_or_raw, mapping, **read_options) -> Dataset:
    """Read (if needed), map and check a validation set; return the :class:`Dataset`.

    Parameters
    ----------
    source_or_raw : path, bytes, binary file-like or :class:`~core.reading.RawTable`
        The file, or a table already read by :func:`read_table`. When a file
        is given, only the mapped columns are read.
    mapping : :class:`~core.dataset.Mapping` or dict
        Which column plays which part (see :class:`~core.dataset.Mapping`).
        ``positive_label`` may be given as the app shows it ("yes", "1",
        "Malignant"); it is matched to the column's values (exactly, then as a
        number, then ignoring case) and stored in the Dataset's mapping as the
        value found.
    **read_options
        ``file_name``, ``sheet``, ``delimiter``, ``decimal``, ``encoding``:
        passed to :func:`read_table` (ignored for a RawTable).

    Returns
    -------
    Dataset
        With ``warnings`` (codes in :data:`WARNING_CODES`), ``dropped_rows``,
        ``read_notes`` and ``fingerprint``.

    Raises
    ------
    InputError
        Any problem with the file, the mapping or a mapped column; one message
        naming the column, the problem, how many rows and the first few.
    """
    m = _check_mapping(_as_mapping(mapping))
    wanted = mapped_columns(m)
    if isinstance(source_or_raw, RawTable):
        raw = source_or_raw
    else:
        raw = read_table(source_or_raw, columns=wanted, **read_options)
    available = raw.columns
    for col, role in wanted.items():
        if col not in raw.frame.columns:
            raise missing_column_error(col, role, available, raw.info.delimiter)
    _check_formulas(raw, wanted)
    if m.kind == "counts":
        return _load_counts(raw, m)
    return _load_rows(raw, m)


def load_count_table(source_or_raw, mapping, **read_options) -> Dataset:
    """:func:`load_dataset` for a count table (score, events, non-events per row).

    ``mapping`` may omit ``kind``; it is set to ``"counts"``.
    """
    m = _as_mapping(mapping)
    if m.kind != "counts":
        m = replace(m, kind="counts")
    return load_dataset(source_or_raw, m, **read_options)


# =========================================================================== demos

_SAMPLE_DIR = Path(__file__).resolve().parent.parent / "sample_data"


@dataclass(frozen=True)
class Demo:
    """An invented demo scenario: its file and the mapping it opens with."""

    name: str
    title: str
    file: str
    mapping: Mapping
    description: str


#: Both hospital quarters share one mapping (the recheck applies the record's mapping to Q2).
_HOSPITAL_MAPPING = Mapping(
    score="risk_score",
    label="deteriorated",
    positive_label="yes",
    groups=("site", "age_band"),
    cluster="patient_id",
    score_time="score_time",
    outcome_time="outcome_time",
    outcome_horizon_days=2.0,
)

DEMOS: dict[str, Demo] = {
    "hospital_q1": Demo(
        name="hospital_q1",
        title="Corvane Health: deterioration score, first quarter",
        file="hospital_q1.csv.gz",
        mapping=_HOSPITAL_MAPPING,
        description="Inpatient deterioration within 2 days at three invented sites; about 2 % "
        "events; patients may appear more than once.",
    ),
    "hospital_q2": Demo(
        name="hospital_q2",
        title="Corvane Health: deterioration score, second quarter",
        file="hospital_q2.csv.gz",
        mapping=_HOSPITAL_MAPPING,
        description="The next quarter: at the Wendlecombe site the laboratory feed fails for most "
        "encounters, the score loses part of its signal there and catches fewer events.",
    ),
    "invoices": Demo(
        name="invoices",
        title="Quillfeather Supply: invoice-fraud score",
        file="invoice_fraud.csv.gz",
        mapping=Mapping(
            score="fraud_score",
            label="is_fraud",
            positive_label=1,
            groups=("customer_segment",),
            score_time="invoice_date",
            case_cost="invoice_amount",
        ),
        description="Invoices of an invented wholesaler; about 0.4 % frauds; each missed fraud "
        "costs its invoice amount.",
    ),
}


def demo_path(name: str) -> Path:
    """Path of a demo file (names in :data:`DEMOS`)."""
    if name not in DEMOS:
        raise InputError("demo", f"unknown demo {name!r}; the demos are {', '.join(DEMOS)}")
    return _SAMPLE_DIR / DEMOS[name].file


def load_demo(name: str) -> Dataset:
    """The demo dataset, loaded with its ready mapping."""
    return load_dataset(demo_path(name), DEMOS[name].mapping)
