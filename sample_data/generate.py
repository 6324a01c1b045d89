"""Seeded generator of Fulcrum's demo data (invented scenarios, invented names).

Run ``python sample_data/generate.py`` to rewrite the committed files next to
this script; ``tests/test_demo_data.py`` checks that the committed files equal
what this script produces. See ``sample_data/README.md`` for the scenarios.

Determinism: every random number comes from ``Generator.random()`` (uniform
doubles) of a PCG64 bit generator seeded from :data:`SEED` and a per-file
key; normal variates are made by the inverse normal CDF (``scipy.special.
ndtri``), categories by binary search in cumulative probabilities. Scores are
rounded to 4 decimals and amounts to cents before anything is drawn from
them, so the files do not depend on the last bit of a library's ``exp``.
"""

from __future__ import annotations

import gzip
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.special import expit, ndtri

SEED = 20250101
HERE = Path(__file__).resolve().parent

# ---------------------------------------------------------------- hospital scenario
SITES = ("Orrinford", "Pellbrook", "Wendlecombe")
SITE_ROWS = (17_000, 15_500, 16_500)  # encounters per site per quarter
SITE_SHIFT = (0.0, 0.0, 0.0)  # site's baseline risk (logit)
AGE_BANDS = ("18-44", "45-64", "65-79", "80+")
AGE_SHARE = (0.25, 0.30, 0.28, 0.17)
AGE_SHIFT = (0.0, 0.4, 0.8, 1.2)
INTERCEPT = -6.1
B_VITALS = 1.3  # weight of the vital-signs summary
B_LAB = 1.4  # weight of the laboratory summary
DRIFT_SITE = "Wendlecombe"
DRIFT_LAB_LOSS = 0.75  # share of Q2 encounters there without lab values
QUARTER_START = {1: np.datetime64("2025-01-01T00:00"), 2: np.datetime64("2025-04-01T00:00")}
QUARTER_DAYS = {1: 90, 2: 91}
REPEAT_SHARE = 0.2  # encounters of patients seen before in the quarter
HORIZON_MINUTES = 2 * 24 * 60

# ---------------------------------------------------------------- invoice scenario
N_INVOICES = 50_000
SEGMENTS = ("Retail", "Hospitality", "Healthcare", "Education", "Trade")
SEGMENT_SHARE = (0.34, 0.22, 0.14, 0.10, 0.20)
SEGMENT_SHIFT = (0.0, 0.35, -0.2, -0.4, 0.25)
FRAUD_INTERCEPT = -7.8


def _rng(key: int) -> np.random.Generator:
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence([SEED, key])))


def _normal(rng, n):
    return ndtri(rng.random(n))


def _choice(rng, n, shares):
    cum = np.cumsum(shares)
    cum[-1] = 1.0
    return np.searchsorted(cum, rng.random(n), side="right")


def _minutes_text(t: np.ndarray) -> np.ndarray:
    """datetime64[m] as 'YYYY-MM-DD HH:MM' (empty for NaT)."""
    out = np.char.replace(np.datetime_as_string(t, unit="m"), "T", " ").astype(object)
    out[np.isnat(t)] = ""
    return out


