"""The validated dataset every later step takes.

A :class:`Dataset` holds the mapped, checked arrays of one validation set --
rows (``kind="rows"``) or a count table (``kind="counts"``) -- together with
the mapping that produced them, the intake's warnings, the rows the user chose
to drop and the fingerprint that keys every cache and record. It is built by
:mod:`core.intake` from a file, or directly from arrays in a notebook with
:meth:`Dataset.from_arrays` / :meth:`Dataset.from_count_table`.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, fields
from typing import Any

import numpy as np

from core.curve import Curve, _check_finite, _check_labels, sweep
from core.errors import InputError
from core.fingerprint import canonical_text, fingerprint_arrays

__all__ = ["WEIGHT_KINDS", "Dataset", "IntakeWarning", "Mapping"]

WEIGHT_KINDS = ("frequency", "sampling")
_COLUMN_FIELDS = ("score", "label", "weight", "cluster", "score_time", "outcome_time", "case_cost",
                  "events", "non_events", "event_cost", "events_sq", "non_events_sq")


@dataclass(frozen=True)
class Mapping:
    """Which column plays which part. Column names are the user's own.

    For ``kind="rows"``: ``score`` and ``label`` (with ``positive_label``, the
    value that marks the event) are required. For ``kind="counts"``:
    ``score``, ``events`` and ``non_events`` (optionally ``event_cost`` and
    ``events_sq`` / ``non_events_sq``).

    ``extra_scores`` (rows only) names other score columns on the same rows,
    compared with ``score`` (the reference, the current model) by
    :mod:`core.compare`; ``extra_lower_is_riskier`` is the subset of them
    where a lower value means higher risk. Both are left out of
    :meth:`to_dict` when empty, so a mapping without extra scores keeps its
    fingerprint.
    """

    score: str
    label: str | None = None
    positive_label: Any = None
    kind: str = "rows"
    weight: str | None = None
    weight_kind: str | None = None
    groups: tuple[str, ...] = ()
    cluster: str | None = None
    score_time: str | None = None
    outcome_time: str | None = None
    outcome_horizon_days: float | None = None
    case_cost: str | None = None
    higher_is_riskier: bool = True
    drop_missing_scores: bool = False
    events: str | None = None
    non_events: str | None = None
    event_cost: str | None = None
    events_sq: str | None = None
    non_events_sq: str | None = None
    extra_scores: tuple[str, ...] = ()
    extra_lower_is_riskier: tuple[str, ...] = ()

    @classmethod
    def from_dict(cls, d: dict) -> Mapping:
        """A Mapping from a plain dict (e.g. JSON): lists become tuples, blanks None."""
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(d) - known)
        if unknown:
            raise InputError("mapping", f"has unknown field(s) {', '.join(unknown)}; known fields are "
                                        f"{', '.join(sorted(known))}")
        kw = dict(d)
        if kw.get("groups") is None:
            kw["groups"] = ()
        elif isinstance(kw["groups"], str):
            kw["groups"] = (kw["groups"],)
        else:
            kw["groups"] = tuple(str(g) for g in kw["groups"])
        for name in ("extra_scores", "extra_lower_is_riskier"):
            v = kw.get(name)
            if v is None:
                kw.pop(name, None)
            elif isinstance(v, str):
                kw[name] = (v,) if v.strip() else ()
            else:
                kw[name] = tuple(str(c) for c in v)
        for name in _COLUMN_FIELDS:
            if isinstance(kw.get(name), str) and not kw[name].strip():
                kw[name] = None
        return cls(**kw)

    def to_dict(self) -> dict:
        d = asdict(self)
        d["groups"] = list(self.groups)
        for name in ("extra_scores", "extra_lower_is_riskier"):
            if getattr(self, name):
                d[name] = list(getattr(self, name))
            else:
                del d[name]
        pl = d["positive_label"]
        if isinstance(pl, (np.generic,)):
            d["positive_label"] = pl.item()
        return d


@dataclass(frozen=True)
class IntakeWarning:
    """A problem that does not stop the analysis, with a stable code."""

    code: str
    message: str
    column: str | None = None

    def __str__(self) -> str:
        return self.message


@dataclass(frozen=True, eq=False)
class Dataset:
    """Validated arrays of one validation set (see the module docstring).

    Row datasets carry ``y_true`` (bool) and ``y_score`` (float64) per row and
    the optional per-row columns; count datasets carry ``y_score`` as the
    table's scores with ``events`` / ``non_events`` per table row, optional
    ``groups`` per table row, and no per-case columns.

    Group and cluster values are canonical text (object arrays of ``str``,
    None where missing; see :func:`core.fingerprint.canonical_text`), so the
    same cases from CSV, Excel or Parquet compare equal. Times are
    ``datetime64[ns]`` (UTC when the source had a time zone). ``case_cost`` is
    NaN where a non-event has no amount. ``dropped_rows`` counts the rows the
    user chose to drop (missing scores) and ``dropped_positions`` holds the
    first 100 of them as 1-based data rows; ``source_rows`` is the row count
    as read. ``extra_scores`` maps each of the mapping's extra score columns
    to its float64 values on the same rows (checked like the score; empty
    when none). ``reduction`` is the :class:`core.reduce.Reduction` of a
    count table that :func:`core.reduce.reduce_file` counted from a file
    (the statement run, rows read, the rounding and its largest effect);
    None otherwise.
    """

    kind: str
    mapping: Mapping
    y_score: np.ndarray
    y_true: np.ndarray | None = None
    sample_weight: np.ndarray | None = None
    weight_kind: str | None = None
    groups: dict[str, np.ndarray] = field(default_factory=dict)
    cluster: np.ndarray | None = None
    score_time: np.ndarray | None = None
    outcome_time: np.ndarray | None = None
    case_cost: np.ndarray | None = None
    events: np.ndarray | None = None
    non_events: np.ndarray | None = None
    event_cost: np.ndarray | None = None
    events_sq: np.ndarray | None = None
    non_events_sq: np.ndarray | None = None
    file_name: str | None = None
    warnings: tuple[IntakeWarning, ...] = ()
    dropped_rows: int = 0
    dropped_positions: tuple[int, ...] = ()
    source_rows: int | None = None
    source_float32: bool = False
    read_notes: tuple[str, ...] = ()
    fingerprint: str = ""
    extra_scores: dict[str, np.ndarray] = field(default_factory=dict)
    reduction: Any = None  # core.reduce.Reduction | None: how a file was reduced to this table

    # -------------------------------------------------------------- builders
    @classmethod
    def from_arrays(cls, y_true, y_score, sample_weight=None, *, weight_kind=None, groups=None,
                    cluster=None, score_time=None, outcome_time=None, outcome_horizon_days=None,
                    case_cost=None, higher_is_riskier=True, file_name=None,
                    warnings=(), extra_scores=None, extra_lower_is_riskier=()) -> Dataset:
        """A row dataset from arrays, checked like :func:`core.curve.sweep` checks them.

        ``extra_scores``: name -> other scores on the same rows (see
        :class:`Mapping`); ``extra_lower_is_riskier``: those of them where
        lower means riskier.
        """
        y = _check_labels(y_true)
        n = y.shape[0]
        src32 = np.asarray(y_score).dtype == np.float32
        s = _check_finite("y_score", y_score, n) + 0.0
        w = None
        if sample_weight is not None:
            w = _check_finite("sample_weight", sample_weight, n, allow_negative=False)
            if weight_kind not in WEIGHT_KINDS:
                raise InputError("weight_kind", f"must be one of {', '.join(WEIGHT_KINDS)} when weights "
                                 f"are given, got {weight_kind!r}")
        grp = {}
        for name, values in (groups or {}).items():
            arr = np.asarray(values, dtype=object)
            if arr.shape != (n,):
                raise InputError(name, f"has {arr.shape[0]:,} values, expected {n:,}")
            grp[str(name)] = canonical_text(arr)
        cl = None
        if cluster is not None:
            cl = np.asarray(cluster, dtype=object)
            if cl.shape != (n,):
                raise InputError("cluster", f"has {cl.shape[0]:,} values, expected {n:,}")
            cl = canonical_text(cl)
        st = None if score_time is None else np.asarray(score_time, dtype="datetime64[ns]")
        ot = None if outcome_time is None else np.asarray(outcome_time, dtype="datetime64[ns]")
        cc = None
        if case_cost is not None:
            cc = np.asarray(case_cost, dtype=np.float64)
            bad = y & ~(np.isfinite(cc) & (cc >= 0))
            if bad.any():
                raise InputError("case_cost", "must be a finite, non-negative amount for every event",
                                 np.flatnonzero(bad))
        extra = {}
        for name, values in (extra_scores or {}).items():
            name = str(name)
            if name in ("y_score", *extra):
                raise InputError(name, "is given twice among the scores; each score needs its own name")
            extra[name] = _check_finite(name, values, n) + 0.0
        low = tuple(str(c) for c in extra_lower_is_riskier)
        stray = [c for c in low if c not in extra]
        if stray:
            raise InputError(stray[0], "is listed as lower-is-riskier but is not among the extra scores")
        mapping = Mapping(
            score="y_score", label="y_true", positive_label=1, weight=None if w is None else "sample_weight",
            weight_kind=weight_kind if w is not None else None, groups=tuple(grp),
            cluster=None if cl is None else "cluster", score_time=None if st is None else "score_time",
            outcome_time=None if ot is None else "outcome_time",
            outcome_horizon_days=outcome_horizon_days, case_cost=None if cc is None else "case_cost",
            higher_is_riskier=bool(higher_is_riskier), extra_scores=tuple(extra),
            extra_lower_is_riskier=tuple(c for c in extra if c in low),
        )
        ds = cls(kind="rows", mapping=mapping, y_score=s, y_true=y, sample_weight=w,
                 weight_kind=mapping.weight_kind, groups=grp, cluster=cl, score_time=st,
                 outcome_time=ot, case_cost=cc, file_name=file_name, warnings=tuple(warnings),
                 source_rows=n, source_float32=src32, extra_scores=extra)
        return ds.with_fingerprint()

    @classmethod
    def from_count_table(cls, score, events, non_events, *, event_cost=None, events_sq=None,
                         non_events_sq=None, higher_is_riskier=True, file_name=None,
                         mapping: Mapping | None = None, warnings=(), groups=None) -> Dataset:
        """A count dataset: one row per (score[, group]) with event / non-event totals."""
        s = np.asarray(score)
        n = s.shape[0]
        s = _check_finite("score", s, n) + 0.0
        grp = {}
        for name, values in (groups or {}).items():
            arr = np.asarray(values, dtype=object)
            if arr.shape != (n,):
                raise InputError(name, f"has {arr.shape[0]:,} values, expected {n:,}")
            grp[str(name)] = canonical_text(arr)
        e = _check_finite("events", events, n, allow_negative=False)
        ne = _check_finite("non_events", non_events, n, allow_negative=False)
        extra = {k: None if v is None else _check_finite(k, v, n, allow_negative=False)
                 for k, v in (("event_cost", event_cost), ("events_sq", events_sq),
                              ("non_events_sq", non_events_sq))}
        mapping = mapping or Mapping(
            score="score", kind="counts", events="events", non_events="non_events",
            event_cost=None if event_cost is None else "event_cost",
            events_sq=None if events_sq is None else "events_sq",
            non_events_sq=None if non_events_sq is None else "non_events_sq",
            groups=tuple(grp), higher_is_riskier=bool(higher_is_riskier))
        ds = cls(kind="counts", mapping=mapping, y_score=s, events=e, non_events=ne, groups=grp,
                 event_cost=extra["event_cost"], events_sq=extra["events_sq"],
                 non_events_sq=extra["non_events_sq"], file_name=file_name,
                 warnings=tuple(warnings), source_rows=n)
        ds.curve()  # checks both classes are present
        return ds.with_fingerprint()

    def with_fingerprint(self, *, text_codes_of: dict | None = None) -> Dataset:
        """This dataset with its fingerprint computed (see :mod:`core.fingerprint`).

        ``text_codes_of`` (``"cluster"`` / ``"group:<name>"`` ->
        :func:`core.fingerprint.text_codes` of that array) saves recomputing
        the text encoding the intake already has.
        """
        arrays = {
            "y_score": self.y_score, "y_true": self.y_true, "sample_weight": self.sample_weight,
            "cluster": self.cluster, "score_time": self.score_time, "outcome_time": self.outcome_time,
            "case_cost": self.case_cost, "events": self.events, "non_events": self.non_events,
            "event_cost": self.event_cost, "events_sq": self.events_sq,
            "non_events_sq": self.non_events_sq,
        }
        for g, v in self.groups.items():
            arrays[f"group:{g}"] = v
        for name, v in self.extra_scores.items():
            arrays[f"extra_score:{name}"] = v
        text = {"cluster"} | {f"group:{g}" for g in self.groups}
        fp = fingerprint_arrays(arrays, self.mapping.to_dict(), text=text, text_codes_of=text_codes_of)
        object.__setattr__(self, "fingerprint", fp)
        return self

    # -------------------------------------------------------------- derived
    @property
    def higher_is_riskier(self) -> bool:
        return self.mapping.higher_is_riskier

    @property
    def extra_higher_is_riskier(self) -> dict[str, bool]:
        """Each extra score's direction (True: higher is riskier), in mapping order."""
        low = set(self.mapping.extra_lower_is_riskier)
        return {k: k not in low for k in self.extra_scores}

    @property
    def n_rows(self) -> int:
        if self.kind == "counts":
            return int(round(float(self.events.sum() + self.non_events.sum())))
        return int(self.y_score.shape[0])

    @property
    def n_events(self) -> float:
        return self.curve().n_events

    @property
    def n_event_rows(self) -> int:
        """Unweighted number of event rows (counts: the table's event total)."""
        if self.kind == "counts":
            return int(round(float(self.events.sum())))
        return int(np.count_nonzero(self.y_true))

    @property
    def prevalence(self) -> float:
        return self.curve().prevalence

    @property
    def score_range(self) -> tuple[float, float]:
        return float(self.y_score.min()), float(self.y_score.max())

    @property
    def scores_in_unit_interval(self) -> bool:
        lo, hi = self.score_range
        return lo >= 0.0 and hi <= 1.0

    def curve(self) -> Curve:
        """The exact curve of this dataset (computed once, then kept)."""
        c = self.__dict__.get("_curve")
        if c is None:
            if self.kind == "counts":
                c = Curve.from_counts(self.y_score, self.events, self.non_events,
                                      higher_is_riskier=self.higher_is_riskier,
                                      event_cost=self.event_cost, events_sq=self.events_sq,
                                      non_events_sq=self.non_events_sq)
            else:
                c = sweep(self.y_true, self.y_score, self.sample_weight,
                          higher_is_riskier=self.higher_is_riskier, event_cost=self.case_cost)
            object.__setattr__(self, "_curve", c)
        return c

    def cluster_codes(self) -> tuple[np.ndarray, int]:
        """(code of each row's cluster, K): see :func:`core.clusters.cluster_codes`.

        Computed once, then kept (the intake hands over the codes it grouped
        the ids by, which are the same: order of first appearance).
        """
        got = self.__dict__.get("_cluster_codes")
        if got is None:
            from core.clusters import _cluster_codes

            got = _cluster_codes(self.cluster, self.mapping.cluster or "cluster")
            object.__setattr__(self, "_cluster_codes", got)
        return got

    def keep_cluster_codes(self, codes: np.ndarray, n_clusters: int) -> None:
        """Keep codes already known for :meth:`cluster_codes` (the intake's grouping).

        ``codes`` must number this dataset's cluster ids 0 .. K-1 in order of
        first appearance, with no missing id: what :meth:`cluster_codes`
        would compute.
        """
        object.__setattr__(self, "_cluster_codes",
                           (np.asarray(codes, dtype=np.int64), int(n_clusters)))

    def subset(self, mask) -> Dataset:
        """The rows where ``mask`` holds, as a new row dataset (same mapping)."""
        if self.kind != "rows":
            raise InputError(None, "a count table cannot be split by rows")
        m = np.asarray(mask, dtype=bool)

        def take(a):
            return None if a is None else a[m]

        ds = Dataset(kind="rows", mapping=self.mapping, y_score=self.y_score[m], y_true=self.y_true[m],
                     sample_weight=take(self.sample_weight), weight_kind=self.weight_kind,
                     groups={k: v[m] for k, v in self.groups.items()}, cluster=take(self.cluster),
                     score_time=take(self.score_time), outcome_time=take(self.outcome_time),
                     case_cost=take(self.case_cost), file_name=self.file_name,
                     warnings=self.warnings, source_rows=int(m.sum()),
                     extra_scores={k: v[m] for k, v in self.extra_scores.items()})
        return ds.with_fingerprint()
