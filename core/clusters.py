"""Repeated cases: rows that share a cluster (a patient, a customer), their design
effect, and the cluster bootstrap.

A deterioration score that fires at every vitals check counts one patient many
times; rows of the same patient are not independent, so intervals that treat
them as independent are too narrow. With a cluster column mapped:

* **Design effect** (:func:`ratio_design_effect`, Kish, *Survey Sampling*,
  1965): every metric at a threshold is a ratio of sums, ``p = sum a / sum b``
  (recall: flagged events over events; precision: flagged events over flagged
  cases; ...). Its variance under cluster sampling is the linearisation
  (Taylor) variance of a ratio estimator over clusters,

      V_clus = K / (K - 1) * sum_c (A_c - p B_c)^2 / (sum_c B_c)^2

  with ``A_c``, ``B_c`` the cluster sums and K the clusters with ``B_c > 0``;
  the design effect is ``deff = V_clus / V_naive`` with the binomial variance
  ``V_naive = p (1 - p) / n`` that a naive (Wilson) interval assumes (n: the
  denominator's cases, or Kish's effective size with sampling weights). This is
  the *analytic* design effect, the one reported by default; the intra-cluster
  correlation it implies follows from Kish's formula
  ``deff = 1 + (m - 1) rho`` with ``m = sum B_c^2 / sum B_c`` (the
  size-weighted mean cluster size of the denominator). When the cluster
  bootstrap has run, :class:`ClusterMetric` also carries the bootstrap design
  effect, the ratio of the replicates' variance to ``V_naive``.
* **Cluster bootstrap** (:func:`cluster_bootstrap`,
  :func:`cluster_metric_intervals`): a replicate draws K clusters with
  replacement (a Multinomial(K, 1/K, ..., 1/K) count per cluster, from
  ``numpy.random.default_rng([seed, r])`` for replicate r alone, so chunking
  never changes a replicate) and takes every drawn cluster with all its rows.
  Each cluster's rows are reduced once to its counts in the event cells of
  :mod:`core.bootstrap` (or in the confusion cells of the groups), a sparse
  (clusters x cells) matrix, so a chunk of replicates is one matrix product
  ``counts = draws @ cluster_cells``: nothing of the order of the rows per
  replicate. The replicate counts are exactly those of resampling whole
  clusters of rows, also with frequency or sampling weights (the clusters'
  weight and squared-weight sums are carried) and per-case miss costs (the
  clusters' cost sums). Percentile intervals and bands follow as in
  :mod:`core.bootstrap` (Efron & Tibshirani 1993; resampling clusters,
  Davison & Hinkley 1997, from memory). Only the cohort design applies: a
  cluster brings its events and non-events together.
* **Patient-level counts** (:func:`cluster_summary`): the number of distinct
  clusters flagged at the point, the clusters with an event and those whose
  event was caught (a flagged event row), with the share caught as a Wilson
  interval over clusters (which are independent).

A count table (one line per score) cannot carry a cluster column:
:func:`cluster_codes` and everything that needs clusters raise an
:class:`~core.errors.InputError` saying so (:data:`COUNT_TABLE_NO_CLUSTERS`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np
import pandas as pd
from scipy import sparse

from core import intervals as _iv
from core.bootstrap import (
    DEFAULT_FPR_GRID,
    DEFAULT_RECALL_GRID,
    DEFAULT_REPLICATES,
    BootstrapResult,
    EventCells,
    ReplicateChunk,
    _ChunkStatistics,
    _points_by_threshold,
    _prepare,
    _record_points,
    event_cells,
    percentile_interval,
)
from core.errors import InputError

__all__ = [
    "CLUSTER_METHOD_NAME",
    "COUNT_TABLE_NO_CLUSTERS",
    "DESIGN_EFFECT_METHOD",
    "METRIC_CELLS",
    "NO_CLUSTER_COLUMN",
    "ClusterBootstrapResult",
    "ClusterMetric",
    "ClusterSummary",
    "cluster_bootstrap",
    "cluster_bootstrap_counts",
    "cluster_codes",
    "cluster_draws",
    "cluster_matrix",
    "cluster_metric_intervals",
    "cluster_statement",
    "cluster_summary",
    "kish_icc",
    "ratio_design_effect",
    "resample_cluster_sums",
    "uses_cluster_bootstrap",
]

COUNT_TABLE_NO_CLUSTERS = (
    "A count table holds one line per score, not one per case, so it cannot carry a cluster "
    "(patient or customer) column: patient-level statements -- distinct patients flagged, "
    "intervals that resample whole patients, the design effect -- need the rows with their ids.")

NO_CLUSTER_COLUMN = (
    "no cluster column is mapped; map the patient or customer id as the cluster to make "
    "patient-level statements and resample whole clusters")

CLUSTER_METHOD_NAME = "cluster bootstrap percentile interval (whole clusters resampled)"

DESIGN_EFFECT_METHOD = (
    "design effect = linearisation variance of the ratio over clusters / binomial variance "
    "(Kish 1965); intra-cluster correlation implied by deff = 1 + (m - 1) rho")

#: Each metric at a threshold as a ratio of confusion cells: (numerator cells, denominator cells).
METRIC_CELLS = {
    "prevalence": (("tp", "fn"), ("tp", "fp", "fn", "tn")),
    "recall": (("tp",), ("tp", "fn")),
    "specificity": (("tn",), ("fp", "tn")),
    "fpr": (("fp",), ("fp", "tn")),
    "precision": (("tp",), ("tp", "fp")),
    "npv": (("tn",), ("fn", "tn")),
    "flag_rate": (("tp", "fp"), ("tp", "fp", "fn", "tn")),
}

METRIC_LABELS = {
    "prevalence": "Prevalence",
    "recall": "Recall (sensitivity)",
    "specificity": "Specificity",
    "fpr": "False-positive rate",
    "precision": "Precision (PPV)",
    "npv": "NPV",
    "flag_rate": "Flag rate",
}

CELL_NAMES = ("tp", "fp", "fn", "tn")

# about 32 MB of float64 draws per chunk
_CHUNK_BUDGET = 1 << 22


def _json(obj):
    from core.choose import json_safe

    return json_safe(obj)


def _dataclass_dict(obj) -> dict:
    return _json({f.name: getattr(obj, f.name) for f in fields(obj)})


# --------------------------------------------------------------------------- codes

def cluster_codes(data) -> tuple[np.ndarray, int]:
    """Integer code (0 .. K-1, order of first appearance) of each row's cluster, and K.

    ``data`` is a row :class:`~core.dataset.Dataset` with a cluster column, or
    the cluster ids themselves (any array of ids). Raises InputError for a
    count table (:data:`COUNT_TABLE_NO_CLUSTERS`), when no cluster column is
    mapped, or when some rows have no id (naming them).
    """
    from core.dataset import Dataset

    if isinstance(data, Dataset):
        if data.kind != "rows":
            raise InputError("cluster", COUNT_TABLE_NO_CLUSTERS)
        if data.cluster is None:
            raise InputError("cluster", NO_CLUSTER_COLUMN)
        return data.cluster_codes()
    return _cluster_codes(data, "cluster")


def _cluster_codes(values, name: str) -> tuple[np.ndarray, int]:
    """:func:`cluster_codes` of an array of ids (``name`` for the messages)."""
    arr = np.asarray(values)
    if arr.ndim != 1:
        raise InputError(name, f"must be one id per row (1-d), got shape {arr.shape}")
    codes, uniques = pd.factorize(arr, use_na_sentinel=True)
    missing = np.flatnonzero(codes < 0)
    if missing.size:
        raise InputError(name, "has rows without a cluster id", missing,
                         hint="every case needs its cluster id (patient or customer)")
    return codes.astype(np.int64), len(uniques)


def _cluster_name(data) -> str:
    m = getattr(data, "mapping", None)
    return (m.cluster if m is not None and m.cluster else "cluster")


def uses_cluster_bootstrap(data, design: str = "cohort") -> bool:
    """True when intervals and bands should resample whole clusters: a row dataset with a
    cluster column, judged under the cohort design (the default everywhere then)."""
    from core.dataset import Dataset

    return (isinstance(data, Dataset) and data.kind == "rows" and data.cluster is not None
            and design == "cohort")


def cluster_statement(data, design: str = "cohort") -> str:
    """One sentence for the record and memo on how repeated cases are handled."""
    from core.dataset import Dataset

    if isinstance(data, Dataset) and data.kind == "counts":
        return COUNT_TABLE_NO_CLUSTERS
    if not isinstance(data, Dataset) or data.cluster is None:
        return ("No cluster column is mapped: every row is taken as an independent case. If a "
                "patient or customer can appear more than once, map the id as the cluster.")
    codes, K = cluster_codes(data)
    n = codes.shape[0]
    col = _cluster_name(data)
    if design != "cohort":
        return (f"Repeated cases: {n:,} rows from {K:,} clusters ({col}). The declared "
                f"{design} design resamples events and non-events separately, which cannot "
                "keep a cluster's rows together: intervals treat rows as independent and are "
                "too narrow where clusters repeat.")
    return (f"Repeated cases: {n:,} rows from {K:,} clusters ({col}); every bootstrap interval "
            "and band resamples whole clusters (cluster bootstrap), so a cluster's rows stay "
            "together.")


# --------------------------------------------------------------------------- draws

def cluster_draws(n_clusters: int, seed: int, start: int, stop: int) -> np.ndarray:
    """(stop - start, K) counts of each cluster in replicates ``start .. stop-1``.

    Replicate r draws K cluster indices uniformly with replacement from
    ``numpy.random.default_rng([seed, r])`` alone: its row of counts is
    Multinomial(K, 1/K, ..., 1/K), whatever chunk it is drawn in.
    """
    K = int(n_clusters)
    if K < 1:
        raise InputError("cluster", "needs at least one cluster")
    D = np.empty((int(stop) - int(start), K))
    for i, r in enumerate(range(int(start), int(stop))):
        g = np.random.default_rng([int(seed), int(r)])
        D[i] = np.bincount(g.integers(0, K, K), minlength=K)
    return D


def cluster_matrix(codes, n_clusters: int, columns, values, n_columns: int) -> sparse.csr_matrix:
    """Sparse (clusters x columns) sums: entry (c, j) is the sum of ``values`` over the rows
    of cluster c assigned to column j (``codes``, ``columns``, ``values`` are per entry)."""
    codes = np.asarray(codes, dtype=np.int64)
    columns = np.asarray(columns, dtype=np.int64)
    values = np.asarray(values, dtype=np.float64)
    m = sparse.coo_matrix((values, (codes, columns)), shape=(int(n_clusters), int(n_columns)))
    return m.tocsr()  # sums duplicates


def _chunk_size(n_clusters: int, n_columns: int, chunk) -> int:
    if chunk is not None:
        c = int(chunk)
        if c < 1:
            raise InputError("chunk", f"must be at least 1, got {chunk!r}")
        return c
    return int(np.clip(_CHUNK_BUDGET // max(n_clusters, n_columns, 1), 1, 256))


def resample_cluster_sums(matrix, n_replicates: int = DEFAULT_REPLICATES, seed: int = 0, *,
                          chunk: int | None = None, start: int = 0, progress=None):
    """Yield ``(lo, hi, sums)``: the (hi - lo, J) column sums of replicates lo .. hi-1.

    ``matrix`` is a (K, J) array or sparse matrix of per-cluster sums (see
    :func:`cluster_matrix`); a replicate's sums are its cluster counts
    (:func:`cluster_draws`) times the matrix, so a chunk costs one product.
    ``progress(done, total)`` is called after each chunk.
    """
    n_rep = int(n_replicates)
    if n_rep < 1:
        raise InputError("n_replicates", f"must be at least 1, got {n_replicates!r}")
    K, J = matrix.shape
    size = _chunk_size(K, J, chunk)
    MT = sparse.csr_matrix(matrix.T) if sparse.issparse(matrix) else None
    dense = None if MT is not None else np.asarray(matrix, dtype=np.float64)
    stop_all = int(start) + n_rep
    for lo in range(int(start), stop_all, size):
        hi = min(lo + size, stop_all)
        D = cluster_draws(K, seed, lo, hi)
        if MT is not None:
            S = np.ascontiguousarray((MT @ D.T).T)
        else:
            S = D @ dense
        yield lo, hi, S
        if progress is not None:
            progress(hi - int(start), n_rep)


# --------------------------------------------------------------------------- design effect

def ratio_design_effect(numerator, denominator, codes, n_clusters: int, *, naive_trials=None,
                        strata=None, n_strata: int | None = None):
    """Design effect of the ratio ``p = sum a / sum b`` under cluster sampling.

    Parameters
    ----------
    numerator, denominator : array (n,)
        Per-row ``a`` and ``b`` (e.g. weight x flagged event, weight x event).
    codes, n_clusters : cluster codes (:func:`cluster_codes`) and K.
    naive_trials : float or array (S,), optional
        The n of the naive binomial variance ``p (1 - p) / n`` (default: sum b;
        pass Kish's effective size with sampling weights).
    strata, n_strata : optional per-row stratum codes (bins, groups), one
        design effect per stratum, vectorised.

    Returns
    -------
    dict of arrays (or floats without strata): ``estimate`` p, ``variance``
    (linearisation, ``K/(K-1) sum_c (A_c - p B_c)^2 / (sum B)^2``),
    ``naive_variance``, ``design_effect`` (their ratio; NaN where p is 0 or 1
    or fewer than two clusters hold the denominator), ``clusters`` (K with
    B_c > 0), ``mean_cluster_size`` (``sum B_c^2 / sum B_c``) and ``icc``
    (:func:`kish_icc`).
    """
    a = np.asarray(numerator, dtype=np.float64)
    b = np.asarray(denominator, dtype=np.float64)
    codes = np.asarray(codes, dtype=np.int64)
    K = int(n_clusters)
    scalar = strata is None
    if scalar:
        s_codes = np.zeros(codes.shape[0], dtype=np.int64)
        S = 1
    else:
        s_codes = np.asarray(strata, dtype=np.int64)
        S = int(n_strata) if n_strata is not None else int(s_codes.max()) + 1
    key = s_codes * K + codes
    # only the (stratum, cluster) pairs that occur: no S x K table
    uk, inv = np.unique(key, return_inverse=True)
    A = np.bincount(inv, weights=a, minlength=uk.shape[0])
    B = np.bincount(inv, weights=b, minlength=uk.shape[0])
    st = uk // K
    sumA = np.bincount(st, weights=A, minlength=S)
    sumB = np.bincount(st, weights=B, minlength=S)
    kc = np.bincount(st, weights=(B > 0).astype(np.float64), minlength=S)
    with np.errstate(invalid="ignore", divide="ignore"):
        p = sumA / sumB
        resid = A - p[st] * B
        ss = np.bincount(st, weights=resid * resid, minlength=S)
        var = np.where(kc >= 2, kc / (kc - 1.0) * ss / (sumB * sumB), np.nan)
        n_naive = sumB if naive_trials is None else np.broadcast_to(
            np.asarray(naive_trials, dtype=np.float64), (S,))
        naive = p * (1.0 - p) / n_naive
        deff = np.where((naive > 0) & np.isfinite(var), var / naive, np.nan)
        m = np.bincount(st, weights=B * B, minlength=S) / sumB
    icc = kish_icc(deff, m)
    out = {"estimate": p, "variance": var, "naive_variance": naive, "design_effect": deff,
           "clusters": kc, "mean_cluster_size": m, "icc": icc}
    if scalar:
        return {k: float(v[0]) for k, v in out.items()}
    return out


def kish_icc(design_effect, mean_cluster_size):
    """Intra-cluster correlation implied by Kish's ``deff = 1 + (m - 1) rho``:
    ``rho = (deff - 1) / (m - 1)``; NaN when every cluster has one case (m = 1)."""
    d = np.asarray(design_effect, dtype=np.float64)
    m = np.asarray(mean_cluster_size, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.where(m > 1.0 + 1e-12, (d - 1.0) / (m - 1.0), np.nan)
    return float(r) if r.ndim == 0 else r


# --------------------------------------------------------------------------- the bootstrap

@dataclass(frozen=True, eq=False)
class ClusterBootstrapResult(BootstrapResult):
    """A :class:`~core.bootstrap.BootstrapResult` whose replicates resample whole clusters.

    Every method of the parent works unchanged (``band``, ``metric_at``, and
    :func:`core.uncertainty.bootstrap_intervals` on it); ``describe()`` and
    ``method_name`` say that clusters were resampled.
    """

    n_clusters: int = 0
    cluster_column: str = "cluster"
    method_name: str = CLUSTER_METHOD_NAME

    def describe(self) -> str:
        return (f"cluster bootstrap, {self.n_replicates:,} replicates, each drawing "
                f"{self.n_clusters:,} clusters ({self.cluster_column}) with replacement with all "
                f"their rows, seed {self.seed}; {self.cells.n_cells:,} cells "
                f"({self.cells.n_event_cells:,} event scores)")


class _ClusterCells:
    """Each cluster's weight in every event cell (events, non-events, squared weights,
    miss costs), one sparse matrix with the blocks side by side."""

    def __init__(self, data, cells: EventCells):
        codes, K = cluster_codes(data)
        self.codes, self.n_clusters = codes, K
        C = cells.n_cells
        self.C = C
        row_cell = cells.cell_of(data.y_score)
        y = data.y_true
        w = np.ones(y.shape[0]) if data.sample_weight is None else data.sample_weight
        cols = [np.where(y, row_cell, C + row_cell)]
        vals = [w]
        keys = [codes]
        nb = 2
        self.sq = cells.events_sq is not None
        if self.sq:
            cols.append(np.where(y, 2 * C + row_cell, 3 * C + row_cell))
            vals.append(w * w)
            keys.append(codes)
            nb = 4
        self.cost = cells.has_costs
        if self.cost:
            ev = np.flatnonzero(y)
            cols.append(nb * C + row_cell[ev])
            vals.append(w[ev] * data.case_cost[ev])
            keys.append(codes[ev])
            nb += 1
        self.n_blocks = nb
        self.matrix = cluster_matrix(np.concatenate(keys), K, np.concatenate(cols),
                                     np.concatenate(vals), nb * C)

    def chunk(self, lo, hi, S) -> ReplicateChunk:
        C = self.C

        def blk(i):
            return np.ascontiguousarray(S[:, i * C:(i + 1) * C])

        esq = nsq = cost = None
        if self.sq:
            esq, nsq = blk(2), blk(3)
        if self.cost:
            cost = blk(4 if self.sq else 2)
        return ReplicateChunk(start=lo, stop=hi, events=blk(0), non_events=blk(1),
                              events_sq=esq, non_events_sq=nsq, event_cost=cost)


def cluster_bootstrap_counts(data, cells: EventCells | None = None,
                             n_replicates: int = DEFAULT_REPLICATES, seed: int = 0, *,
                             chunk: int | None = None, start: int = 0, progress=None):
    """Yield :class:`~core.bootstrap.ReplicateChunk` s whose cell counts resample whole clusters.

    The drop-in counterpart of :func:`core.bootstrap.bootstrap_counts` for a
    row dataset with a cluster column (cohort design): the same cells, the
    same chunk fields (squared weights with sampling weights, miss costs with
    per-case costs), replicate r from ``default_rng([seed, r])``.
    """
    if cells is None:
        cells = event_cells(data)
    cc = _ClusterCells(data, cells)
    for lo, hi, S in resample_cluster_sums(cc.matrix, n_replicates, seed, chunk=chunk,
                                           start=start, progress=progress):
        yield cc.chunk(lo, hi, S)


def cluster_bootstrap(data, *, n_replicates: int = DEFAULT_REPLICATES, seed: int = 0,
                      thresholds=(), prevalence: float | None = None, costs: dict | None = None,
                      cases_per_period: float | None = None, recall_grid=DEFAULT_RECALL_GRID,
                      fpr_grid=DEFAULT_FPR_GRID, chunk: int | None = None, progress=None,
                      collectors=(), cells: EventCells | None = None,
                      design: str = "cohort") -> ClusterBootstrapResult:
    """The bootstrap of :func:`core.bootstrap.bootstrap`, resampling whole clusters.

    Takes the same arguments (``design`` must be ``"cohort"``) and returns the
    same statistics -- ROC AUC, average precision, PR and ROC bands, counts,
    cost and flags per period at the thresholds, and every ``collector``
    (e.g. threshold stability) updated on each chunk -- as a
    :class:`ClusterBootstrapResult`. ``data`` must be a row Dataset with a
    cluster column (InputError otherwise: a count table cannot carry one).
    """
    from core.dataset import Dataset

    if design != "cohort":
        raise InputError("design", "the cluster bootstrap draws whole clusters, which bring "
                         "their events and non-events together: it needs the cohort design, "
                         f"got {design!r}")
    if not isinstance(data, Dataset):
        raise InputError("cluster", "the cluster bootstrap needs a Dataset with a cluster column "
                         "(a Curve has no rows)")
    _, K = cluster_codes(data)  # raises for a count table, no cluster column or missing ids
    ths = tuple(float(t) for t in thresholds)
    if cells is None:
        cells = event_cells(data, thresholds=ths)
    cols, n_rep, rg, fg, (auc, ap, pb, tb, Ps, Ns, at_tp, at_fp, at_cost, at_pi) = _prepare(
        cells, ths, costs, prevalence, n_replicates, recall_grid, fpr_grid)
    stats = _ChunkStatistics(cells, n_rep, chunk, rg, fg)
    for ch in cluster_bootstrap_counts(data, cells, n_rep, seed, chunk=chunk, progress=progress):
        s = slice(ch.start, ch.stop)
        tp, fp = stats(ch, auc[s], ap[s], pb[s], tb[s])
        P, N = tp[:, -1], fp[:, -1]
        Ps[s], Ns[s] = P, N
        _record_points(ch, tp, fp, P, N, s, cols, costs, prevalence, at_tp, at_fp, at_cost, at_pi)
        for c in collectors:
            c.update(ch, tp, fp)
    at = _points_by_threshold(ths, at_tp, at_fp, at_cost, at_pi, Ps, Ns, cases_per_period)
    return ClusterBootstrapResult(
        cells=cells, n_replicates=n_rep, seed=int(seed), design="cohort", roc_auc=auc,
        average_precision=ap, recall_grid=rg, precision_band=pb, fpr_grid=fg, tpr_band=tb,
        thresholds=ths, at=at, events=Ps, non_events=Ns,
        prevalence=None if prevalence is None else float(prevalence),
        costs=None if costs is None else dict(costs),
        cases_per_period=None if cases_per_period is None else float(cases_per_period),
        notes=(), n_clusters=K, cluster_column=_cluster_name(data))


# --------------------------------------------------------------------------- metrics at a point

@dataclass(frozen=True)
class ClusterMetric:
    """One metric at the threshold: naive and cluster-aware intervals side by side.

    ``naive_low`` / ``naive_high``: the Wilson interval treating rows as
    independent (on Kish's effective size with sampling weights);
    ``low`` / ``high``: the cluster bootstrap percentile interval (NaN when it
    was not run); ``design_effect``: the analytic (linearisation) design
    effect; ``design_effect_bootstrap``: the replicates' variance over the
    binomial variance; ``effective_size``: the naive size over the analytic
    design effect; ``mean_cluster_size``: ``sum B_c^2 / sum B_c`` of the
    denominator (near 1 when its clusters rarely repeat, where Kish's implied
    correlation is not informative).
    """

    metric: str
    label: str
    estimate: float
    naive_low: float
    naive_high: float
    low: float
    high: float
    trials: float
    design_effect: float
    design_effect_bootstrap: float
    effective_size: float
    mean_cluster_size: float
    confidence: float
    method: str

    def to_dict(self) -> dict:
        return _dataclass_dict(self)


def _flagged(scores, threshold_point, higher_is_riskier):
    s = np.asarray(scores, dtype=np.float64)
    return s >= threshold_point if higher_is_riskier else s <= threshold_point


def _point_threshold(y_true, y_score, sample_weight, threshold, higher_is_riskier):
    """The curve's own threshold for the counts of ``threshold`` (ties move together)."""
    from core.curve import sweep

    c = sweep(y_true, y_score, sample_weight, higher_is_riskier=higher_is_riskier)
    return float(c.thresholds[c.index_at(threshold)])


def _cell_index(y, flagged):
    """0 tp, 1 fp, 2 fn, 3 tn for every row."""
    return np.where(flagged, np.where(y, 0, 1), np.where(y, 2, 3)).astype(np.int64)


def _ratio_values(counts: dict, metric: str):
    num, den = METRIC_CELLS[metric]
    a = sum(counts[c] for c in num)
    b = sum(counts[c] for c in den)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.asarray(a, dtype=np.float64) / np.asarray(b, dtype=np.float64)


def cluster_metric_intervals(y_true, y_score, cluster, threshold: float, sample_weight=None, *,
                             weight_kind: str | None = None, higher_is_riskier: bool = True,
                             metrics=("prevalence", "recall", "specificity", "precision", "npv",
                                      "flag_rate"),
                             n_replicates: int = DEFAULT_REPLICATES, seed: int = 0,
                             confidence: float = 0.95, chunk: int | None = None,
                             progress=None) -> list[ClusterMetric]:
    """Naive and cluster-bootstrap intervals, and the design effect, of metrics at a threshold.

    A case is flagged when ``score >= t`` (``<=`` with lower-is-riskier); every
    metric is a ratio of the confusion cells (:data:`METRIC_CELLS`), judged at
    the validation mix. Each cluster's weighted tp, fp, fn, tn form a (K, 4)
    matrix; replicate r draws K clusters with replacement
    (``default_rng([seed, r])``) and its counts are the draws times that
    matrix. Intervals are percentile intervals over the replicates where the
    metric is defined (``n_replicates=0`` skips the bootstrap). Sampling
    weights (``weight_kind="sampling"``): the naive interval and the design
    effect use Kish's effective size of each denominator.

    Returns
    -------
    list of ClusterMetric
    """
    from core.curve import _check_finite, _check_labels

    y = _check_labels(y_true)
    n = y.shape[0]
    s = _check_finite("y_score", y_score, n)
    w = None if sample_weight is None else _check_finite("sample_weight", sample_weight, n,
                                                          allow_negative=False)
    codes, K = cluster_codes(cluster)
    if codes.shape[0] != n:
        raise InputError("cluster", f"has {codes.shape[0]:,} values, expected {n:,}")
    for m in metrics:
        if m not in METRIC_CELLS:
            raise InputError("metrics", f"unknown metric {m!r}; known: {', '.join(METRIC_CELLS)}")
    t_point = _point_threshold(y, s, w, threshold, higher_is_riskier)
    flagged = _flagged(s, t_point, higher_is_riskier)
    return _metric_intervals(y, flagged, w, weight_kind, codes, K, tuple(metrics),
                             int(n_replicates), int(seed), float(confidence), chunk, progress)


def _metric_intervals(y, flagged, w, weight_kind, codes, K, metrics, n_rep, seed, confidence,
                      chunk, progress):
    n = y.shape[0]
    ww = np.ones(n) if w is None else w
    cell = _cell_index(y, flagged)
    counts = {c: float(ww[cell == j].sum()) for j, c in enumerate(CELL_NAMES)}
    sampling = weight_kind == "sampling" and w is not None
    sq = {c: float((ww[cell == j] ** 2).sum()) for j, c in enumerate(CELL_NAMES)}
    boot = {}
    if n_rep > 0:
        M = cluster_matrix(codes, K, cell, ww, 4)
        reps = {c: np.empty(n_rep) for c in CELL_NAMES}
        for lo, hi, S in resample_cluster_sums(M, n_rep, seed, chunk=chunk, progress=progress):
            for j, c in enumerate(CELL_NAMES):
                reps[c][lo:hi] = S[:, j]
        boot = {m: _ratio_values(reps, m) for m in metrics}
    out = []
    masks = {c: (cell == j) for j, c in enumerate(CELL_NAMES)}
    for m in metrics:
        num, den = METRIC_CELLS[m]
        p = float(_ratio_values(counts, m))
        den_w = sum(counts[c] for c in den)
        trials = den_w
        if sampling:
            trials = float(_iv.effective_size_from_sums(den_w, sum(sq[c] for c in den)))
        if den_w > 0 and trials > 0:
            nlo, nhi = _iv.wilson_interval(p * trials, trials, confidence)
        else:
            nlo = nhi = math.nan
        a = ww * np.any([masks[c] for c in num], axis=0)
        b = ww * np.any([masks[c] for c in den], axis=0)
        de = ratio_design_effect(a, b, codes, K, naive_trials=trials if trials > 0 else np.nan)
        lo = hi = deb = math.nan
        if m in boot:
            v = boot[m]
            lo, hi = percentile_interval(v, confidence)
            ok = np.isfinite(v)
            if ok.sum() > 1 and de["naive_variance"] > 0:
                deb = float(np.var(v[ok], ddof=1) / de["naive_variance"])
        d = de["design_effect"]
        out.append(ClusterMetric(
            metric=m, label=METRIC_LABELS[m], estimate=p, naive_low=float(nlo),
            naive_high=float(nhi), low=float(lo), high=float(hi), trials=float(trials),
            design_effect=float(d), design_effect_bootstrap=float(deb),
            effective_size=float(trials / d) if d > 0 else math.nan,
            mean_cluster_size=float(de["mean_cluster_size"]), confidence=float(confidence),
            method=CLUSTER_METHOD_NAME if m in boot else "Wilson score interval (naive)"))
    return out


# --------------------------------------------------------------------------- summary

@dataclass(frozen=True, eq=False)
class ClusterSummary:
    """Repeated cases at one threshold (see the module docstring).

    ``sizes``: number of clusters by rows per cluster (``"1"``, ``"2"``, ...,
    the largest sizes pooled as ``"10+"``). ``clusters_flagged``: distinct
    clusters with at least one flagged row; ``event_clusters``: clusters with
    at least one event row; ``event_clusters_caught``: those with a flagged
    event row; ``cluster_recall``: their share with a Wilson interval over
    clusters (clusters are independent). ``design_effect`` and ``icc``: of the
    prevalence (the outcome), the ICC implied by Kish's formula. Counts are of
    rows and clusters, unweighted.
    """

    column: str
    threshold: float
    point_threshold: float
    n_rows: int
    n_clusters: int
    mean_size: float
    max_size: int
    repeated_clusters: int
    rows_in_repeated: int
    sizes: dict
    rows_flagged: int
    clusters_flagged: int
    event_rows: int
    event_clusters: int
    event_rows_flagged: int
    event_clusters_caught: int
    cluster_recall: tuple[float, float, float]
    design_effect: float
    icc: float
    metrics: tuple[ClusterMetric, ...]
    n_replicates: int
    seed: int
    confidence: float
    methods: dict
    statements: tuple[str, ...]

    def metric(self, name: str) -> ClusterMetric:
        for m in self.metrics:
            if m.metric == name:
                return m
        raise KeyError(name)

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self) if f.name != "metrics"}
        d["metrics"] = [m.to_dict() for m in self.metrics]
        d["cluster_recall"] = dict(zip(("estimate", "low", "high"), self.cluster_recall))
        return _json(d)