def hospital_quarter(quarter: int) -> pd.DataFrame:
    """One quarter of the inpatient deterioration scenario (quarter 1 or 2)."""
    if quarter not in (1, 2):
        raise ValueError("quarter must be 1 or 2")
    parts = []
    pid_base = 100_000 if quarter == 1 else 500_000
    for k, (site, rows) in enumerate(zip(SITES, SITE_ROWS)):
        rng = _rng(quarter * 10 + k)
        age = _choice(rng, rows, AGE_SHARE)
        vitals = _normal(rng, rows)
        lab = _normal(rng, rows)
        logit = (
            INTERCEPT + SITE_SHIFT[k] + np.asarray(AGE_SHIFT)[age] + B_VITALS * vitals + B_LAB * lab
        )
        # the score the model shows: with every input, it is the true risk (calibrated)
        seen_lab = lab.copy()
        # drawn at every site and quarter, so the drift changes the scores and nothing else
        lost = rng.random(rows) < DRIFT_LAB_LOSS
        if quarter == 2 and site == DRIFT_SITE:
            seen_lab[lost] = 0.0  # missing laboratory values are imputed as normal
        score = np.round(
            expit(
                INTERCEPT
                + SITE_SHIFT[k]
                + np.asarray(AGE_SHIFT)[age]
                + B_VITALS * vitals
                + B_LAB * seen_lab
            ),
            4,
        )
        truth = np.round(expit(logit), 4)
        event = rng.random(rows) < truth
        minute = np.floor(rng.random(rows) * QUARTER_DAYS[quarter] * 1440).astype(np.int64)
        delay = (120 + np.floor(rng.random(rows) * (HORIZON_MINUTES - 240))).astype(np.int64)
        # patients: most encounters are a patient's only one, some belong to earlier patients
        n_pat = int(round(rows * (1 - REPEAT_SHARE)))
        repeat_of = np.floor(rng.random(rows) * n_pat).astype(np.int64)
        patient = np.where(np.arange(rows) < n_pat, np.arange(rows), repeat_of)
        patient = patient[np.argsort(rng.random(rows), kind="stable")]
        parts.append(
            pd.DataFrame(
                {
                    "site": site,
                    "age_band": np.asarray(AGE_BANDS, dtype=object)[age],
                    "patient": pid_base + k * 50_000 + patient,
                    "minute": minute,
                    "risk_score": score,
                    "event": event,
                    "delay": delay,
                }
            )
        )
    df = pd.concat(parts, ignore_index=True)
    df = df.sort_values(["minute", "site", "patient"], kind="stable").reset_index(drop=True)
    start = QUARTER_START[quarter]
    score_time = start + df["minute"].to_numpy().astype("timedelta64[m]")
    outcome = np.where(
        df["event"].to_numpy(),
        score_time + df["delay"].to_numpy().astype("timedelta64[m]"),
        np.datetime64("NaT", "m"),
    )
    first_id = 1 if quarter == 1 else 1_000_001
    return pd.DataFrame(
        {
            "encounter_id": [f"E{v:07d}" for v in range(first_id, first_id + len(df))],
            "patient_id": [f"P{v:06d}" for v in df["patient"].to_numpy()],
            "site": df["site"].to_numpy(dtype=object),
            "age_band": df["age_band"].to_numpy(dtype=object),
            "score_time": _minutes_text(score_time),
            "risk_score": df["risk_score"].to_numpy(),
            "deteriorated": np.where(df["event"].to_numpy(), "yes", "no").astype(object),
            "outcome_time": _minutes_text(outcome.astype("datetime64[m]")),
        }
    )


def invoices() -> pd.DataFrame:
    """The invoice-fraud scenario of an invented wholesaler."""
    rng = _rng(100)
    n = N_INVOICES
    seg = _choice(rng, n, SEGMENT_SHARE)
    amount = np.round(np.exp(np.log(420.0) + 1.05 * _normal(rng, n)), 2)
    amount = np.maximum(amount, 5.0)
    signal = _normal(rng, n)
    hidden = _normal(rng, n)
    size = np.log(amount / 420.0)
    base = FRAUD_INTERCEPT + np.asarray(SEGMENT_SHIFT)[seg] + 0.45 * size
    score = np.round(expit(base + 1.9 * signal + 1.2), 4)
    truth = np.round(expit(base + 1.9 * signal + 0.9 * hidden), 4)
    fraud = rng.random(n) < truth
    day = np.sort(np.floor(rng.random(n) * 365).astype(np.int64), kind="stable")
    date = np.datetime64("2025-01-01") + day.astype("timedelta64[D]")
    return pd.DataFrame(
        {
            "invoice_id": [f"INV-25-{v:06d}" for v in range(1, n + 1)],
            "invoice_date": np.datetime_as_string(date, unit="D").astype(object),
            "customer_segment": np.asarray(SEGMENTS, dtype=object)[seg],
            "invoice_amount": amount,
            "fraud_score": score,
            "is_fraud": fraud.astype(np.int64),
        }
    )


def render(frame: pd.DataFrame, decimals: dict[str, int]) -> bytes:
    """The CSV bytes of a demo table (UTF-8, comma, '\\n' line ends), floats at fixed decimals."""
    out = frame.copy()
    for col, places in decimals.items():
        out[col] = np.char.mod(f"%.{places}f", out[col].to_numpy()).astype(object)
    return out.to_csv(index=False, lineterminator="\n").encode("utf-8")


#: file name -> function giving its CSV bytes (uncompressed)
FILES = {
    "hospital_q1.csv.gz": lambda: render(hospital_quarter(1), {"risk_score": 4}),
    "hospital_q2.csv.gz": lambda: render(hospital_quarter(2), {"risk_score": 4}),
    "invoice_fraud.csv.gz": lambda: render(invoices(), {"fraud_score": 4, "invoice_amount": 2}),
}


def main(out_dir: Path = HERE) -> None:
    for name, make in FILES.items():
        data = make()
        (out_dir / name).write_bytes(gzip.compress(data, compresslevel=9, mtime=0))
        print(f"{name}: {len(data):,} bytes of CSV")


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else HERE)
