"""Compare speed: two model versions on the same 1M cases.

Goals (issue 11):
* the Compare page without the paired bootstrap -- two exact curves, ROC AUCs
  with DeLong's covariance, the equal-workload and same-recall points, each
  score's choice under the same policy, the case-level disagreement tables
  and McNemar's tests -- answers in under 1 s at 1M rows;
* the paired bootstrap (2,000 replicates) shows progress; its time is
  reported (no hard goal), next to resampling the rows and running
  scikit-learn's ``roc_auc_score`` and ``average_precision_score`` on both
  scores per replicate (a few replicates timed, the total scaled; the
  reference computes less than Fulcrum does per replicate).

Data: 1M rows, 2 % events; the current score N(1, 1) for events and N(0, 1)
otherwise, the candidate correlated with it (0.8) and separating a little
better -- continuous float64 scores (every event its own score: about 20,000
event cells per score). Policy: lowest expected cost (false alarm 1, miss
25) with recall at least 0.8 at 95 % confidence, as in ``bench_choose``.
Times are the best of ``repeats`` runs.

    python benchmarks/bench_compare.py [n_rows] [n_replicates]
"""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from core.compare import compare_scores  # noqa: E402
from core.policy import loads_policy  # noqa: E402

POLICY = loads_policy(
    "[objective]\nkind = \"min_cost\"\n[costs]\nfalse_positive = 1.0\nfalse_negative = 25.0\n"
    "[rules]\nmin_recall = 0.8\nconfidence = 0.95\n")
GOAL_SECONDS = 1.0


def make_pair(n_rows: int, seed: int = 0, prevalence: float = 0.02):
    rng = np.random.default_rng(seed)
    y = rng.random(n_rows) < prevalence
    z = rng.normal(size=n_rows)
    current = 1.0 * y + z
    candidate = 1.2 * y + 0.8 * z + 0.6 * rng.normal(size=n_rows)
    return y, {"current": current, "candidate": candidate}


def _best(fn, repeats):
    """Best wall time of ``repeats`` runs, the CPU time of that run, and the last result."""
    best, cpu, out = np.inf, np.inf, None
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        out = fn()
        t, c = time.perf_counter() - t0, time.process_time() - c0
        if t < best:
            best, cpu = t, c
    return best, cpu, out


def _load() -> str:
    try:
        return f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs"
    except (AttributeError, OSError):  # pragma: no cover - not on every platform
        return "load unknown"


def reference_per_replicate(y, scores, n_timed: int = 2, seed: int = 0) -> float:
    """Seconds per replicate for stratified row resampling + scikit-learn AUC and AP on both."""
    from sklearn.metrics import average_precision_score, roc_auc_score

    ev, ne = np.flatnonzero(y), np.flatnonzero(~y)
    rng = np.random.default_rng(seed)
    t0 = time.perf_counter()
    for _ in range(n_timed):
        rows = np.r_[ev[rng.integers(0, ev.size, ev.size)], ne[rng.integers(0, ne.size, ne.size)]]
        yr = y[rows]
        for s in scores.values():
            sr = s[rows]
            roc_auc_score(yr, sr)
            average_precision_score(yr, sr)
    return (time.perf_counter() - t0) / n_timed


def bench_page(y, scores, repeats: int = 3) -> dict:
    """The Compare page's first answer without the bootstrap: the comparison of a Dataset with an
    extra score column (:func:`core.compare.compare_mapped`) and both overlaid figures, on a
    fresh Dataset each time (nothing cached)."""
    from app import charts
    from core.compare import compare_mapped
    from core.dataset import Dataset

    ref, cand = scores["current"], scores["candidate"]

    def page():
        ds = Dataset.from_arrays(y, ref, extra_scores={"candidate": cand})
        comp = compare_mapped(ds, bootstrap=False)
        pts = {m: p.index for m, p in comp.point_sets["workload"].points.items()}
        charts.compare_roc_figure(comp.curves, pts)
        charts.compare_pr_figure(comp.curves, pts)

    t, cpu, _ = _best(page, repeats)
    return {"name": f"Compare page {y.size / 1e6:g}M rows, two scores, no bootstrap (comparison "
                    "+ both overlaid figures)",
            "fulcrum_s": t, "cpu_s": cpu, "goal": f"< {GOAL_SECONDS:g} s",
            "met": bool(t < GOAL_SECONDS), "note": f"CPU {cpu:.3f} s ({_load()})"}


def bench_compare(n_rows: int = 1_000_000, n_replicates: int = 2000, repeats: int = 3,
                  n_jobs: int = 1) -> list[dict]:
    y, scores = make_pair(n_rows)
    compare_scores(y, scores, policy=POLICY, bootstrap=False)  # warm-up (imports, caches)
    t_page, cpu_page, comp = _best(
        lambda: compare_scores(y, scores, policy=POLICY, bootstrap=False), repeats)
    t_np, cpu_np, _ = _best(lambda: compare_scores(y, scores, bootstrap=False), repeats)
    p = comp.pairs[0]
    rows = [{
        "name": f"compare() {n_rows / 1e6:g}M, two scores, no bootstrap (curves, DeLong, "
                "workload, policy choices, McNemar)",
        "fulcrum_s": t_page, "cpu_s": cpu_page, "goal": f"< {GOAL_SECONDS:g} s",
        "met": bool(t_page < GOAL_SECONDS),
        "note": (f"CPU {cpu_page:.3f} s ({_load()}); without the policy choices {t_np:.3f} s "
                 f"(CPU {cpu_np:.3f} s); AUC difference {p.roc_auc.difference:+.4f} "
                 f"(DeLong SE {p.roc_auc.se:.5f}); recall at the same workload "
                 f"{p.at['workload']['recall'].difference:+.4f}"),
    }]
    rows.append(bench_page(y, scores, repeats))
    calls = []
    t0, c0 = time.perf_counter(), time.process_time()
    boot = compare_scores(y, scores, policy=POLICY, n_replicates=n_replicates, seed=0,
                          progress=lambda done, total: calls.append((done, time.perf_counter())),
                          n_jobs=n_jobs)
    t_boot, cpu_boot = time.perf_counter() - t0, time.process_time() - c0
    t_ref = reference_per_replicate(y, scores) * n_replicates
    first = calls[0][1] - t0 if calls else float("nan")
    bp = boot.pairs[0]
    rows.append({
        "name": f"compare() {n_rows / 1e6:g}M, two scores, paired bootstrap "
                f"{n_replicates:,} replicates" + (f", {n_jobs} threads" if n_jobs > 1 else ""),
        "fulcrum_s": t_boot, "cpu_s": cpu_boot, "reference_s": t_ref, "ratio": t_boot / t_ref,
        "goal": "shows progress", "met": bool(len(calls) >= 10 and calls[-1][0] == n_replicates),
        "note": (f"{1000 * t_boot / n_replicates:.1f} ms per replicate (CPU "
                 f"{1000 * cpu_boot / n_replicates:.1f} ms; {_load()}); {len(calls)} progress "
                 f"reports, the first after {first:.2f} s; reference: stratified row resampling "
                 "+ scikit-learn roc_auc_score and average_precision_score on both scores, "
                 f"scaled from 2 replicates; bootstrap SE of the AUC difference "
                 f"{bp.roc_auc_bootstrap.se:.5f} against DeLong's {bp.roc_auc.se:.5f}"),
    })
    return rows


if __name__ == "__main__":
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
    r = int(sys.argv[2]) if len(sys.argv) > 2 else 2000
    print(json.dumps(bench_compare(n, r), indent=2))
