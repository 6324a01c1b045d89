"""Drift of the scores since approval: PSI, a binned KS statistic and the change in prevalence.

A decision record keeps the validation scores only as binned counts of
events and non-events per bin (summaries, never rows). A recheck bins the
new scores on the same edges (:func:`bin_dataset`) and compares the two
sets of counts with pure functions over arrays:

* **Population stability index** (:func:`population_stability_index`),
  overall (events + non-events per bin) and per class. With bin shares
  ``p_i`` (reference) and ``q_i`` (new)::

      PSI = sum_i (q_i - p_i) ln(q_i / p_i)

  A bin empty in one sample would make the log infinite, so every share is
  floored at ``floor`` (default ``1e-4``, common practice, no source) before
  the sum -- the shares then no longer sum to exactly 1. The effect is
  reported: the floored bins and their part of the PSI (a bin empty in one
  sample and holding a share s in the other adds ``(s - floor) ln(s /
  floor)``: 0.046 at s = 0.01). Bands (common practice, no source):
  **stable** below 0.1, **watch** from 0.1 to 0.25, **shifted** above 0.25.

  PSI is never zero on two samples, even from one population. Under no
  shift, ``n_h PSI`` with ``n_h = 1 / (1/n_ref + 1/n_new)`` is close to a
  chi-square with ``B - 1`` degrees of freedom (B: bins holding any case):
  expanding ``ln(q/p)`` around the midpoint m gives ``PSI ~ sum (q - p)^2 /
  m``, and ``n_h`` times that is Pearson's chi-square statistic of the
  2 x B homogeneity table (derived here; the chi-square law of that
  statistic is textbook). So ``(B - 1)(1/n_ref + 1/n_new)`` is the PSI
  sampling alone produces on average and ``chi2_{0.95}(B - 1)(1/n_ref +
  1/n_new)`` the level it exceeds in 5 % of samples; with 20 bins and 150
  events the event PSI of an unchanged population averages 0.13 -- "watch"
  from noise alone -- and the report says so. The approximation wants about
  five expected cases per bin.

* **KS statistic from binned distributions** (:func:`binned_ks`). With
  ``G(e) = P(score < e)`` known at every inner edge from the cumulative bin
  shares, ``KS_binned = max_e |G_ref(e) - G_new(e)|``. The exact two-sample
  statistic ``D = sup_x |F_ref(x) - F_new(x)|`` (``F(x) = P(score <= x)``,
  as ``scipy.stats.ks_2samp``) satisfies

      KS_binned <= D <= max_j max(|d_j + a_j|, |d_j - b_j|)
                   <= KS_binned + max_j max(a_j, b_j)

  where for bin j ``[e_j, e_j+1)``, ``d_j = G_ref(e_j) - G_new(e_j)`` (0
  below the first bin) and ``a_j``, ``b_j`` are the bin's reference and new
  shares. Lower bound: each ``G(e)`` is the left limit of ``F`` at e, so
  every ``|d|`` is a limit of ``|F_ref - F_new|`` and cannot exceed its
  supremum. Upper bound: for x in bin j, ``F_ref(x) = G_ref(e_j) + alpha``
  with ``0 <= alpha <= a_j`` and ``F_new(x) = G_new(e_j) + beta`` with
  ``0 <= beta <= b_j``, so ``F_ref(x) - F_new(x)`` lies in ``[d_j - b_j,
  d_j + a_j]``; the bins cover the real line (outer bins open), so the
  largest end over the bins bounds D. The middle bound is attained when a
  bin's reference mass sits at its left edge and its new mass just below
  its right edge; the last one is the simpler bin-width bound
  (``|d_j| <= KS_binned``). :class:`BinnedKS` carries all three.

* **Change in prevalence** (:func:`prevalence_change`): new minus
  reference, with Newcombe's hybrid score interval for the difference of
  two independent proportions (:func:`core.groups.newcombe_interval`;
  Newcombe, Stat Med 1998, method 10).

* **Calibration drift** (:func:`calibration_drift`): the calibration
  intercept (in the large), slope and observed / expected of
  :mod:`core.calibration` on the new data against the record's. Each is
  judged on the new data against its ideal (0, 1, 1): **fails** when its
  interval excludes the ideal, **holds** when it contains it with at least
  100 events, **unclear** otherwise; the change since approval gets a Wald
  interval (intercept, slope) or the Katz log interval of a ratio (O/E).
  Scores can stay put while outcomes move -- PSI low, O/E far from 1 --
  and this is the check that catches it.

:func:`score_drift` runs all of it for a reference and a new
:class:`ScoreBins`. Weighted counts are accepted; their effective sizes
(Kish's, for sampling weights) set the noise levels and the prevalence
interval.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np
from scipy import stats

from core import intervals as _iv
from core.errors import InputError
from core.groups import newcombe_interval

__all__ = [
    "DEFAULT_PSI_FLOOR",
    "PSI",
    "PSI_BANDS_TEXT",
    "PSI_SHIFTED",
    "PSI_STABLE",
    "BinnedKS",
    "PrevalenceChange",
    "ScoreBins",
    "ScoreDrift",
    "bin_dataset",
    "binned_ks",
    "population_stability_index",
    "prevalence_change",
    "psi_band",
    "score_bins",
    "score_drift",
    "CALIBRATION_MEASURES",
    "CalibrationMeasureDrift",
    "CalibrationDrift",
    "calibration_drift",
]

#: PSI below this is "stable" (common practice, no source).
PSI_STABLE = 0.1
#: PSI above this is "shifted"; from PSI_STABLE to here "watch" (common practice, no source).
PSI_SHIFTED = 0.25
PSI_BANDS_TEXT = ("PSI bands (common practice, no source): below 0.1 stable, 0.1 to 0.25 watch, "
                  "above 0.25 shifted.")
#: Share given to an empty bin before the PSI's logarithm (common practice, no source).
DEFAULT_PSI_FLOOR = 1e-4

PSI_METHOD = "PSI = sum (q - p) ln(q / p) over the reference's bins, shares floored at {floor:g}"
KS_METHOD = ("KS statistic from cumulative bin shares at the inner edges; the exact statistic lies "
             "between it and the bin bound max_j max(|d_j + a_j|, |d_j - b_j|)")
NEWCOMBE_METHOD = ("Newcombe hybrid score interval for the difference of two proportions "
                   "(Newcombe 1998)")
_NOISE_LEVEL = 0.95


def _json(obj):
    from core.choose import json_safe

    return json_safe(obj)


def _fmt(x, digits=3):
    return "—" if x is None or not np.isfinite(x) else f"{x:.{digits}f}"


# --------------------------------------------------------------------------- inputs

def _edges(edges) -> np.ndarray:
    """Edges as floats ("inf" / "-inf" strings of a JSON record accepted), checked."""
    raw = np.asarray(edges, dtype=object).ravel()
    try:
        e = np.array([float(x) for x in raw], dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError("edges", "must be numbers (or the strings 'inf' / '-inf')") from None
    if e.size < 2:
        raise InputError("edges", f"need at least 2 edges (one bin), got {e.size}")
    if np.isnan(e).any():
        raise InputError("edges", "contain NaN")
    if np.isinf(e[1:-1]).any():
        raise InputError("edges", "only the outer edges may be infinite")
    if not np.all(np.diff(e) > 0):
        bad = np.flatnonzero(~(np.diff(e) > 0))
        raise InputError("edges", f"must increase strictly; edge {int(bad[0]) + 2} is not above "
                                  f"edge {int(bad[0]) + 1}")
    return e


def _counts(name, counts, n_bins=None) -> np.ndarray:
    c = np.asarray(counts, dtype=np.float64)
    if c.ndim != 1:
        raise InputError(name, f"must be one-dimensional bin counts, got shape {c.shape}")
    if n_bins is not None and c.shape[0] != n_bins:
        raise InputError(name, f"has {c.shape[0]} bins, expected {n_bins}")
    if c.shape[0] == 0:
        raise InputError(name, "has no bins")
    bad = ~np.isfinite(c) | (c < 0)
    if bad.any():
        where = ", ".join(str(int(i) + 1) for i in np.flatnonzero(bad)[:5])
        raise InputError(name, f"must be finite, non-negative counts (bin {where})")
    return c


def _size(name, value, total) -> float:
    if value is None:
        return float(total)
    v = float(value)
    if not np.isfinite(v) or v < 0:
        raise InputError(name, f"must be a finite, non-negative size, got {value!r}")
    return v


def _shares(c: np.ndarray) -> np.ndarray:
    total = c.sum()
    if total <= 0:
        return np.full(c.shape, np.nan)
    return c / total


# --------------------------------------------------------------------------- bins

@dataclass(frozen=True)
class ScoreBins:
    """Weighted event and non-event counts on fixed edges.

    Bin i holds ``edges[i] <= score < edges[i+1]``; the first and last bins
    are open (a score below ``edges[0]`` or at or above ``edges[-1]`` is
    counted in them, and ``below`` / ``above`` say how many cases lay outside
    the finite outer edges). ``events_size`` / ``non_events_size`` are the
    effective numbers of events and non-events and ``cases_size`` that of
    all cases (Kish's with sampling weights, else the totals).
    """

    edges: np.ndarray
    events: np.ndarray
    non_events: np.ndarray
    events_size: float
    non_events_size: float
    cases_size: float
    below: float = 0.0
    above: float = 0.0

    @property
    def n_bins(self) -> int:
        return int(self.events.shape[0])

    @property
    def cases(self) -> np.ndarray:
        return self.events + self.non_events

    @property
    def n_events(self) -> float:
        return float(self.events.sum())

    @property
    def n_cases(self) -> float:
        return float(self.cases.sum())

    def to_dict(self) -> dict:
        return _json({f.name: getattr(self, f.name) for f in fields(self)})


def score_bins(edges, events, non_events, *, events_size=None, non_events_size=None,
               cases_size=None) -> ScoreBins:
    """Stored bin counts (e.g. a decision record's reference) as checked :class:`ScoreBins`.

    ``edges`` has one more entry than the counts; "inf" / "-inf" strings are
    accepted. Sizes default to the count totals (frequency counts).
    """
    e = _edges(edges)
    ev = _counts("events", events, e.size - 1)
    ne = _counts("non_events", non_events, e.size - 1)
    return ScoreBins(edges=e, events=ev, non_events=ne,
                     events_size=_size("events_size", events_size, ev.sum()),
                     non_events_size=_size("non_events_size", non_events_size, ne.sum()),
                     cases_size=_size("cases_size", cases_size, ev.sum() + ne.sum()))


def bin_dataset(dataset, edges) -> ScoreBins:
    """Bin a :class:`core.dataset.Dataset` on fixed (reference) edges.

    Uses :func:`core.summaries.class_histogram` on the same inner edges with
    open outer bins, so no case is dropped: cases below ``edges[0]`` or at or
    above a finite ``edges[-1]`` are counted in the outer bins and reported
    as ``below`` / ``above``. Counts are weighted like the curve's; with
    sampling weights the effective sizes are Kish's ``(sum w)^2 / sum w^2`` per
    class (a count table's ``events_sq`` / ``non_events_sq`` give the sums).
    """
    from core.summaries import class_histogram

    e = _edges(edges)
    open_edges = np.concatenate(([-np.inf], e[1:-1], [np.inf]))
    h = class_histogram(dataset, edges=open_edges)
    s = np.asarray(dataset.y_score, dtype=np.float64)
    if dataset.kind == "counts":
        unit = np.asarray(dataset.events, dtype=np.float64) + np.asarray(dataset.non_events)
        ev_sq, ne_sq = dataset.events_sq, dataset.non_events_sq
        all_sq = None if ev_sq is None or ne_sq is None else np.asarray(ev_sq) + np.asarray(ne_sq)
    else:
        w = None if dataset.sample_weight is None else np.asarray(dataset.sample_weight)
        unit = np.ones_like(s) if w is None else w
        ev_sq = ne_sq = all_sq = None
        if dataset.weight_kind == "sampling" and w is not None:
            y = np.asarray(dataset.y_true, dtype=bool)
            ev_sq, ne_sq, all_sq = w[y] ** 2, w[~y] ** 2, w ** 2
    below = float(unit[s < e[0]].sum()) if np.isfinite(e[0]) else 0.0
    above = float(unit[s >= e[-1]].sum()) if np.isfinite(e[-1]) else 0.0
    n_ev, n_ne = float(h.events.sum()), float(h.non_events.sum())
    def kish(total, sq):
        if sq is None:
            return total
        v = float(_iv.effective_size_from_sums(total, np.sum(sq)))
        return 0.0 if np.isnan(v) else v

    return ScoreBins(edges=e, events=np.asarray(h.events, dtype=np.float64),
                     non_events=np.asarray(h.non_events, dtype=np.float64),
                     events_size=kish(n_ev, ev_sq), non_events_size=kish(n_ne, ne_sq),
                     cases_size=kish(n_ev + n_ne, all_sq), below=below, above=above)


# --------------------------------------------------------------------------- PSI

def psi_band(psi) -> str:
    """The PSI band: ``"stable"`` (< 0.1), ``"watch"`` (0.1 to 0.25), ``"shifted"`` (> 0.25).

    NaN gives ``"undefined"``.

    Common practice, no source. Both 0.1 and 0.25 fall in "watch".
    """
    v = float(psi)
    if math.isnan(v):
        return "undefined"
    if v < PSI_STABLE:
        return "stable"
    if v <= PSI_SHIFTED:
        return "watch"
    return "shifted"


@dataclass(frozen=True)
class PSI:
    """A population stability index with its bands, floor effect and noise levels.

    ``contributions`` are the per-bin terms (floored shares); ``floored_bins``
    the (0-based) bins where either share lay below ``floor`` and
    ``floored_contribution`` their part of ``value``. ``noise_mean`` is the
    PSI sampling alone gives on average at these sizes, ``noise_95`` the level
    it exceeds in 5 % of samples (chi-square approximation, see the module
    docstring); ``beyond_noise`` is ``value > noise_95``.
    """

    value: float
    band: str
    contributions: np.ndarray
    floor: float
    floored_bins: tuple[int, ...]
    floored_contribution: float
    reference_size: float
    new_size: float
    bins_used: int
    noise_mean: float
    noise_95: float
    beyond_noise: bool
    method: str

    def statement(self, what: str = "scores") -> str:
        if math.isnan(self.value):
            return f"PSI of the {what}: undefined (one sample is empty)."
        s = f"PSI of the {what}: {self.value:.3f} ({self.band})"
        if self.band != "stable" and not self.beyond_noise:
            s += (f"; at these sizes an unchanged population gives a PSI up to {self.noise_95:.3f} "
                  "in 95 % of samples, so this value alone does not show a shift")
        elif self.band == "stable" and self.beyond_noise:
            s += (f"; small, but above the {self.noise_95:.3f} sampling alone reaches in 95 % of "
                  "samples at these sizes")
        if self.floored_bins:
            k = len(self.floored_bins)
            s += (f"; {k} bin{'s' if k != 1 else ''} empty in one sample (share floored at "
                  f"{self.floor:g}) add{'s' if k == 1 else ''} {self.floored_contribution:.3f}")
        return s + "."

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self)}
        d["statement"] = self.statement()
        return _json(d)


def population_stability_index(reference_counts, new_counts, *, floor: float = DEFAULT_PSI_FLOOR,
                               reference_size=None, new_size=None) -> PSI:
    """PSI between two sets of counts on the same bins.

    ``PSI = sum_i (q_i - p_i) ln(q_i / p_i)`` with ``p`` the reference and
    ``q`` the new shares, each floored at ``floor`` (``0 < floor < 1``; an
    empty bin would make the log infinite). Symmetric in the two samples;
    0 for identical shares; NaN when either sample is empty. Bands by
    :func:`psi_band`. ``reference_size`` / ``new_size`` (effective sizes, e.g.
    Kish's) set the noise levels; default: the count totals.

    Noise under no shift: ``(B - 1)(1/n_ref + 1/n_new)`` on average,
    ``chi2.ppf(0.95, B - 1)(1/n_ref + 1/n_new)`` at the 95th percentile, B the
    bins holding any case (second-order expansion of the log: ``n_h PSI``
    is Pearson's homogeneity chi-square; see the module docstring).

    Reference: common practice, no source (the formula is the symmetric
    Kullback-Leibler divergence of the binned distributions).
    """
    f = float(floor)
    if not (0.0 < f < 1.0):
        raise InputError("floor", f"must lie strictly between 0 and 1, got {floor!r}")
    p_c = _counts("reference_counts", reference_counts)
    q_c = _counts("new_counts", new_counts, p_c.shape[0])
    n_r = _size("reference_size", reference_size, p_c.sum())
    n_n = _size("new_size", new_size, q_c.sum())
    p, q = _shares(p_c), _shares(q_c)
    used = int(np.count_nonzero((p_c > 0) | (q_c > 0)))
    method = PSI_METHOD.format(floor=f)
    if np.isnan(p).any() or np.isnan(q).any():
        nan = np.full(p_c.shape, np.nan)
        return PSI(value=math.nan, band="undefined", contributions=nan, floor=f, floored_bins=(),
                   floored_contribution=math.nan, reference_size=n_r, new_size=n_n, bins_used=used,
                   noise_mean=math.nan, noise_95=math.nan, beyond_noise=False, method=method)
    pf, qf = np.maximum(p, f), np.maximum(q, f)
    contrib = (qf - pf) * np.log(qf / pf)
    floored = (p < f) | (q < f)
    value = float(contrib.sum())
    with np.errstate(divide="ignore"):
        inv = (1.0 / n_r if n_r > 0 else math.inf) + (1.0 / n_n if n_n > 0 else math.inf)
    dof = max(used - 1, 0)
    noise_mean = dof * inv if dof > 0 else 0.0
    noise_95 = float(stats.chi2.ppf(_NOISE_LEVEL, dof)) * inv if dof > 0 else 0.0
    return PSI(value=value, band=psi_band(value), contributions=contrib, floor=f,
               floored_bins=tuple(int(i) for i in np.flatnonzero(floored)),
               floored_contribution=float(contrib[floored].sum()), reference_size=n_r, new_size=n_n,
               bins_used=used, noise_mean=float(noise_mean), noise_95=float(noise_95),
               beyond_noise=bool(value > noise_95), method=method)


# --------------------------------------------------------------------------- KS

@dataclass(frozen=True)
class BinnedKS:
    """The KS statistic from binned distributions and its bin-width bounds.

    The exact two-sample statistic lies in ``[statistic, upper_bound]``;
    ``simple_bound = statistic + max_bin_share`` is the looser bin-width
    bound (see the module docstring). ``edge`` is the (0-based) inner edge
    where the largest difference sits (None when there is no inner edge).
    """

    statistic: float
    upper_bound: float
    simple_bound: float
    max_bin_share: float
    edge: int | None
    edge_value: float | None
    method: str

    def statement(self, what: str = "scores") -> str:
        if math.isnan(self.statistic):
            return f"KS statistic of the {what}: undefined (one sample is empty)."
        return (f"KS statistic of the {what} from the bins: {self.statistic:.3f}; the exact value "
                f"lies between {self.statistic:.3f} and {self.upper_bound:.3f} (bin-width bound).")

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self)}
        d["statement"] = self.statement()
        return _json(d)


def binned_ks(reference_counts, new_counts, edges=None) -> BinnedKS:
    """Two-sample KS statistic from bin counts, with the bound on the exact statistic.

    With shares ``a`` (reference) and ``b`` (new) per bin and the cumulative
    difference ``d_j = sum_{i<j} (a_i - b_i)`` at the left edge of bin j::

        statistic   = max over inner edges |d_j|
        upper_bound = max_j max(|d_j + a_j|, |d_j - b_j|)
        simple      = statistic + max_j max(a_j, b_j)

    and ``statistic <= D <= upper_bound <= simple`` for the exact statistic
    D of the unbinned samples (derivation in the module docstring). One bin:
    statistic 0, bound 1. NaN when either sample is empty. ``edges`` (optional)
    only names the edge of the largest difference.

    Reference: the exact D is ``scipy.stats.ks_2samp(...).statistic``; the
    bound is derived here from the monotonicity of the empirical CDFs.
    """
    a_c = _counts("reference_counts", reference_counts)
    b_c = _counts("new_counts", new_counts, a_c.shape[0])
    a, b = _shares(a_c), _shares(b_c)
    if np.isnan(a).any() or np.isnan(b).any():
        return BinnedKS(statistic=math.nan, upper_bound=math.nan, simple_bound=math.nan,
                        max_bin_share=math.nan, edge=None, edge_value=None, method=KS_METHOD)
    d = np.concatenate(([0.0], np.cumsum(a - b)[:-1]))  # at the left edge of each bin
    inner = np.abs(d[1:])
    stat = float(inner.max()) if inner.size else 0.0
    upper = float(np.max(np.maximum(np.abs(d + a), np.abs(d - b))))
    upper = min(max(upper, stat), 1.0)
    mx = float(np.max(np.maximum(a, b)))
    edge = int(np.argmax(inner)) if inner.size else None
    ev = None
    if edge is not None and edges is not None:
        e = _edges(edges)
        if e.size != a.size + 1:
            raise InputError("edges", f"has {e.size} edges, expected {a.size + 1}")
        ev = float(e[edge + 1])
    return BinnedKS(statistic=stat, upper_bound=upper, simple_bound=min(stat + mx, 1.0),
                    max_bin_share=mx, edge=edge, edge_value=ev, method=KS_METHOD)


# --------------------------------------------------------------------------- prevalence

@dataclass(frozen=True)
class PrevalenceChange:
    """New minus reference prevalence with its Newcombe interval; each side's Wilson interval."""

    reference: float
    reference_low: float
    reference_high: float
    new: float
    new_low: float
    new_high: float
    difference: float
    low: float
    high: float
    confidence: float
    changed: bool
    method: str

    def statement(self) -> str:
        if not np.isfinite(self.difference):
            return "Change in prevalence: undefined (one sample is empty)."
        def pts(x):
            return f"{100 * x:+.2f}"

        word = "a change" if self.changed else "no clear change"
        return (f"Prevalence {100 * self.reference:.2f} % at approval, {100 * self.new:.2f} % now: "
                f"{pts(self.difference)} percentage points ({100 * self.confidence:g} % interval "
                f"{pts(self.low)} to {pts(self.high)}; Newcombe's hybrid score interval): {word}.")

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self)}
        d["statement"] = self.statement()
        return _json(d)


def prevalence_change(new_events, new_cases, reference_events, reference_cases,
                      confidence: float = 0.95) -> PrevalenceChange:
    """Prevalence now against at approval: difference ``p_new - p_ref`` with Newcombe's interval.

    Counts may be weighted or effective (pass prevalence x Kish's effective
    size as the events and the effective size as the cases with sampling
    weights). ``changed`` is True when the interval excludes 0. NaN when
    either side has no cases.

    Reference: Newcombe, Stat Med 1998 (method 10), via
    :func:`core.groups.newcombe_interval`; statsmodels
    ``confint_proportions_2indep(method="newcomb")``.
    """
    x1, n1, x0, n0 = (float(v) for v in (new_events, new_cases, reference_events, reference_cases))
    for name, x, n in (("new_events", x1, n1), ("reference_events", x0, n0)):
        if not (np.isfinite(x) and np.isfinite(n)) or x < 0 or n < 0 or x > n * (1 + 1e-12):
            raise InputError(name, f"need 0 <= events <= cases, both finite; got {x!r} of {n!r}")
    lo, hi = newcombe_interval(x1, n1, x0, n0, confidence)
    rlo, rhi = _iv.wilson_interval(x0, n0, confidence)
    nlo, nhi = _iv.wilson_interval(x1, n1, confidence)
    p1 = x1 / n1 if n1 > 0 else math.nan
    p0 = x0 / n0 if n0 > 0 else math.nan
    changed = bool(np.isfinite(lo) and (lo > 0 or hi < 0))
    return PrevalenceChange(reference=p0, reference_low=rlo, reference_high=rhi, new=p1,
                            new_low=nlo, new_high=nhi, difference=p1 - p0, low=lo, high=hi,
                            confidence=float(confidence), changed=changed, method=NEWCOMBE_METHOD)


# --------------------------------------------------------------------------- all together

@dataclass(frozen=True)
class ScoreDrift:
    """Drift of the new scores against the reference bins (see :func:`score_drift`)."""

    psi: PSI
    psi_events: PSI
    psi_non_events: PSI
    ks: BinnedKS
    ks_events: BinnedKS
    ks_non_events: BinnedKS
    prevalence: PrevalenceChange
    n_bins: int
    below: float
    above: float
    statements: tuple[str, ...]

    @property
    def band(self) -> str:
        """The overall PSI band."""
        return self.psi.band

    def to_dict(self) -> dict:
        return _json({f.name: getattr(self, f.name) for f in fields(self)})


def score_drift(reference: ScoreBins, new: ScoreBins, *, floor: float = DEFAULT_PSI_FLOOR,
                confidence: float = 0.95) -> ScoreDrift:
    """PSI (overall, events, non-events), binned KS (same three) and the change in prevalence.

    Both :class:`ScoreBins` must share their inner edges (bin the new data
    with :func:`bin_dataset` on the reference's edges). Statements in plain
    words say the bands, when a band may come from sampling noise, how many
    new cases lay outside the reference's finite range, and the prevalence
    change.
    """
    if not isinstance(reference, ScoreBins) or not isinstance(new, ScoreBins):
        raise TypeError("reference and new must be ScoreBins (see score_bins / bin_dataset)")
    if reference.n_bins != new.n_bins or not np.array_equal(reference.edges[1:-1], new.edges[1:-1]):
        raise InputError("edges", "the new scores were not binned on the reference's edges; bin "
                                  "them with bin_dataset(dataset, reference.edges)")
    psi_all = population_stability_index(reference.cases, new.cases, floor=floor,
                                         reference_size=reference.cases_size,
                                         new_size=new.cases_size)
    psi_ev = population_stability_index(reference.events, new.events, floor=floor,
                                        reference_size=reference.events_size,
                                        new_size=new.events_size)
    psi_ne = population_stability_index(reference.non_events, new.non_events, floor=floor,
                                        reference_size=reference.non_events_size,
                                        new_size=new.non_events_size)
    e = reference.edges
    ks_all = binned_ks(reference.cases, new.cases, e)
    ks_ev = binned_ks(reference.events, new.events, e)
    ks_ne = binned_ks(reference.non_events, new.non_events, e)
    # prevalence on effective sizes: p x n_eff events of n_eff cases
    def eff(b: ScoreBins):
        n = b.cases_size
        p = b.n_events / b.n_cases if b.n_cases > 0 else 0.0
        return p * n, n

    x1, n1 = eff(new)
    x0, n0 = eff(reference)
    prev = prevalence_change(x1, n1, x0, n0, confidence)
    st = [PSI_BANDS_TEXT, psi_all.statement("scores"), psi_ev.statement("events' scores"),
          psi_ne.statement("non-events' scores"), ks_all.statement("scores"), prev.statement()]
    if new.below or new.above:
        fin = [f"{new.below:,.0f} below the lowest reference edge {e[0]:.6g}" if new.below else "",
               f"{new.above:,.0f} at or above the highest reference edge {e[-1]:.6g}"
               if new.above else ""]
        st.append("New scores outside the reference range: " + " and ".join(x for x in fin if x)
                  + " (counted in the outer bins).")
    return ScoreDrift(psi=psi_all, psi_events=psi_ev, psi_non_events=psi_ne, ks=ks_all,
                      ks_events=ks_ev, ks_non_events=ks_ne, prevalence=prev,
                      n_bins=reference.n_bins, below=float(new.below), above=float(new.above),
                      statements=tuple(st))


# --------------------------------------------------------------------------- calibration drift

#: The calibration measures compared, their ideal values and labels.
CALIBRATION_MEASURES = {
    "intercept": (0.0, "calibration intercept (in the large)"),
    "slope": (1.0, "calibration slope"),
    "oe_ratio": (1.0, "observed / expected"),
}
CALIBRATION_DRIFT_METHOD = (
    "New data against the ideal: the new interval excludes the ideal -> fails; contains it with "
    "at least {min_events} events -> holds; else unclear. Change since approval: intercept and "
    "slope by the Wald interval of the difference of two independent estimates, "
    "d -/+ z sqrt(se_new^2 + se_ref^2); O/E by the ratio (O/E)_new / (O/E)_ref, which is the "
    "ratio of the event rates times the ratio of mean scores (fixed), with the Katz log interval "
    "for a ratio of two independent proportions (Katz et al., Biometrics 1978).")


def _plain(obj):
    """A calibration report / one set of numbers as a plain dict (JSON form accepted)."""
    if obj is None:
        return None
    if hasattr(obj, "to_dict"):
        obj = obj.to_dict()
    if not isinstance(obj, dict):
        raise TypeError(f"expected a calibration report or its dict, got {type(obj).__name__}")
    return obj


def _f(d, key):
    v = None if d is None else d.get(key)
    return math.nan if v is None else float(v)  # JSON null is NaN; "inf" / "-inf" parse


def _overall(d):
    """``(available, reason, overall dict, groups list, min_events, confidence)`` of a report dict
    (a :class:`core.calibration.CalibrationReport`, its ``to_dict`` or a record's section) or of
    one set's numbers (a :class:`core.calibration.Calibration` or its dict)."""
    if "overall" in d or "available" in d:
        avail = d.get("overall") is not None and bool(d.get("available", True))
        return (avail, d.get("reason"), d.get("overall"), list(d.get("groups") or []),
                int(d.get("min_events") or 100), d.get("confidence"))
    if "fit" in d:
        return True, None, d, [], 100, (d.get("fit") or {}).get("confidence")
    raise InputError("calibration", "holds neither a calibration report nor one set's "
                                    "calibration numbers")


@dataclass(frozen=True)
class CalibrationMeasureDrift:
    """One calibration measure at approval and now, its verdict on the new data and its change.

    ``verdict`` judges the new data against ``ideal`` (0 for the intercept, 1
    for slope and O/E); ``change`` is ``new - reference`` (``change_kind``
    ``"difference"``) or ``new / reference`` (``"ratio"``, for O/E) with its
    interval; ``changed`` is True when that interval excludes 0 (or 1).
    """

    name: str
    label: str
    ideal: float
    reference: float
    reference_low: float
    reference_high: float
    new: float
    new_low: float
    new_high: float
    change: float
    change_low: float
    change_high: float
    change_kind: str
    changed: bool
    verdict: str

    @property
    def title(self) -> str:
        return self.label[0].upper() + self.label[1:]

    def statement(self) -> str:
        if not np.isfinite(self.new):
            return f"{self.title}: cannot be computed on the new data."
        fmt = "+.2f" if self.name == "intercept" else ".2f"
        s = (f"{self.title} {self.new:{fmt}} now ({self.new_low:{fmt}} to {self.new_high:{fmt}}), "
             f"{self.reference:{fmt}} at approval")
        if np.isfinite(self.change):
            word = "changed" if self.changed else "no clear change"
            if self.change_kind == "ratio":
                s += (f"; ratio now / then {self.change:.2f} ({self.change_low:.2f} to "
                      f"{self.change_high:.2f}): {word}")
            else:
                s += (f"; difference {self.change:+.2f} ({self.change_low:+.2f} to "
                      f"{self.change_high:+.2f}): {word}")
        return s + f" -- {self.verdict}."

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self)}
        d["statement"] = self.statement()
        return _json(d)


@dataclass(frozen=True)
class CalibrationDrift:
    """Calibration on the new data against the record's (see :func:`calibration_drift`).

    ``verdict``: ``"fails"`` when any measure's new interval excludes its
    ideal, ``"holds"`` when every measure holds, ``"unclear"`` otherwise,
    ``"not applicable"`` when either side has no calibration (scores not
    probabilities). ``drifted``: any measure changed since approval.
    ``groups`` holds the same for every group present in both;
    ``new_groups`` / ``vanished_groups`` name the others.
    """

    available: bool
    reason: str | None
    where: str
    measures: tuple[CalibrationMeasureDrift, ...]
    verdict: str
    drifted: bool
    events_reference: float
    events_new: float
    confidence: float
    method: str
    statement: str
    groups: tuple[CalibrationDrift, ...] = ()
    new_groups: tuple[str, ...] = ()
    vanished_groups: tuple[str, ...] = ()

    def measure(self, name: str) -> CalibrationMeasureDrift:
        for m in self.measures:
            if m.name == name:
                return m
        raise KeyError(name)

    def to_dict(self) -> dict:
        d = {f.name: getattr(self, f.name) for f in fields(self)
             if f.name not in ("measures", "groups")}
        d["measures"] = [m.to_dict() for m in self.measures]
        d["groups"] = [g.to_dict() for g in self.groups]
        return _json(d)


def _katz_ratio(x1, n1, x0, n0, z):
    """Katz log interval for (x1/n1) / (x0/n0); NaN with a zero count."""
    if not (x1 > 0 and x0 > 0 and n1 > 0 and n0 > 0):
        return math.nan, math.nan, math.nan
    r = (x1 / n1) / (x0 / n0)
    se = math.sqrt(max(1.0 / x1 - 1.0 / n1 + 1.0 / x0 - 1.0 / n0, 0.0))
    return r, r * math.exp(-z * se), r * math.exp(z * se)


def _measure(name, ref, new, z, min_events):
    ideal, label = CALIBRATION_MEASURES[name]
    rf, nf = ref.get("fit") or {}, new.get("fit") or {}
    if name == "oe_ratio":
        r, rl, rh = _f(ref, "oe_ratio"), _f(ref, "oe_low"), _f(ref, "oe_high")
        v, lo, hi = _f(new, "oe_ratio"), _f(new, "oe_low"), _f(new, "oe_high")
        x1, n1, m1 = _f(new, "events"), _f(new, "cases"), _f(new, "mean_score")
        x0, n0, m0 = _f(ref, "events"), _f(ref, "cases"), _f(ref, "mean_score")
        rr, rrl, rrh = _katz_ratio(x1, n1, x0, n0, z)
        k = m0 / m1 if m1 > 0 else math.nan
        ch, cl, chh, kind, base = rr * k, rrl * k, rrh * k, "ratio", 1.0
    else:
        r, rl, rh = _f(rf, name), _f(rf, f"{name}_low"), _f(rf, f"{name}_high")
        v, lo, hi = _f(nf, name), _f(nf, f"{name}_low"), _f(nf, f"{name}_high")
        se = math.hypot(_f(nf, f"{name}_se"), _f(rf, f"{name}_se"))
        ch = v - r
        cl, chh, kind, base = ch - z * se, ch + z * se, "difference", 0.0
    events = _f(new, "events")
    converged = bool(nf.get("converged", True)) if name != "oe_ratio" else True
    if not (np.isfinite(lo) and np.isfinite(hi)) or not converged:
        verdict = "unclear"
    elif lo > ideal or hi < ideal:
        verdict = "fails"
    elif events >= min_events:
        verdict = "holds"
    else:
        verdict = "unclear"
    changed = bool(np.isfinite(cl) and np.isfinite(chh) and (cl > base or chh < base))
    return CalibrationMeasureDrift(name=name, label=label, ideal=ideal, reference=r,
                                   reference_low=rl, reference_high=rh, new=v, new_low=lo,
                                   new_high=hi, change=ch, change_low=cl, change_high=chh,
                                   change_kind=kind, changed=changed, verdict=verdict)


def _drift_one(ref, new, where, conf, min_events):
    z = _iv.normal_quantile(conf)
    ms = tuple(_measure(n, ref, new, z, min_events) for n in CALIBRATION_MEASURES)
    words = [m.verdict for m in ms]
    verdict = "fails" if "fails" in words else ("holds" if all(w == "holds" for w in words)
                                                else "unclear")
    drifted = any(m.changed for m in ms)
    ev_new = _f(new, "events")
    head = {"fails": "miscalibrated on the new data",
            "holds": "calibrated on the new data",
            "unclear": "calibration on the new data cannot be judged"}[verdict]
    st = f"Calibration, {where}: {head}"
    if verdict == "unclear" and ev_new < min_events:
        st += f" ({ev_new:,.0f} events; at least {min_events} are needed to call scores calibrated)"
    oe = ms[2]
    if verdict == "fails" and oe.verdict == "fails":
        st += (" -- more events than the scores predict" if oe.new_low > 1.0 else
               " -- fewer events than the scores predict")
    st += ("; it has changed since approval" if drifted else "; no clear change since approval")
    st += ". " + " ".join(m.statement() for m in ms)
    if verdict == "fails":
        st += (" The scores' distribution can stay put while the outcomes move; a low PSI does "
               "not clear calibration.")
    return ms, verdict, drifted, st


def calibration_drift(reference_summary, new_report, *, confidence: float | None = None,
                      min_events: int | None = None) -> CalibrationDrift:
    """Calibration intercept, slope and O/E on the new data against the record's, with verdicts.

    Parameters
    ----------
    reference_summary
        The calibration at approval: a :class:`core.calibration.CalibrationReport`,
        its ``to_dict()`` (as the decision record stores it, JSON ``null`` for
        undefined values) or one :class:`core.calibration.Calibration`.
    new_report
        :func:`core.calibration.calibration_report` of the new (mature) data,
        in any of the same forms.
    confidence, min_events
        Default: the new report's (its intervals are used as they are).

    For each measure the new data are judged against the ideal (intercept 0,
    slope 1, O/E 1) and the change since approval gets an interval (see
    :data:`CALIBRATION_DRIFT_METHOD`); groups present in both reports get the
    same. Scores whose distribution has not moved (PSI low) while the
    outcomes have (O/E far from 1) fail here.

    Reference: logistic recalibration (Cox, Biometrika 1958) as computed by
    :mod:`core.calibration`; Wald intervals for a difference of independent
    estimates; Katz, Baptista, Azen & Pike, Biometrics 1978 for the ratio
    (statsmodels ``confint_proportions_2indep(compare="ratio", method="log")``).
    """
    ref_d, new_d = _plain(reference_summary), _plain(new_report)
    r_av, r_reason, r_all, r_groups, _, _ = _overall(ref_d)
    n_av, n_reason, n_all, n_groups, n_min, n_conf = _overall(new_d)
    conf = float(confidence if confidence is not None else (n_conf if n_conf is not None else 0.95))
    if not (0.0 < conf < 1.0):
        raise InputError("confidence", f"must lie strictly between 0 and 1, got {confidence!r}")
    me = int(min_events if min_events is not None else n_min)
    method = CALIBRATION_DRIFT_METHOD.format(min_events=me)
    if not (r_av and n_av):
        reason = (f"at approval: {r_reason}" if not r_av else f"on the new data: {n_reason}")
        return CalibrationDrift(available=False, reason=reason, where="all cases", measures=(),
                                verdict="not applicable", drifted=False,
                                events_reference=_f(r_all, "events"),
                                events_new=_f(n_all, "events"), confidence=conf, method=method,
                                statement=f"Calibration drift is not checked ({reason}).")
    ms, verdict, drifted, st = _drift_one(r_all, n_all, "all cases", conf, me)

    def key(g):
        return (str(g.get("column")), str(g.get("group")))

    ref_by = {key(g): g for g in r_groups}
    new_by = {key(g): g for g in n_groups}
    groups = []
    for k in new_by:
        if k in ref_by:
            gms, gv, gd, gst = _drift_one(ref_by[k], new_by[k], f"{k[0]} = {k[1]}", conf, me)
            groups.append(CalibrationDrift(
                available=True, reason=None, where=f"{k[0]} = {k[1]}", measures=gms, verdict=gv,
                drifted=gd, events_reference=_f(ref_by[k], "events"),
                events_new=_f(new_by[k], "events"), confidence=conf, method=method,
                statement=gst))
    new_only = tuple(f"{c} = {g}" for c, g in new_by if (c, g) not in ref_by)
    gone = tuple(f"{c} = {g}" for c, g in ref_by if (c, g) not in new_by)
    return CalibrationDrift(available=True, reason=None, where="all cases", measures=ms,
                            verdict=verdict, drifted=drifted,
                            events_reference=_f(r_all, "events"), events_new=_f(n_all, "events"),
                            confidence=conf, method=method, statement=st, groups=tuple(groups),
                            new_groups=new_only, vanished_groups=gone)
