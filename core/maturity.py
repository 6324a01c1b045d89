"""Label maturity: which new cases have had time to show their outcome?

Outcomes arrive late -- a chargeback weeks after the invoice, a readmission
within 30 days of discharge. A case scored a week ago with a 30-day outcome
window may still become an event; counted now it looks like a non-event,
which lowers the prevalence and precision and drops events from recall's
count. So a recheck keeps only the **mature** cases, those whose outcome
window has closed at the as-of date::

    mature  <=>  score_time + horizon <= as_of

(equivalently ``score_time <= as_of - horizon``, the *cut-off*). The as-of
date defaults to today and is always printed; a date without a time means
its start (00:00), so outcomes are taken as recorded up to the end of the day
before -- the cautious reading. Times are compared as the intake stores
them (UTC when the source had a time zone, else as written).

Without a score-time column or an outcome horizon, maturity cannot be
checked and :data:`NO_MATURITY_STATEMENT` says that recent cases may look
like non-events. When the new data were collected while the approved
threshold was live, flagged cases were acted on and their outcomes changed:
:data:`LIVE_THRESHOLD_STATEMENT` says plainly that recall and precision are
then biased and that an unactioned audit sample is the remedy.
"""

from __future__ import annotations

import datetime as _dt
import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from core.errors import InputError

__all__ = [
    "LIVE_THRESHOLD_STATEMENT",
    "NO_MATURITY_STATEMENT",
    "Maturity",
    "dataset_maturity",
    "label_maturity",
    "model_effect_statement",
    "parse_as_of",
]

NO_MATURITY_STATEMENT = (
    "Label maturity is not checked: the data have no score-time column or the record no outcome "
    "horizon, so Fulcrum cannot tell which outcome windows are still open, and recent cases may "
    "look like non-events: a case whose outcome has not happened yet counts as a non-event, so "
    "prevalence and precision may look lower than they are, and recall is measured only on the "
    "events already known.")

LIVE_THRESHOLD_STATEMENT = (
    "These data were collected while the approved threshold was live: flagged cases were acted "
    "on, and acting on them changes their outcomes (an event the action prevented is recorded as "
    "a non-event). Recall and precision measured on these data are therefore biased -- when the "
    "action works, both look lower than the score's real performance, and by an amount these "
    "data cannot tell. The remedy is an unactioned audit sample: a random share of cases (flagged "
    "or not) whose outcomes are observed without acting on the flag, where that is ethical and "
    "permitted, judged on its own.")