def cluster_summary(dataset, threshold: float, *, confidence: float = 0.95,
                    n_replicates: int = DEFAULT_REPLICATES, seed: int = 0,
                    chunk: int | None = None, progress=None) -> ClusterSummary:
    """Patient-level view of one threshold: clusters, design effects, cluster-bootstrap intervals.

    ``dataset``: a row :class:`~core.dataset.Dataset` with a cluster column
    (InputError for a count table or without clusters, see
    :data:`COUNT_TABLE_NO_CLUSTERS`). ``threshold`` in score units; a case is
    flagged when its score reaches the point's threshold (ties together).
    """
    codes, K = cluster_codes(dataset)
    y = dataset.y_true
    n = y.shape[0]
    c = dataset.curve()
    k = c.index_at(threshold)
    t_point = float(c.thresholds[k])
    flagged = _flagged(dataset.y_score, t_point, dataset.higher_is_riskier)
    sizes = np.bincount(codes, minlength=K)
    flagged_c = np.bincount(codes, weights=flagged.astype(np.float64), minlength=K) > 0
    event_c = np.bincount(codes, weights=y.astype(np.float64), minlength=K) > 0
    caught_c = np.bincount(codes, weights=(y & flagged).astype(np.float64), minlength=K) > 0
    n_ev_c = int(event_c.sum())
    n_caught = int(caught_c.sum())
    cr = n_caught / n_ev_c if n_ev_c else math.nan
    clo, chi = _iv.wilson_interval(n_caught, n_ev_c, confidence) if n_ev_c else (math.nan, math.nan)
    size_counts = np.bincount(sizes)
    size_tab = {str(i): int(size_counts[i]) for i in range(1, min(size_counts.shape[0], 10))
                if size_counts[i]}
    if size_counts.shape[0] > 10:
        size_tab["10+"] = int(size_counts[10:].sum())
    metrics = _metric_intervals(y, flagged, dataset.sample_weight, dataset.weight_kind, codes, K,
                                ("prevalence", "recall", "specificity", "precision", "npv",
                                 "flag_rate"),
                                int(n_replicates), int(seed), float(confidence), chunk, progress)
    col = _cluster_name(dataset)
    repeated = int((sizes > 1).sum())
    prev = metrics[0]
    rec = next(m for m in metrics if m.metric == "recall")
    st = [cluster_statement(dataset)]
    st.append(f"{repeated:,} of {K:,} clusters ({col}) appear more than once, holding "
              f"{int(sizes[sizes > 1].sum()):,} of {n:,} rows; the largest holds "
              f"{int(sizes.max()):,} rows.")
    thr = "flag none" if not np.isfinite(t_point) else f"{t_point:g}"
    st.append(f"At threshold {thr}: {int(flagged.sum()):,} rows flagged, from "
              f"{int(flagged_c.sum()):,} distinct clusters; {n_caught:,} of the {n_ev_c:,} "
              f"clusters with an event had a flagged event row"
              + (f" (cluster-level recall {cr:.1%}, {confidence:.0%} Wilson interval over "
                 f"clusters {clo:.1%} to {chi:.1%})." if n_ev_c else "."))
    icc = kish_icc(prev.design_effect, prev.mean_cluster_size)
    if np.isfinite(prev.design_effect):
        st.append(f"Design effect of the prevalence {prev.design_effect:.2f} (intra-cluster "
                  f"correlation {icc:.3f}); of recall {rec.design_effect:.2f}: intervals "
                  "that treat rows as independent are too narrow by about the square root of "
                  "the design effect where it exceeds 1.")
    methods = {"design_effect": DESIGN_EFFECT_METHOD,
               "intervals": CLUSTER_METHOD_NAME if n_replicates else "Wilson score interval",
               "naive": "Wilson score interval treating rows as independent",
               "cluster_recall": "Wilson score interval over clusters"}
    return ClusterSummary(
        column=col, threshold=float(threshold), point_threshold=t_point, n_rows=int(n),
        n_clusters=K, mean_size=float(n / K), max_size=int(sizes.max()),
        repeated_clusters=repeated, rows_in_repeated=int(sizes[sizes > 1].sum()), sizes=size_tab,
        rows_flagged=int(flagged.sum()), clusters_flagged=int(flagged_c.sum()),
        event_rows=int(y.sum()), event_clusters=n_ev_c,
        event_rows_flagged=int((y & flagged).sum()), event_clusters_caught=n_caught,
        cluster_recall=(float(cr), float(clo), float(chi)),
        design_effect=float(prev.design_effect), icc=float(icc), metrics=tuple(metrics),
        n_replicates=int(n_replicates), seed=int(seed), confidence=float(confidence),
        methods=methods, statements=tuple(st))
