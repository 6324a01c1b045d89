"""Seeded generator of the two-model example file (invented scenario, invented names).

``python sample_data/generate_compare.py`` rewrites ``model_versions.csv.gz``
next to this script; ``tests/test_cli_compare.py`` checks that the committed
file equals what this script produces. It is an example for comparing two
versions of a score on the same cases (``fulcrum compare``, the Compare page),
not one of the app's demos (``core.intake.DEMOS``).

The scenario: Corvane Health (invented) retrains its deterioration score. Each
encounter has a vital-signs summary, a laboratory summary and a laboratory
trend (all standard normal); the true risk uses all three. The current score
knows the first two and is calibrated on them; the retrained score also reads
the trend, but it runs on a noisier vital-signs feed and comes out about
half as high on the probability scale, so at a fixed threshold it flags fewer
encounters -- higher accuracy, fewer flags -- while at the same workload it
catches more events. Determinism as in ``generate.py`` (uniform doubles of a
seeded PCG64, normals by the inverse normal CDF, scores rounded to 4 decimals).
"""

from __future__ import annotations

import gzip
import importlib.util
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.special import expit

HERE = Path(__file__).resolve().parent
FILE = "model_versions.csv.gz"
KEY = 300  # the seed key of this file (generate.py uses 11-29 and 100 for its own)
N_ROWS = 40_000
SITES = ("Orrinford", "Pellbrook", "Wendlecombe")
SITE_SHARE = (0.35, 0.32, 0.33)
INTERCEPT = -5.6
B_VITALS, B_LAB, B_TREND = 1.2, 1.1, 1.3
VITALS_NOISE = 0.4  # the retrained score's noisier vital-signs feed (standard deviations)
RETRAINED_SHIFT = -0.75  # its logit offset: it comes out lower than the current score


def _generator():
    spec = importlib.util.spec_from_file_location("fulcrum_sample_generate", HERE / "generate.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def model_versions() -> pd.DataFrame:
    """The example table: one row per encounter, two scores of the same cases."""
    g = _generator()
    rng = g._rng(KEY)
    n = N_ROWS
    site = g._choice(rng, n, SITE_SHARE)
    vitals, lab, trend = g._normal(rng, n), g._normal(rng, n), g._normal(rng, n)
    noise = g._normal(rng, n)
    u = rng.random(n)
    true_logit = INTERCEPT + B_VITALS * vitals + B_LAB * lab + B_TREND * trend
    event = u < expit(true_logit)
    # the current score: calibrated on what it sees (the trend's spread folded into the logit,
    # the probit approximation of a logistic-normal mean)
    shrink = 1.0 / np.sqrt(1.0 + np.pi * B_TREND**2 / 8.0)
    current = expit(shrink * (INTERCEPT + B_VITALS * vitals + B_LAB * lab))
    retrained = expit(INTERCEPT + RETRAINED_SHIFT + B_VITALS * (vitals + VITALS_NOISE * noise)
                      + B_LAB * lab + B_TREND * trend)
    return pd.DataFrame({
        "encounter_id": [f"E{i:07d}" for i in range(2_000_001, 2_000_001 + n)],
        "site": np.asarray(SITES, dtype=object)[site],
        "current_score": np.round(current, 4),
        "retrained_score": np.round(retrained, 4),
        "deteriorated": np.where(event, "yes", "no"),
    })


def render() -> bytes:
    """The CSV bytes of the example (UTF-8, comma, '\\n' line ends, 4-decimal scores)."""
    return _generator().render(model_versions(), {"current_score": 4, "retrained_score": 4})


def main(out_dir: Path = HERE) -> None:
    data = render()
    (out_dir / FILE).write_bytes(gzip.compress(data, compresslevel=9, mtime=0))
    print(f"{FILE}: {len(data):,} bytes of CSV")


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else HERE)