@dataclass(frozen=True, eq=False)
class Maturity:
    """Which cases are mature at the as-of date (see the module docstring).

    ``available`` is False without score times or a horizon; then ``mask``
    keeps every case and ``statement`` is :data:`NO_MATURITY_STATEMENT`.
    Counts are rows; ``mature_share`` is by weight when weights are given
    (else by rows). ``events_open`` counts the events already known among the
    excluded cases (they are excluded too: keeping only the open cases that
    already had their event would select on the outcome). ``scored_after``
    counts cases scored after the as-of date itself; ``outcomes_after``
    events whose recorded outcome time lies after it.
    """

    available: bool
    as_of: np.datetime64
    horizon_days: float | None
    cutoff: np.datetime64 | None
    mask: np.ndarray
    n_cases: int
    n_mature: int
    mature_share: float
    events_open: int | None
    scored_after: int
    outcomes_after: int

    @property
    def as_of_text(self) -> str:
        return _when(self.as_of)

    @property
    def n_open(self) -> int:
        return self.n_cases - self.n_mature

    @property
    def statement(self) -> str:
        head = f"As of {self.as_of_text}"
        if not self.available:
            return f"{head}. {NO_MATURITY_STATEMENT}"
        h = f"{self.horizon_days:g} day{'s' if self.horizon_days != 1 else ''}"
        s = (f"{head}, with an outcome horizon of {h}: a case is mature when its score time plus "
             f"{h} is on or before the as-of date (scored on or before {_when(self.cutoff)}). ")
        if self.n_open == 0:
            s += f"All {self.n_cases:,} cases are mature."
        else:
            pct = "—" if math.isnan(self.mature_share) else f"{100 * self.mature_share:.1f} %"
            s += (f"{self.n_open:,} of {self.n_cases:,} cases are still inside their outcome "
                  f"window and are left out; the recheck uses the {self.n_mature:,} mature "
                  f"case{'s' if self.n_mature != 1 else ''} ({pct} mature).")
            if self.events_open:
                s += (f" The left-out cases include {self.events_open:,} event"
                      f"{'s' if self.events_open != 1 else ''} already known; they are left out "
                      "with the rest, since keeping them would count only the open cases that "
                      "already had their event.")
        if self.n_mature == 0:
            s += " No case is mature: choose a later as-of date or wait for the outcomes."
        if self.scored_after:
            s += (f" {self.scored_after:,} case{'s were' if self.scored_after != 1 else ' was'} "
                  "scored after the as-of date itself: check the date.")
        if self.outcomes_after:
            k = self.outcomes_after
            s += (f" {k:,} event{'s have' if k != 1 else ' has'} an outcome time after the "
                  "as-of date: the data were extracted later, and a later as-of date would keep "
                  "more cases.")
        return s

    def to_dict(self) -> dict:
        from core.choose import json_safe

        return json_safe({
            "available": self.available, "as_of": self.as_of_text,
            "horizon_days": self.horizon_days,
            "cutoff": None if self.cutoff is None else _when(self.cutoff),
            "n_cases": self.n_cases, "n_mature": self.n_mature, "n_open": self.n_open,
            "mature_share": self.mature_share, "events_open": self.events_open,
            "scored_after": self.scored_after, "outcomes_after": self.outcomes_after,
            "statement": self.statement,
        })


def _when(t) -> str:
    ts = pd.Timestamp(t)
    if ts == ts.normalize():
        return ts.strftime("%Y-%m-%d") + " 00:00"
    return ts.strftime("%Y-%m-%d %H:%M")


def parse_as_of(as_of=None) -> np.datetime64:
    """The as-of moment as ``datetime64[ns]``.

    None: the start of today (local date). A date, or a text holding only a
    date, means 00:00 of that day; a time-zone-aware moment is converted to
    UTC and its zone dropped, as the intake stores times.
    """
    if as_of is None:
        return np.datetime64(_dt.date.today(), "ns")
    try:
        ts = pd.Timestamp(as_of)
    except (ValueError, TypeError):
        raise InputError("as_of", f"is not a date or time: {as_of!r}",
                         hint="Write it as ISO 8601, e.g. 2025-09-30") from None
    if ts is pd.NaT or pd.isna(ts):
        raise InputError("as_of", f"is not a date or time: {as_of!r}")
    if ts.tzinfo is not None:
        ts = ts.tz_convert("UTC").tz_localize(None)
    return np.datetime64(ts.to_datetime64(), "ns")


def _horizon(horizon_days) -> float:
    h = float(horizon_days)
    if not (np.isfinite(h) and h > 0):
        raise InputError("outcome_horizon_days", f"must be a positive number of days, got "
                                                 f"{horizon_days!r}")
    return h


