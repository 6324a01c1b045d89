"""The comparison of the active dataset's scores, cached for the Compare and Memo pages.

One bounded, content-keyed cache (:class:`app.cache.BoundedCache`): the key is
the dataset fingerprint (which covers every score column and its direction),
the policy file text, the workload given and the paired-bootstrap settings.
The comparison without the bootstrap is what the Compare page shows first
(fast); the one with it is computed on request, with progress, and reused by
the memo. Also the invented two-model example file and its mapping.
"""

from __future__ import annotations

from pathlib import Path

from app.cache import BoundedCache
from core.compare import Comparison, compare_mapped
from core.dataset import Mapping
from core.policy import Policy, dumps_policy

_CACHE = BoundedCache(max_entries=8)
_EXAMPLE = BoundedCache(max_entries=1)

#: The invented two-model example (sample_data/generate_compare.py) and how it is mapped.
EXAMPLE_FILE = Path(__file__).resolve().parents[1] / "sample_data" / "model_versions.csv.gz"
EXAMPLE_MAPPING = Mapping(score="current_score", label="deteriorated", positive_label="yes",
                          groups=("site",), extra_scores=("retrained_score",))
EXAMPLE_LABEL = "Corvane Health: current and retrained score (invented example)"


def example_dataset():
    """The two-model example, loaded once and shared read-only (invented data)."""
    from core.intake import load_dataset

    return _EXAMPLE.get_or_compute("example", lambda: load_dataset(EXAMPLE_FILE, EXAMPLE_MAPPING))


def key(dataset, policy: Policy | None, *, bootstrap: bool, n_replicates: int = 0, seed: int = 0,
        flag_rate: float | None = None, thresholds: dict | None = None) -> tuple:
    return (dataset.fingerprint, None if policy is None else dumps_policy(policy),
            None if flag_rate is None else float(flag_rate),
            None if not thresholds else tuple(sorted((k, float(v)) for k, v in thresholds.items())),
            bool(bootstrap), int(n_replicates) if bootstrap else 0, int(seed) if bootstrap else 0)


def cached(dataset, policy: Policy | None, *, n_replicates: int, seed: int,
           flag_rate: float | None = None, thresholds: dict | None = None) -> Comparison | None:
    """The bootstrapped comparison if it was computed already (None otherwise)."""
    return _CACHE.get(key(dataset, policy, bootstrap=True, n_replicates=n_replicates, seed=seed,
                          flag_rate=flag_rate, thresholds=thresholds))


def comparison(dataset, policy: Policy | None, *, bootstrap: bool = False, n_replicates: int = 2000,
               seed: int = 0, flag_rate: float | None = None, thresholds: dict | None = None,
               progress=None) -> Comparison:
    """:func:`core.compare.compare_mapped` of ``dataset``, computed once per key."""
    k = key(dataset, policy, bootstrap=bootstrap, n_replicates=n_replicates, seed=seed,
            flag_rate=flag_rate, thresholds=thresholds)
    return _CACHE.get_or_compute(k, lambda: compare_mapped(
        dataset, policy=policy, bootstrap=bootstrap, n_replicates=max(int(n_replicates), 1),
        seed=int(seed), flag_rate=flag_rate, thresholds=thresholds or None, progress=progress))
