"""Threshold stability: would the policy pick the same point on another sample?

Every bootstrap replicate (see :mod:`core.bootstrap`) re-runs the policy's
choice -- the same objective, rules and confidence as
:func:`core.choose.choose` -- and the spread of the chosen thresholds says how
firmly the data pin the operating point down:

* the 95 % range of the chosen thresholds (empirical 2.5 % and 97.5 %
  quantiles of the chosen point, so both ends are real thresholds);
* the share of replicates choosing the same point, and the share choosing it
  or one of its two neighbouring event scores ("within one event score");
* the spread of recall, precision, flag rate and expected cost at the chosen
  thresholds, both as each replicate sees them (apparent) and on the full
  data (what that threshold actually gives here; Harrell's optimism in
  :mod:`core.optimism` is the mean difference of the two).

The choice is made for all replicates of a chunk at once, vectorised over
(replicates x cell boundaries), with exactly the formulas of
:func:`core.choose.choose` (the test suite checks the identity against
``choose()`` on each replicate's own curve): candidates are "flag none" and
the boundaries whose event-point cell holds an event in the replicate (its event
points); objective and rules are judged at the deployment prevalence (the
policy's, or each replicate's own validation prevalence when the policy
gives none); ties go to fewer flags with relative tolerance 1e-12. What is
held at its full-data value rather than resampled: a capacity-quantile rule
(flags per period from score times: its limit on the threshold is the one
found on the full data) and cases per period taken from the data.

Cost: O(cells) per replicate on top of the draws, and less with a recall or
specificity floor: the candidates that fail such a floor in every replicate
of a chunk (found by one binary search per replicate on its cumulative
counts) are never evaluated, which changes no choice.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from core import intervals as _iv
from core.bootstrap import (
    DEFAULT_REPLICATES,
    EventCells,
    _check_design,
    bootstrap_counts,
    event_cells,
    percentile_interval,
)
from core.costs import TIE_RTOL
from core.policy import Policy, resolve_policy

__all__ = ["ReplicateChooser", "StabilityCollector", "ThresholdStability", "threshold_stability"]


class ReplicateChooser:
    """The policy's choice on many replicates at once (the formulas of ``choose()``).

    Built once per data and policy: the policy is resolved on the full data
    (:func:`core.policy.resolve_policy`); what a replicate cannot recompute
    (a capacity-quantile limit, data-derived cases per period) is taken from
    there.
    """

    def __init__(self, cells: EventCells, policy: Policy, data=None):
        if not isinstance(policy, Policy):
            raise TypeError(f"policy must be a Policy, got {type(policy).__name__}")
        self.cells = cells
        source = data if data is not None else cells.curve
        rp = resolve_policy(policy, source)
        self.rp = rp
        self.policy = policy
        self.pi_fixed = rp.prevalence if rp.sources.get("deployment.prevalence") == "file" else None
        self.sampling = cells.weight_kind == "sampling" and cells.events_sq is not None
        # candidate columns: flag none and the event-point cells (a replicate's event points are
        # among them)
        self.cand_cols = np.concatenate([[0], np.flatnonzero(cells.is_event) + 1])
        self.cap_ok = None
        self.notes: list[str] = []
        if "max_flagged_per_period" in rp.rules and rp.capacity_quantile is not None:
            from core.choose import _Analysis  # the capacity limit exactly as choose() finds it

            a = _Analysis(source, policy)
            a.search()
            met = a.rules_all["max_flagged_per_period"]["met"]
            cols = np.concatenate([[0], cells.index])
            self.cap_ok = np.asarray(met, dtype=bool)[cols][self.cand_cols]
            self.notes.append("the capacity-quantile rule (flags per period from score times) is "
                              "held at its full-data limit on the threshold in every replicate")
        if rp.sources.get("deployment.cases_per_period") == "data":
            self.notes.append("cases per period are held at the full-data value")

    # ------------------------------------------------------------------ the choice
    def choose(self, tp, fp, *, cost_cum=None, sq=None, events=None):
        """Chosen column per replicate row (0: "flag none"; -1: no point meets the rules).

        ``tp``, ``fp``: (R, C + 1) cumulative counts with "flag none" first;
        ``events``: (R, C) replicate event cell weights (for the candidates);
        ``cost_cum``: (R, C + 1) cumulative miss cost (per-case costs);
        ``sq``: ``(tp_sq, fp_sq)`` cumulative squared weights (sampling weights).
        """
        cc = self.cand_cols
        R = tp.shape[0]
        P = tp[:, -1][:, None]
        N = fp[:, -1][:, None]
        # a replicate without events (or without non-events) has no curve to choose on
        degenerate = ~((P[:, 0] > 0) & (N[:, 0] > 0))
        if degenerate.any():
            P = np.where(degenerate[:, None], 1.0, P)
            N = np.where(degenerate[:, None], 1.0, N)
        # only the candidates that can meet the monotone rules in some row are evaluated
        sel = self._window(tp, fp, P[:, 0], N[:, 0], degenerate)
        if sel is not None:
            cc = cc[sel]
        t = np.take(tp, cc, axis=1)  # np.take: several times faster than tp[:, cc]
        f = np.take(fp, cc, axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            tpr = t / P
            fpr = f / N
            pi = (np.full((R, 1), self.pi_fixed) if self.pi_fixed is not None else P / (P + N))
        tpp, fpp = pi * tpr, (1.0 - pi) * fpr
        # candidates: "flag none" and the event-point cells holding an event in the replicate
        ok = np.empty(t.shape, dtype=bool)
        ok[:, 0] = True
        if events is not None:
            np.greater(np.take(events, cc[1:] - 1, axis=1), 0, out=ok[:, 1:])
        else:
            ok[:, 1:] = True
        if self.sampling and sq is not None:
            n1 = _iv.effective_size_from_sums(P, sq[0][:, -1][:, None])
            n0 = _iv.effective_size_from_sums(N, sq[1][:, -1][:, None])
        else:
            n1, n0 = P, N
        v = self._objective(tpr, fpr, tpp, fpp, pi, P, cost_cum, cc)  # NaN: undefined
        self._rules_met(t, f, P, N, tpr, fpr, tpp, fpp, pi, n1, n0, out=ok,
                        cap_ok=None if self.cap_ok is None else
                        (self.cap_ok if sel is None else self.cap_ok[sel]))
        # best feasible value (an undefined objective ranks lowest, as -inf in choose())
        best = np.fmax.reduce(np.where(ok, v, -np.inf), axis=1, keepdims=True)
        with np.errstate(invalid="ignore"):
            tol = TIE_RTOL * np.abs(best)
            hit = ok & (v >= best - tol)
        undefined = best[:, 0] == -np.inf  # every feasible point undefined: the first one
        if undefined.any():
            hit[undefined] = ok[undefined]
        any_ok = ok.any(axis=1)
        first = np.argmax(hit, axis=1)
        out = np.where(any_ok & ~degenerate, cc[first], -1)
        return out

    def _window(self, tp, fp, P, N, degenerate):
        """Candidate ranks worth evaluating (None: all), always with "flag none" first.

        A recall floor holds only on a suffix of the candidates and a
        specificity floor only on a prefix (recall never falls, specificity
        never rises along them; a confidence bound only narrows either); a
        capacity limit held at its full-data value is a fixed mask. Each row's
        edge is found by a binary search on its cumulative counts with a margin
        of 1e-9 (wider than any rounding of the rule's own expression), and
        the union of the rows' windows is kept: every candidate left out fails
        a rule in every row, so the choice is the same.
        """
        rules = self.rp.rules
        cc = self.cand_cols
        K = cc.shape[0]
        live = np.flatnonzero(~degenerate)
        if live.size == 0:
            return None
        lo, hi = 0, K
        lim = rules.get("min_recall")
        if lim is not None:
            floor = lim - TIE_RTOL * abs(lim)
            if floor > 0:
                need = floor * (1.0 - 1e-9) * P[live]
                first = min(int(np.searchsorted(tp[i], x, side="left"))
                            for i, x in zip(live.tolist(), need.tolist()))
                lo = max(lo, int(np.searchsorted(cc, first, side="left")))
        lim = rules.get("min_specificity")
        if lim is not None:
            ceil = 1.0 - (lim - TIE_RTOL * abs(lim))
            if ceil < 1.0:
                allow = (ceil + 1e-9) * N[live]
                end = max(int(np.searchsorted(fp[i], x, side="right"))
                          for i, x in zip(live.tolist(), allow.tolist()))
                hi = min(hi, int(np.searchsorted(cc, end, side="left")))
        if self.cap_ok is not None and "max_flagged_per_period" in rules:
            where = np.flatnonzero(self.cap_ok)
            if where.size == 0:
                lo, hi = K, K
            else:
                lo, hi = max(lo, int(where[0])), min(hi, int(where[-1]) + 1)
        if lo <= 1 and hi >= K:
            return None
        lo = max(lo, 1)
        return np.concatenate([[0], np.arange(lo, max(hi, lo))])

    def _objective(self, tpr, fpr, tpp, fpp, pi, P, cost_cum, cols=None):
        rp = self.rp
        kind = rp.objective
        with np.errstate(invalid="ignore", divide="ignore"):
            if kind == "min_cost":
                v = -self.cost(tpr, fpr, pi, P, cost_cum, cols)
            elif kind == "max_fbeta":
                b2 = rp.beta ** 2
                v = (1 + b2) * tpp / ((1 + b2) * tpp + b2 * (pi - tpp) + fpp)
            elif kind == "max_net_benefit":
                pt = rp.threshold_probability
                v = tpp - fpp * pt / (1.0 - pt)
            elif kind == "max_youden":
                v = tpr - fpr
            elif kind == "max_recall":
                v = tpr + 0.0
            elif kind == "max_precision":
                v = np.where(tpp + fpp > 0, tpp / (tpp + fpp), 0.0)
            else:  # pragma: no cover - validated in the policy
                raise AssertionError(kind)
        return np.asarray(v, dtype=np.float64)

    def cost(self, tpr, fpr, pi, P, cost_cum, cols=None):
        """Expected cost per case (NaN without costs), as ``choose()`` computes it."""
        rp = self.rp
        if not rp.costs_given:
            return np.full(np.shape(tpr), np.nan)
        if rp.case_dependent_costs:
            cc = self.cand_cols if cols is None else cols
            miss = (cost_cum[:, -1][:, None] - cost_cum[:, cc]) / P
        else:
            miss = rp.false_negative * (1.0 - tpr)
        return (pi * miss + rp.false_positive * (1.0 - pi) * fpr
                + rp.true_positive * pi * tpr + rp.true_negative * (1.0 - pi) * (1.0 - fpr))

    def _rules_met(self, tp, fp, P, N, tpr, fpr, tpp, fpp, pi, n1, n0, out, cap_ok=None):
        """``out &=`` every active rule's verdict (the formulas of ``choose()``)."""
        rp = self.rp
        conf = rp.confidence
        fn, tn = P - tp, N - fp
        met_all = out
        for name, lim in rp.rules.items():
            bound = None
            lower_rule = name.startswith("min_")
            with np.errstate(invalid="ignore", divide="ignore"):
                if name in ("min_recall", "min_specificity"):
                    value = tpr if name == "min_recall" else 1.0 - fpr
                    met = value >= lim - TIE_RTOL * abs(lim)
                    if conf is not None:
                        met &= _wilson_bound_met(value, n1 if name == "min_recall" else n0, conf,
                                                 lim - TIE_RTOL * abs(lim), met,
                                                 rising=name == "min_recall")
                    met_all &= met
                    continue
                elif name == "min_precision":
                    value = tpp / (tpp + fpp)
                    if conf is not None:
                        bound = _iv.ppv_logit_interval(tp, fn, fp, tn, pi, conf, sided="lower",
                                                       n_events=n1, n_nonevents=n0)[0]
                        bound = np.where(tp + fp > 0, bound, np.nan)
                elif name == "max_flag_rate":
                    value = tpp + fpp
                    if conf is not None:
                        bound = _iv.flag_rate_interval(tp, fn, fp, tn, pi, conf, sided="upper",
                                                       n_events=n1, n_nonevents=n0)[1]
                elif name == "max_flagged_per_period":
                    if cap_ok is not None:
                        met_all &= cap_ok[None, :]
                        continue
                    value = (tpp + fpp) * rp.cases_per_period
                    if conf is not None:
                        fr_hi = _iv.flag_rate_interval(tp, fn, fp, tn, pi, conf, sided="upper",
                                                       n_events=n1, n_nonevents=n0)[1]
                        bound = fr_hi * rp.cases_per_period
                else:  # pragma: no cover
                    raise AssertionError(name)
                value = np.asarray(value, dtype=np.float64)
                slack = TIE_RTOL * abs(lim)
                if lower_rule:
                    met = value >= lim - slack
                    if bound is not None:
                        met = met & (bound >= lim - slack)
                else:
                    met = value <= lim + slack
                    if bound is not None:
                        met = met & (bound <= lim + slack)
            met_all &= met
        return met_all

    # ------------------------------------------------------------------ values at chosen points
    def values_at(self, tp, fp, cols, *, cost_cum=None, pi=None):
        """Recall, precision, flag rate (at the deployment prevalence) and cost per case
        at one column per row (``cols`` (R,); rows with -1 give NaN)."""
        R = tp.shape[0]
        rows = np.arange(R)
        c = np.where(cols < 0, 0, cols)
        P = tp[:, -1]
        N = fp[:, -1]
        t = tp[rows, c]
        f = fp[rows, c]
        with np.errstate(invalid="ignore", divide="ignore"):
            if pi is None:
                pi = np.full(R, self.pi_fixed) if self.pi_fixed is not None else P / (P + N)
            tpr = t / P
            fpr = f / N
            tpp, fpp = pi * tpr, (1.0 - pi) * fpr
            prec = tpp / (tpp + fpp)
            if self.rp.costs_given:
                if self.rp.case_dependent_costs:
                    miss = (cost_cum[:, -1] - cost_cum[rows, c]) / P
                else:
                    miss = self.rp.false_negative * (1.0 - tpr)
                rp = self.rp
                cost = (pi * miss + rp.false_positive * (1.0 - pi) * fpr
                        + rp.true_positive * pi * tpr + rp.true_negative * (1.0 - pi) * (1.0 - fpr))
            else:
                cost = np.full(R, np.nan)
        out = {"recall": tpr, "precision": prec, "flag_rate": tpp + fpp, "cost": cost}
        bad = cols < 0
        return {k: np.where(bad, np.nan, v) for k, v in out.items()}


_WINDOW = 256


def _wilson_bound_met(rate, size, confidence, floor, value_met, *, rising):
    """``wilson_lower(rate * size, size) >= floor`` at every column, without evaluating it
    at every column.

    Along the columns ``rate`` never falls (recall; ``rising``) or never rises
    (specificity) at a fixed size, and the Wilson lower bound rises with the
    successes, so the columns meeting the bound are a suffix (a prefix). The
    bound never exceeds the rate, so its edge lies at or after (before) the
    edge of the point rule ``value_met``: the bound -- the same expression as
    ``choose()`` -- is evaluated on a window of columns from there in one
    call, with a binary search per row as the fallback when the edge is not
    inside the window. Exact: only the monotone order is used.
    """
    R, K = rate.shape
    rows = np.arange(R)
    n = np.broadcast_to(np.asarray(size, dtype=np.float64).reshape(-1, 1), (R, 1))[:, 0]

    def test(r_idx, cols):
        """Monotone False -> True along the columns: the bound holds (rising) or fails."""
        x = rate[r_idx[:, None], cols] if cols.ndim == 2 else rate[r_idx, cols]
        nn = n[r_idx][:, None] if cols.ndim == 2 else n[r_idx]
        lo = _iv.wilson_interval(x * nn, np.broadcast_to(nn, x.shape), confidence,
                                 sided="lower")[0]
        with np.errstate(invalid="ignore"):
            good = lo >= floor
        return good if rising else ~good

    passed = value_met.sum(axis=1)
    W = min(_WINDOW, K)
    if rising:  # the bound's edge is not before the first column meeting the point rule
        start = K - passed
    else:  # the bound fails at the latest where the point rule fails
        start = np.maximum(passed - W + 1, 0)
    start = np.minimum(start, K - 1)
    cols = start[:, None] + np.arange(W)[None, :]
    inside = cols < K
    hit = test(rows, np.minimum(cols, K - 1)) & inside
    found = hit.any(axis=1)
    first = start + np.argmax(hit, axis=1)
    answer = np.where(found, first, K)
    lo = np.zeros(R, dtype=np.int64)
    hi = np.full(R, K, dtype=np.int64)
    # the edge may lie before the window (found at its first column) or after it
    before = found & (first == start) & (start > 0)
    after = ~found & (start + W < K)
    hi[before] = start[before]
    lo[after] = start[after] + W
    todo = before | after
    while todo.any():
        idx = np.flatnonzero(todo)
        mid = (lo[idx] + hi[idx]) // 2
        h = test(idx, np.minimum(mid, K - 1)) & (mid < K)
        hi[idx] = np.where(h, mid, hi[idx])
        lo[idx] = np.where(h, lo[idx], mid + 1)
        todo[idx] = lo[idx] < hi[idx]
    fallback = before | after
    answer[fallback] = lo[fallback]
    c = np.arange(K)[None, :]
    return c >= answer[:, None] if rising else c < answer[:, None]


class StabilityCollector:
    """Runs the chooser on every chunk of a bootstrap pass and keeps, per replicate,
    the chosen column and the values there on the replicate and on the full data."""

    def __init__(self, chooser: ReplicateChooser, n_replicates: int):
        self.chooser = chooser
        n = int(n_replicates)
        self.columns = np.full(n, -1, dtype=np.int64)
        keys = ("recall", "precision", "flag_rate", "cost")
        self.apparent = {k: np.full(n, np.nan) for k in keys}
        self.on_data = {k: np.full(n, np.nan) for k in keys}
        cells = chooser.cells
        self._data_tp = np.concatenate([[0.0], np.cumsum(cells.events)])[None, :]
        self._data_fp = np.concatenate([[0.0], np.cumsum(cells.non_events)])[None, :]
        self._data_cost = (None if cells.event_cost is None
                           else np.concatenate([[0.0], np.cumsum(cells.event_cost)])[None, :])
        self._offset = None

    def update(self, chunk, tp, fp):
        ch = self.chooser
        cost_cum = chunk.cumulative_cost()
        sq = chunk.cumulative_sq() if chunk.events_sq is not None else None
        cols = ch.choose(tp, fp, cost_cum=cost_cum, sq=sq, events=chunk.events)
        if self._offset is None:
            self._offset = chunk.start
        s = slice(chunk.start - self._offset, chunk.stop - self._offset)
        self.columns[s] = cols
        for k, v in ch.values_at(tp, fp, cols, cost_cum=cost_cum).items():
            self.apparent[k][s] = v
        R = cols.shape[0]
        dt = np.broadcast_to(self._data_tp, (R, self._data_tp.shape[1]))
        df = np.broadcast_to(self._data_fp, (R, self._data_fp.shape[1]))
        dc = None if self._data_cost is None else np.broadcast_to(self._data_cost, dt.shape)
        for k, v in ch.values_at(dt, df, cols, cost_cum=dc).items():
            self.on_data[k][s] = v


@dataclass(frozen=True, eq=False)
class ThresholdStability:
    """The policy's choice across bootstrap replicates (see the module docstring).

    ``chosen`` holds each replicate's chosen threshold (NaN where no point met
    the rules); ``threshold_range`` the empirical 2.5 % / 97.5 % quantiles of
    the chosen point (low, high in score units); ``share_same`` and
    ``share_within_one`` the shares of all replicates landing on the data's
    point or within one event score of it; ``apparent`` / ``on_data`` the
    (R,) values at each replicate's choice on the replicate and on the full
    data, ``spread`` their 2.5 / 50 / 97.5 % quantiles.
    """

    threshold: float | None
    column: int
    n_replicates: int
    seed: int
    design: str
    chosen: np.ndarray
    columns: np.ndarray
    n_infeasible: int
    threshold_range: tuple[float, float]
    share_same: float
    share_within_one: float
    apparent: dict
    on_data: dict
    spread: dict
    notes: tuple[str, ...] = ()
    data_values: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        from core.choose import json_safe

        return json_safe({
            "threshold": self.threshold, "n_replicates": self.n_replicates, "seed": self.seed,
            "design": self.design, "n_infeasible": self.n_infeasible,
            "threshold_range_95": list(self.threshold_range), "share_same_point": self.share_same,
            "share_within_one_event_score": self.share_within_one, "spread": self.spread,
            "at_data_choice": self.data_values, "notes": list(self.notes),
            "chosen_threshold_counts": self.chosen_counts(),
        })

    def chosen_counts(self) -> dict:
        """How many replicates chose each threshold (for a histogram); key "none": infeasible."""
        out = {}
        th = self.chosen[~np.isnan(self.chosen)]
        vals, counts = np.unique(th, return_counts=True)
        for v, c in zip(vals.tolist(), counts.tolist()):
            out[str(v) if np.isinf(v) else repr(float(v))] = int(c)
        if self.n_infeasible:
            out["none"] = int(self.n_infeasible)
        return out


def _summarise(collector: StabilityCollector, cells: EventCells, col0: int, *, seed, design,
               notes) -> ThresholdStability:
    cols = collector.columns
    n = cols.shape[0]
    th_all = np.concatenate([[cells.curve.thresholds[0]], cells.thresholds])
    ok = cols >= 0
    chosen = np.where(ok, th_all[np.where(ok, cols, 0)], np.nan)
    # rank among the candidates (flag none, then event scores in point order)
    cand = np.concatenate([[0], np.flatnonzero(cells.is_event) + 1])
    rank = np.searchsorted(cand, np.where(ok, cols, 0))
    same = ok & (cols == col0) if col0 >= 0 else np.zeros(n, dtype=bool)
    if col0 >= 0:
        r0 = int(np.searchsorted(cand, col0))
        near = ok & (np.abs(rank - r0) <= 1)
    else:
        near = np.zeros(n, dtype=bool)
    if ok.any():
        lo_c, hi_c = np.quantile(cols[ok], [0.025, 0.975], method="inverted_cdf")
        a, b = float(th_all[int(lo_c)]), float(th_all[int(hi_c)])
        rng = (min(a, b), max(a, b))
    else:
        rng = (np.nan, np.nan)
    spread = {}
    for label, src in (("apparent", collector.apparent), ("on_data", collector.on_data)):
        spread[label] = {}
        for k, v in src.items():
            if np.all(np.isnan(v)):
                continue
            lo, hi = percentile_interval(v, 0.95)
            spread[label][k] = {"low": lo, "median": float(np.nanmedian(v)), "high": hi}
    data_vals = {}
    if col0 >= 0:
        one = collector.chooser.values_at(collector._data_tp, collector._data_fp, np.array([col0]),
                                          cost_cum=collector._data_cost)
        data_vals = {k: float(v[0]) for k, v in one.items()}
    return ThresholdStability(
        threshold=None if col0 < 0 else float(th_all[col0]), column=int(col0), n_replicates=n,
        seed=int(seed), design=design, chosen=chosen, columns=cols, n_infeasible=int((~ok).sum()),
        threshold_range=rng, share_same=float(same.mean()), share_within_one=float(near.mean()),
        apparent=collector.apparent, on_data=collector.on_data, spread=spread, notes=tuple(notes),
        data_values=data_vals)


def data_choice_column(cells: EventCells, choice) -> int:
    """Column of a :class:`core.choose.Choice`'s point among the cells (-1: none)."""
    if choice.point is None:
        return -1
    return cells.column_of_index(choice.point.index)


def threshold_stability(data, policy: Policy, *, n_replicates: int = DEFAULT_REPLICATES,
                        seed: int = 0, design: str = "cohort", chunk: int | None = None,
                        progress=None, cells: EventCells | None = None,
                        sampling_weights: str = "rows", n_jobs: int = 1) -> ThresholdStability:
    """Re-run the policy's choice in every bootstrap replicate (see the module docstring).

    Parameters
    ----------
    data : Dataset or Curve
    policy : Policy
    n_replicates, seed, design, chunk, progress, n_jobs
        As :func:`core.bootstrap.bootstrap_counts`; the same seed gives the
        same replicates as :func:`core.bootstrap.bootstrap`.

    Returns
    -------
    ThresholdStability
    """
    from core.choose import choose

    _check_design(design)
    if cells is None:
        cells = event_cells(data, sampling_weights=sampling_weights)
    chooser = ReplicateChooser(cells, policy, data)
    col0 = data_choice_column(cells, choose(data, policy))
    coll = StabilityCollector(chooser, n_replicates)
    for ch in bootstrap_counts(cells, n_replicates, seed, design, chunk=chunk, progress=progress,
                               n_jobs=n_jobs):
        tp, fp = ch.cumulative()
        coll.update(ch, tp, fp)
    return _summarise(coll, cells, col0, seed=seed, design=design, notes=chooser.notes)