def label_maturity(score_time, horizon_days, as_of=None, *, y_true=None, sample_weight=None,
                   outcome_time=None) -> Maturity:
    """Mask of mature cases: ``score_time + horizon_days <= as_of``.

    ``score_time`` is one time per case (anything ``numpy`` turns into
    ``datetime64[ns]``); ``horizon_days`` the outcome horizon in days
    (fractions allowed, rounded to the nanosecond). Either None: maturity is
    not available, every case is kept and the statement says what that
    means. ``y_true`` (optional) counts the known events among the excluded
    cases; ``sample_weight`` (optional) makes ``mature_share`` a share of
    weight; ``outcome_time`` (optional) counts events recorded after the
    as-of date.

    Raises
    ------
    InputError
        A missing (NaT) score time -- maturity needs one for every case; the
        rows are named. A horizon that is not a positive number.
    """
    t0 = parse_as_of(as_of)
    if score_time is None or horizon_days is None:
        known = score_time if score_time is not None else y_true
        n = 0 if known is None else int(np.asarray(known).shape[0])
        return Maturity(available=False, as_of=t0, horizon_days=None if horizon_days is None
                        else _horizon(horizon_days), cutoff=None, mask=np.ones(n, dtype=bool),
                        n_cases=n, n_mature=n, mature_share=1.0 if n else math.nan,
                        events_open=None, scored_after=0, outcomes_after=0)
    h = _horizon(horizon_days)
    t = np.asarray(score_time, dtype="datetime64[ns]").ravel()
    nat = np.isnat(t)
    if nat.any():
        raise InputError("score_time", "is missing; label maturity needs a score time for every "
                         "case", np.flatnonzero(nat))
    n = int(t.shape[0])
    y = None
    if y_true is not None:
        y = np.asarray(y_true, dtype=bool).ravel()
        if y.shape[0] != n:
            raise InputError("y_true", f"has {y.shape[0]:,} values, expected {n:,}")
    w = None
    if sample_weight is not None:
        w = np.asarray(sample_weight, dtype=np.float64).ravel()
        if w.shape[0] != n:
            raise InputError("sample_weight", f"has {w.shape[0]:,} values, expected {n:,}")
    span = np.timedelta64(round(h * 86400e9), "ns")
    cutoff = t0 - span
    mask = t <= cutoff
    n_mature = int(mask.sum())
    if w is None:
        share = n_mature / n if n else math.nan
    else:
        tot = float(w.sum())
        share = float(w[mask].sum()) / tot if tot > 0 else math.nan
    events_open = None if y is None else int((y & ~mask).sum())
    after = 0
    if outcome_time is not None:
        ot = np.asarray(outcome_time, dtype="datetime64[ns]").ravel()
        if ot.shape[0] != n:
            raise InputError("outcome_time", f"has {ot.shape[0]:,} values, expected {n:,}")
        known = ~np.isnat(ot)
        if y is not None:
            known &= y
        after = int((known & (ot > t0)).sum())
    return Maturity(available=True, as_of=t0, horizon_days=h, cutoff=cutoff, mask=mask,
                    n_cases=n, n_mature=n_mature, mature_share=share, events_open=events_open,
                    scored_after=int((t > t0).sum()), outcomes_after=after)


def dataset_maturity(dataset, as_of=None, horizon_days=None) -> Maturity:
    """:func:`label_maturity` of a row :class:`core.dataset.Dataset`.

    ``horizon_days`` defaults to the dataset's mapping (``outcome_horizon_days``;
    a recheck passes the decision record's). A count table has no score times:
    maturity is not available.
    """
    h = horizon_days if horizon_days is not None else dataset.mapping.outcome_horizon_days
    if dataset.kind != "rows":
        m = label_maturity(None, h, as_of)
        n = int(np.asarray(dataset.y_score).shape[0])
        return Maturity(available=False, as_of=m.as_of, horizon_days=m.horizon_days, cutoff=None,
                        mask=np.ones(n, dtype=bool), n_cases=n, n_mature=n,
                        mature_share=1.0 if n else math.nan, events_open=None, scored_after=0,
                        outcomes_after=0)
    return label_maturity(dataset.score_time, h, as_of, y_true=dataset.y_true,
                          sample_weight=dataset.sample_weight, outcome_time=dataset.outcome_time)


def model_effect_statement(collected_while_live: bool) -> str | None:
    """:data:`LIVE_THRESHOLD_STATEMENT` when the user declares the data were collected while
    the approved threshold was live, else None."""
    return LIVE_THRESHOLD_STATEMENT if collected_while_live else None
