"""The one path from a dataset and a policy to a decision record (CLI and app alike).

:func:`analyse` runs everything a decision record holds -- the choice
(:func:`core.choose.choose`, or :func:`core.choose.evaluate` for a threshold
the user set), the Evidence in one bootstrap pass
(:func:`core.uncertainty.evidence`: intervals, stability, cross-fitting and
the optimism correction), the analytic intervals at validation and at
deployment prevalence, the cost curve, the flags per period, and the
subgroup, fairness and calibration sections -- and returns an
:class:`Analysis`. :func:`core.record.build_record` turns it into the sealed
record; :func:`decide` does both. ``fulcrum pick`` and the app's Memo page
call exactly these functions with the same arguments, so their records agree
to the digit (only ``created_utc`` and the digests that cover it differ).

Threshold origin. ``threshold=None``: Fulcrum chooses the point by the
policy, on these data (``"data-derived"``; the out-of-sample estimates
correct the selection). A number: the user set it, and ``origin`` must say
whether it was fixed before these data were seen (``"pre-specified"``: its
apparent values are honest) or picked on them (``"data-derived"``: its
optimism cannot be estimated; the policy's own rule is shown for
comparison).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from core.bootstrap import DEFAULT_REPLICATES
from core.choose import Choice, choose, cost_by_threshold, evaluate
from core.dataset import Dataset
from core.errors import InputError
from core.optimism import DEFAULT_FOLDS
from core.policy import Policy, ResolvedPolicy, resolve_policy
from core.uncertainty import Evidence, Interval, evidence, point_intervals

__all__ = ["Analysis", "ORIGINS", "MIN_REPLICATES", "DEFAULT_POLICY", "analyse", "decide",
           "not_computed"]

ORIGINS = ("data-derived", "pre-specified")

#: The policy when none is given: the highest Youden's J, no costs, no rules (the app's start
#: for an uploaded file).
DEFAULT_POLICY = {"objective": {"kind": "max_youden"}}

#: Fewer replicates than this cannot give a 95 % percentile interval worth printing.
MIN_REPLICATES = 50


def not_computed(reason: str) -> dict:
    """A record section that was not computed, and why (the schema allows this form)."""
    return {"status": "not computed", "reason": reason}


@dataclass(frozen=True, eq=False)
class Analysis:
    """Everything :func:`core.record.build_record` needs (see the module docstring)."""

    dataset: Dataset
    policy: Policy
    resolved: ResolvedPolicy
    choice: Choice
    evidence: Evidence
    threshold_origin: str
    threshold_entered: float | None
    choice_policy_threshold: float | None
    design: str
    seed: int
    n_replicates: int
    confidence: float
    interval_method: str
    folds: int
    calibrated: bool
    production_decimals: int | None
    sheet: str | None
    validation_intervals: tuple[Interval, ...]
    deployment_intervals: tuple[Interval, ...]
    cost_table: pd.DataFrame | None
    period_flags: pd.DataFrame | None
    policy_rule_optimism: tuple | None
    groups: dict = field(default_factory=dict)
    fairness: dict = field(default_factory=dict)
    calibration: dict = field(default_factory=dict)


def _check_int(name, v, lo, hi=None):
    if isinstance(v, bool) or not isinstance(v, (int, np.integer)):
        raise InputError(name, f"must be a whole number, got {v!r}")
    if v < lo or (hi is not None and v > hi):
        rng = f"at least {lo}" if hi is None else f"from {lo} to {hi}"
        raise InputError(name, f"must be {rng}, got {v!r}")
    return int(v)


def _subgroup_sections(dataset, policy, point_threshold, *, confidence, n_replicates, seed,
                       progress=None) -> tuple[dict, dict, dict]:
    """The ``groups``, ``fairness`` and ``calibration`` sections of the record.

    Groups and fairness: :func:`core.groups.subgroup_report` at the point
    (cluster bootstrap when a cluster column is mapped, same seed and
    replicates as the Evidence); calibration: :func:`core.calibration.calibration_report`.
    """
    from core.calibration import calibration_report
    from core.groups import subgroup_report

    if dataset.groups:
        rep = subgroup_report(dataset, point_threshold, policy=policy, confidence=confidence,
                              n_replicates=n_replicates, seed=seed, progress=progress).to_dict()
        fair = rep.pop("fairness")
        groups = {"status": "computed", **rep}
        if fair is not None:
            fairness = {"status": "computed", **fair}
        else:
            fairness = not_computed("the policy sets no fairness criterion")
    else:
        groups = not_computed("no group column is mapped")
        fairness = not_computed("no group column is mapped" if policy.fairness is None else
                                "the policy's fairness groups are not mapped")
    cal = calibration_report(dataset, confidence=confidence).to_dict()
    calibration = {"status": "computed" if cal["available"] else "not applicable", **cal}
    return groups, fairness, calibration


def analyse(dataset: Dataset, policy: Policy, *, threshold: float | None = None,
            origin: str | None = None, design: str = "cohort", seed: int = 0,
            n_replicates: int = DEFAULT_REPLICATES, confidence: float = 0.95,
            interval_method: str = "wilson", folds: int = DEFAULT_FOLDS,
            calibrated: bool = False, production_decimals: int | None = None,
            sheet: str | None = None, progress=None) -> Analysis:
    """Run the whole analysis behind a decision record (see the module docstring).

    Parameters
    ----------
    dataset : Dataset
    policy : Policy or dict (the policy file's content)
    threshold : float, optional
        A threshold the user set (score units); None lets the policy choose.
    origin : {"data-derived", "pre-specified"}
        Required with ``threshold``; with ``threshold=None`` only
        "data-derived" (the default) makes sense.
    design, seed, n_replicates, confidence, interval_method, folds
        As :func:`core.uncertainty.evidence` (replicate r uses
        ``default_rng([seed, r])``).
    calibrated : bool
        The user's statement that the scores are calibrated probabilities.
    production_decimals : int, optional
        Decimals the live system keeps (for the test vectors).
    sheet : str, optional
        The Excel sheet the data came from (stored in the record).
    progress : callable, optional
        ``progress(done, total)`` after each chunk of bootstrap replicates.

    Raises
    ------
    InputError
        Bad arguments, a policy that does not fit the data
        (:class:`~core.policy.PolicyError`), or no point meeting every rule
        when Fulcrum is to choose.
    """
    if not isinstance(dataset, Dataset):
        raise TypeError(f"dataset must be a Dataset, got {type(dataset).__name__}")
    if isinstance(policy, dict):
        policy = Policy.from_dict(policy)
    if not isinstance(policy, Policy):
        raise TypeError(f"policy must be a Policy, got {type(policy).__name__}")
    n_replicates = _check_int("n_replicates", n_replicates, MIN_REPLICATES)
    seed = _check_int("seed", seed, 0)
    folds = _check_int("folds", folds, 2)
    if production_decimals is not None:
        production_decimals = _check_int("production_decimals", production_decimals, 0, 15)
    if not 0.5 < float(confidence) < 1.0:
        raise InputError("confidence", f"must lie strictly between 0.5 and 1, got {confidence!r}")
    if threshold is None:
        if origin not in (None, "data-derived"):
            raise InputError("origin", f"{origin!r} needs a threshold: a pre-specified threshold is "
                             "one you give (--threshold); without one Fulcrum chooses it from these "
                             "data (data-derived)")
        origin = "data-derived"
    else:
        if origin not in ORIGINS:
            raise InputError("origin", "must be given with a threshold: 'pre-specified' (fixed "
                             "before these data were seen) or 'data-derived' (picked on them), "
                             f"got {origin!r}")
        threshold = float(threshold)
        if math.isnan(threshold):
            raise InputError("threshold", "is NaN")
    rp = resolve_policy(policy, dataset)
    policy_choice = choose(dataset, policy, calibrated=calibrated)
    if threshold is None:
        ch = policy_choice
        if ch.point is None:
            raise InputError("policy", "no threshold meets every rule: " + " ".join(ch.infeasible)
                             + " Relax a rule, or evaluate a threshold you set (--threshold).")
    else:
        ch = evaluate(dataset, policy, threshold, calibrated=calibrated)
    ev = evidence(dataset, policy,
                  threshold=threshold,
                  n_replicates=n_replicates, seed=seed, design=design, method=interval_method,
                  confidence=confidence, k=folds, progress=progress)
    t = float(ch.point.threshold)
    val = point_intervals(dataset, t, method=interval_method, confidence=confidence, design=design,
                          prevalence=None, cases_per_period=None)
    dep_all = point_intervals(dataset, t, method=interval_method, confidence=confidence,
                              design=design, prevalence=rp.prevalence,
                              cases_per_period=rp.cases_per_period)
    dep = [iv for iv in dep_all if iv.basis != "validation"]
    cost_table = cost_by_threshold(dataset, policy) if rp.costs_given else None
    period_flags = None
    if rp.has_score_time:
        from core.capacity import flags_per_period

        period_flags = flags_per_period(
            dataset.curve(), dataset.y_score, dataset.score_time, [t], period=rp.period,
            sample_weight=dataset.sample_weight, y_true=dataset.y_true, prevalence=rp.prevalence,
            cases_per_period=rp.cases_per_period)
    rule_opt = None
    if threshold is not None and origin == "data-derived" and policy_choice.point is not None:
        from core.optimism import cross_fit, harrell_correction

        try:
            rule_opt = (cross_fit(dataset, policy, k=folds, seed=seed),
                        harrell_correction(dataset, policy, stability=ev.stability))
        except InputError as exc:
            if dataset.kind != "counts" and exc.column != "k":
                raise
            # a count table of weight sums cannot be split into folds; fewer events than folds
            rule_opt = None
    groups, fairness, calib = _subgroup_sections(
        dataset, policy, float(dataset.curve().thresholds[ch.point.index]), confidence=confidence,
        n_replicates=n_replicates, seed=seed, progress=progress)
    return Analysis(
        dataset=dataset, policy=policy, resolved=rp, choice=ch, evidence=ev,
        threshold_origin=origin, threshold_entered=threshold,
        choice_policy_threshold=None if policy_choice.point is None else policy_choice.point.threshold,
        design=design, seed=seed, n_replicates=n_replicates, confidence=float(confidence),
        interval_method=interval_method, folds=folds, calibrated=bool(calibrated),
        production_decimals=production_decimals, sheet=sheet,
        validation_intervals=tuple(val), deployment_intervals=tuple(dep), cost_table=cost_table,
        period_flags=period_flags, policy_rule_optimism=rule_opt, groups=groups, fairness=fairness,
        calibration=calib)


def decide(dataset: Dataset, policy: Policy, *, memo_fields: dict | None = None,
           supersedes: str | None = None, created_utc: str | None = None,
           **options: Any) -> dict:
    """:func:`analyse` then :func:`core.record.build_record`: the sealed decision record."""
    from core.record import build_record

    a = analyse(dataset, policy, **options)
    return build_record(a, memo_fields=memo_fields, supersedes=supersedes, created_utc=created_utc)
