"""Optimism: the policy's choice judged on cases it did not see.

A threshold chosen on the validation cases looks better on them than it
will on new cases: the rule picked it *because* these cases happened to
favour it. Two out-of-sample estimates sit beside the apparent values:

* **Cross-fitting** (stratified k-fold, k = 5 by default, seeded): the
  events and the non-events are each split into k folds of (nearly) equal
  size; for each fold the policy chooses a threshold on the other k - 1
  folds, and the held-out fold is counted at that threshold; the held-out
  counts of all folds are pooled (summed) and recall, precision, flag rate
  and expected cost are computed from the pooled counts (prevalence-dependent
  values at the deployment prevalence). Rows are assigned by a seeded
  permutation within each class (fold = position mod k); a count table's
  cells are split by the equivalent multivariate hypergeometric draws.
* **Bootstrap optimism correction** (Harrell, Lee & Mark, Stat Med 1996):
  in each bootstrap replicate the policy chooses on the replicate; its value
  there (apparent) minus the value of the same threshold on the full data
  (test) is that replicate's optimism; the corrected value is the apparent
  value on the full data minus the mean optimism. The replicates are those of
  :mod:`core.bootstrap` and the choice that of :mod:`core.stability`.

Both are about the *selection*: with a pre-specified threshold (fixed before
these data were seen) there is nothing to correct, the apparent values are
already honest estimates, and the report says so.

Cost: cross-fitting is k choices on cell counts (one bincount of the rows
per fold, no re-sort), except with a capacity-quantile rule (flags per period
from score times), where each training fold is swept as rows.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from core.bootstrap import DEFAULT_REPLICATES, EventCells, bootstrap_counts, event_cells
from core.errors import InputError
from core.policy import Policy, resolve_policy
from core.stability import (
    ReplicateChooser,
    StabilityCollector,
    ThresholdStability,
    _summarise,
    data_choice_column,
)

__all__ = ["QUANTITIES", "CrossFit", "HarrellCorrection", "Optimism", "cross_fit",
           "harrell_correction", "optimism", "DEFAULT_FOLDS"]

DEFAULT_FOLDS = 5

#: The quantities judged out of sample, in display order.
QUANTITIES = ("recall", "precision", "flag_rate", "cost")


def _fold_policy(policy: Policy, data) -> Policy:
    """The policy with data-derived cases per period fixed at the full-data value
    (a training fold holds fewer cases per period than the data)."""
    rp = resolve_policy(policy, data)
    if rp.sources.get("deployment.cases_per_period") == "data":
        dep = replace(policy.deployment, cases_per_period=rp.cases_per_period)
        return policy.replace(deployment=dep)
    return policy


def _values(tp, fp, P, N, pi, rp, missed_cost=None):
    """Recall, precision, flag rate at ``pi`` and expected cost per case from counts."""
    tp, fp, P, N = (np.asarray(v, dtype=np.float64) for v in (tp, fp, P, N))  # 0/0 -> NaN
    with np.errstate(invalid="ignore", divide="ignore"):
        tpr = tp / P
        fpr = fp / N
        tpp, fpp = pi * tpr, (1.0 - pi) * fpr
        out = {"recall": tpr, "precision": tpp / (tpp + fpp), "flag_rate": tpp + fpp}
        if rp.costs_given:
            miss = (missed_cost / P) if rp.case_dependent_costs else rp.false_negative * (1.0 - tpr)
            out["cost"] = (pi * miss + rp.false_positive * (1.0 - pi) * fpr
                           + rp.true_positive * pi * tpr
                           + rp.true_negative * (1.0 - pi) * (1.0 - fpr))
        else:
            out["cost"] = np.nan
    return {k: float(v) for k, v in out.items()}


# --------------------------------------------------------------------------- cross-fitting

@dataclass(frozen=True)
class CrossFit:
    """Stratified k-fold cross-fitting of the policy's choice (see the module docstring).

    ``thresholds`` are the k training-fold choices (NaN where no point met
    the rules on that training set); ``counts`` the pooled held-out
    ``tp``/``fp``/``fn``/``tn`` of the folds with a choice; ``values`` the
    out-of-fold recall, precision, flag rate and cost per case.
    """

    k: int
    seed: int
    thresholds: tuple[float, ...]
    n_infeasible_folds: int
    counts: dict[str, float]
    values: dict[str, float]
    prevalence: float
    method: str

    def to_dict(self):
        from core.choose import json_safe

        return json_safe({"k": self.k, "seed": self.seed, "thresholds": list(self.thresholds),
                          "n_infeasible_folds": self.n_infeasible_folds, "counts": self.counts,
                          "values": self.values, "prevalence": self.prevalence,
                          "method": self.method})


def _stratified_folds(y: np.ndarray, k: int, rng) -> np.ndarray:
    fold = np.empty(y.shape[0], dtype=np.int64)
    for mask in (y, ~y):
        idx = np.flatnonzero(mask)
        perm = rng.permutation(idx.shape[0])
        fold[idx[perm]] = np.arange(idx.shape[0]) % k
    return fold


def _cluster_folds(codes: np.ndarray, n_clusters: int, y: np.ndarray, k: int, rng) -> np.ndarray:
    """Folds of whole clusters (a patient's rows never straddle training and test),
    stratified by whether the cluster holds an event; each row takes its cluster's fold."""
    has_event = np.bincount(codes[y], minlength=n_clusters) > 0
    cluster_fold = _stratified_folds(has_event, k, rng)
    return cluster_fold[codes]


def _split_counts(counts: np.ndarray, k: int, rng) -> np.ndarray:
    """(k, C) fold counts of integer cell counts: a uniformly random partition of
    the cases into folds of sizes n // k (+1 for the first n % k)."""
    c = np.asarray(np.round(counts), dtype=np.int64)
    total = int(c.sum())
    sizes = total // k + (np.arange(k) < total % k)
    out = np.zeros((k, c.shape[0]), dtype=np.int64)
    remaining = c.copy()
    for j in range(k - 1):
        if sizes[j]:
            out[j] = rng.multivariate_hypergeometric(remaining, int(sizes[j]), method="marginals")
        remaining -= out[j]
    out[k - 1] = remaining
    return out


def _fold_cells(data, cells: EventCells, k: int, seed: int):
    """Per-fold cell sums: dict of (k, C) arrays (events, non_events[, sq][, cost])."""
    from core.dataset import Dataset

    rng = np.random.default_rng(seed)
    C = cells.n_cells
    ds = data if isinstance(data, Dataset) else None
    if ds is not None and ds.kind == "rows":
        y = ds.y_true
        if int(y.sum()) < k:
            raise InputError("k", f"cross-fitting with {k} folds needs at least {k} events; "
                             f"the data hold {int(y.sum())}")
        if ds.cluster is not None:
            from core.clusters import cluster_codes

            codes, n_clusters = cluster_codes(ds)
            fold = _cluster_folds(codes, n_clusters, y, k, rng)
        else:
            fold = _stratified_folds(y, k, rng)
        cell = cells.cell_of(ds.y_score)
        w = np.ones(y.shape[0]) if ds.sample_weight is None else ds.sample_weight
        key = fold * C + cell
        n = k * C

        def sums(weights, mask):
            return np.bincount(key[mask], weights=weights[mask], minlength=n).reshape(k, C)

        out = {"events": sums(w, y), "non_events": sums(w, ~y)}
        if cells.events_sq is not None and ds.weight_kind == "sampling":
            out["events_sq"] = sums(w * w, y)
            out["non_events_sq"] = sums(w * w, ~y)
        if cells.event_cost is not None and ds.case_cost is not None:
            out["event_cost"] = sums(w * np.where(y, ds.case_cost, 0.0), y)
        return out, fold
    # a count table or a curve: split each cell's cases
    e, ne = cells.events, cells.non_events
    if not (np.all(e == np.round(e)) and np.all(ne == np.round(ne))):
        raise InputError("events", "cross-fitting a count table needs whole-number counts "
                         "(or the rows)")
    if cells.weight_kind == "sampling":
        raise InputError("sample_weight", "cross-fitting with sampling weights needs the rows")
    if e.sum() < k:
        raise InputError("k", f"cross-fitting with {k} folds needs at least {k} events")
    fe = _split_counts(e, k, rng).astype(np.float64)
    fn = _split_counts(ne, k, rng).astype(np.float64)
    out = {"events": fe, "non_events": fn}
    if cells.event_cost is not None:
        with np.errstate(invalid="ignore", divide="ignore"):
            unit = np.where(e > 0, cells.event_cost / np.where(e > 0, e, 1.0), 0.0)
        out["event_cost"] = fe * unit[None, :]
    return out, None


def cross_fit(data, policy: Policy, *, k: int = DEFAULT_FOLDS, seed: int = 0,
              cells: EventCells | None = None) -> CrossFit:
    """Out-of-fold performance of the policy's choice by stratified k-fold cross-fitting.

    Parameters
    ----------
    data : Dataset or Curve
        Rows are split row by row; a count table (or Curve) by cells.
    policy : Policy
    k : int, default 5
    seed : int, default 0
        Seeds ``numpy.random.default_rng(seed)`` (event rows permuted first,
        then non-event rows).

    Returns
    -------
    CrossFit
    """
    from core.choose import choose, evaluate
    from core.dataset import Dataset

    k = int(k)
    if k < 2:
        raise InputError("k", f"must be at least 2, got {k}")
    if cells is None:
        cells = event_cells(data)
    rp = resolve_policy(policy, data)
    pol = _fold_policy(policy, data)
    folds, row_fold = _fold_cells(data, cells, k, seed)
    by_time = rp.capacity_quantile is not None
    wk = cells.weight_kind
    tot = {key: v.sum(axis=0) for key, v in folds.items()}
    held = {"tp": 0.0, "fp": 0.0, "P": 0.0, "N": 0.0, "missed": 0.0}
    ths = []
    bad = 0
    for j in range(k):
        test = {key: v[j] for key, v in folds.items()}
        if by_time:
            ds = data  # a capacity-quantile rule needs the rows' score times
            train_ch = choose(ds.subset(row_fold != j), pol)
        else:
            train = {key: tot[key] - test[key] for key in folds}
            curve = cells.to_curve(train["events"], train["non_events"],
                                   event_cost=train.get("event_cost"),
                                   events_sq=train.get("events_sq"),
                                   non_events_sq=train.get("non_events_sq"))
            train_ch = choose(curve, pol, weight_kind=wk if wk is not None else None)
        if train_ch.point is None:
            ths.append(np.nan)
            bad += 1
            continue
        t = float(train_ch.point.threshold)
        ths.append(t)
        if by_time:
            ev = evaluate(data.subset(row_fold == j), pol, t).point
            tp, fp = ev.counts["tp"], ev.counts["fp"]
            Pj, Nj = ev.counts["tp"] + ev.counts["fn"], ev.counts["fp"] + ev.counts["tn"]
            missed = ev.missed_cost or 0.0
        else:
            col = cells.column(t)
            cum_e = np.concatenate([[0.0], np.cumsum(test["events"])])
            cum_n = np.concatenate([[0.0], np.cumsum(test["non_events"])])
            tp, fp = float(cum_e[col]), float(cum_n[col])
            Pj, Nj = float(cum_e[-1]), float(cum_n[-1])
            missed = 0.0
            if "event_cost" in test:
                cum_c = np.concatenate([[0.0], np.cumsum(test["event_cost"])])
                missed = float(cum_c[-1] - cum_c[col])
        held["tp"] += tp
        held["fp"] += fp
        held["P"] += Pj
        held["N"] += Nj
        held["missed"] += missed
    if bad == k:
        values = {q: np.nan for q in QUANTITIES}
    else:
        values = _values(held["tp"], held["fp"], held["P"], held["N"], rp.prevalence, rp,
                         missed_cost=held["missed"])
    counts = {"tp": held["tp"], "fp": held["fp"], "fn": held["P"] - held["tp"],
              "tn": held["N"] - held["fp"]}
    is_rows = isinstance(data, Dataset) and data.kind == "rows"
    method = (f"stratified {k}-fold cross-fitting (seed {seed}): choose on {k - 1} folds, count "
              f"the held-out fold at that threshold, pool the held-out counts; "
              + (("whole clusters assigned to folds (stratified by whether the cluster holds an "
                  "event), so a cluster's rows never straddle training and test"
                  if data.cluster is not None else
                  "rows assigned by a seeded permutation within each class")
                 if is_rows else "cells split by multivariate hypergeometric draws"))
    return CrossFit(k=k, seed=int(seed), thresholds=tuple(ths), n_infeasible_folds=bad,
                    counts=counts, values=values, prevalence=float(rp.prevalence), method=method)


# --------------------------------------------------------------------------- Harrell

@dataclass(frozen=True)
class HarrellCorrection:
    """Bootstrap optimism correction (Harrell, Lee & Mark 1996).

    ``optimism[q]`` is the mean over replicates with a choice of (value on
    the replicate - value on the full data) at the replicate's chosen
    threshold; ``corrected[q] = apparent[q] - optimism[q]``.
    """

    n_replicates: int
    n_used: int
    seed: int
    design: str
    apparent: dict[str, float]
    optimism: dict[str, float]
    corrected: dict[str, float]
    method: str

    def to_dict(self):
        from core.choose import json_safe

        return json_safe({f: getattr(self, f) for f in self.__dataclass_fields__})


def _harrell_from(stab: ThresholdStability, method_design: str) -> HarrellCorrection:
    used = stab.columns >= 0
    opt, corr = {}, {}
    app = dict(stab.data_values)
    for q in QUANTITIES:
        a = stab.apparent[q][used]
        t = stab.on_data[q][used]
        d = a - t
        d = d[~np.isnan(d)]
        opt[q] = float(d.mean()) if d.size else np.nan
        corr[q] = float(app.get(q, np.nan) - opt[q])
    method = (f"Harrell's bootstrap optimism correction over {int(used.sum()):,} of "
              f"{stab.n_replicates:,} replicates with a choice (design {method_design}, seed "
              f"{stab.seed}): corrected = apparent - mean(replicate value - full-data value at the "
              "replicate's chosen threshold)")
    return HarrellCorrection(n_replicates=stab.n_replicates, n_used=int(used.sum()), seed=stab.seed,
                             design=stab.design, apparent=app, optimism=opt, corrected=corr,
                             method=method)


def harrell_correction(data, policy: Policy, *, n_replicates: int = DEFAULT_REPLICATES,
                       seed: int = 0, design: str = "cohort", chunk: int | None = None,
                       progress=None,
                       stability: ThresholdStability | None = None,
                       cells: EventCells | None = None) -> HarrellCorrection:
    """Harrell's bootstrap optimism correction of recall, precision, flag rate and cost.

    Pass the :class:`~core.stability.ThresholdStability` of the same data
    and policy to reuse its replicates (they hold every number needed).
    """
    from core.choose import choose

    if stability is None:
        if cells is None:
            cells = event_cells(data)
        chooser = ReplicateChooser(cells, policy, data)
        col0 = data_choice_column(cells, choose(data, policy))
        coll = StabilityCollector(chooser, n_replicates)
        for ch in bootstrap_counts(cells, n_replicates, seed, design, chunk=chunk,
                                   progress=progress):
            tp, fp = ch.cumulative()
            coll.update(ch, tp, fp)
        stability = _summarise(coll, cells, col0, seed=seed, design=design, notes=chooser.notes)
    return _harrell_from(stability, stability.design)


# --------------------------------------------------------------------------- together

@dataclass(frozen=True)
class Optimism:
    """Apparent, cross-fitted and optimism-corrected values side by side.

    ``threshold_origin`` is ``"derived"`` (chosen by the policy on these
    data) or ``"pre-specified"`` (fixed before these data were seen: the
    apparent values need no correction, ``cross_fit`` and ``harrell`` are
    None and the table repeats the apparent values).
    """

    threshold_origin: str
    threshold: float | None
    apparent: dict[str, float]
    cross_fit: CrossFit | None
    harrell: HarrellCorrection | None
    statement: str
    notes: tuple[str, ...] = field(default_factory=tuple)

    def table(self) -> list[dict]:
        """One row per quantity: apparent, cross-fitted, corrected.

        For a pre-specified threshold there is no selection to correct: the
        three columns are equal by definition.
        """
        rows = []
        for q in QUANTITIES:
            a = self.apparent.get(q, np.nan)
            if self.threshold_origin == "pre-specified":
                cf = cr = a
            else:
                cf = np.nan if self.cross_fit is None else self.cross_fit.values.get(q, np.nan)
                cr = np.nan if self.harrell is None else self.harrell.corrected.get(q, np.nan)
            rows.append({"quantity": q, "apparent": a, "cross_fitted": cf, "corrected": cr})
        return rows

    def to_dict(self):
        from core.choose import json_safe

        return json_safe({
            "threshold_origin": self.threshold_origin, "threshold": self.threshold,
            "apparent": self.apparent, "table": self.table(),
            "cross_fit": None if self.cross_fit is None else self.cross_fit.to_dict(),
            "harrell": None if self.harrell is None else self.harrell.to_dict(),
            "statement": self.statement, "notes": list(self.notes),
        })


def optimism(data, policy: Policy, *, threshold: float | None = None, k: int = DEFAULT_FOLDS,
             n_replicates: int = DEFAULT_REPLICATES, seed: int = 0, design: str = "cohort",
             stability: ThresholdStability | None = None, cells: EventCells | None = None,
             chunk: int | None = None, progress=None) -> Optimism:
    """The choice judged out of sample: apparent, cross-fitted and Harrell-corrected values.

    ``threshold=None`` means the threshold is derived by the policy from
    these data (:func:`core.choose.choose`); a number means it was
    pre-specified, and its apparent values are reported as they are.
    """
    from core.choose import choose, evaluate

    rp = resolve_policy(policy, data)
    if threshold is None:
        ch = choose(data, policy)
        origin = "derived"
    else:
        ch = evaluate(data, policy, float(threshold))
        origin = "pre-specified"
    if ch.point is None:
        apparent = {q: np.nan for q in QUANTITIES}
        t = None
    else:
        p = ch.point
        t = float(p.threshold)
        apparent = _values(p.counts["tp"], p.counts["fp"], p.counts["tp"] + p.counts["fn"],
                           p.counts["fp"] + p.counts["tn"], rp.prevalence, rp,
                           missed_cost=p.missed_cost)
    cf = hc = None
    if origin == "derived":
        if cells is None:
            cells = event_cells(data)
        cf = cross_fit(data, policy, k=k, seed=seed, cells=cells)
        hc = harrell_correction(data, policy, n_replicates=n_replicates, seed=seed, design=design,
                                chunk=chunk, progress=progress, stability=stability, cells=cells)
        statement = ("The threshold was derived from these data by the policy, so its apparent "
                     "values are optimistic; the cross-fitted and corrected values estimate how "
                     "the same rule performs on new cases.")
    else:
        statement = ("The threshold was pre-specified (fixed before these data were seen): no "
                     "selection was made on these data, so the apparent values are honest "
                     "estimates and need no optimism correction.")
    return Optimism(threshold_origin=origin, threshold=t, apparent=apparent, cross_fit=cf,
                    harrell=hc, statement=statement)
