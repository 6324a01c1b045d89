"""Flagged cases per period, against a pandas groupby (reference: pandas)."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from core.capacity import PeriodFlags, flags_per_period, period_index
from core.curve import sweep
from core.errors import InputError


def _weekday_data(n=6000, seed=3, start="2025-01-06", days=70):
    """Synthetic score times with a weekday pattern: weekdays busy, weekends quiet, nights quieter."""
    rng = np.random.default_rng(seed)
    day = rng.integers(0, days, n * 3)
    dow = (np.datetime64(start) + day.astype("timedelta64[D]")).astype("datetime64[D]").view("int64")
    weekday = ((dow + 3) % 7) < 5
    keep = rng.random(day.shape[0]) < np.where(weekday, 1.0, 0.3)
    day = day[keep][:n]
    hour = np.where(rng.random(n) < 0.7, rng.integers(8, 20, n), rng.integers(0, 24, n))
    minute = rng.integers(0, 60, n)
    t = (np.datetime64(start, "m") + day.astype("timedelta64[D]") + hour.astype("timedelta64[h]")
         + minute.astype("timedelta64[m]")).astype("datetime64[ns]")
    y = rng.random(n) < 0.05
    s = np.round(np.clip(rng.normal(0.3 + 0.35 * y, 0.15), 0, 1), 3)
    return y, s, t


PANDAS_KEY = {
    "hour": lambda ts: ts.dt.floor("h"),
    "shift": lambda ts: ts.dt.floor("8h"),
    "day": lambda ts: ts.dt.floor("D"),
    "week": lambda ts: ts.dt.to_period("W-SUN").dt.start_time,
    "month": lambda ts: ts.dt.to_period("M").dt.start_time,
}
PANDAS_FREQ = {"hour": "h", "shift": "8h", "day": "D", "week": "W-MON", "month": "MS"}


@pytest.mark.parametrize("period", ["hour", "shift", "day", "week", "month"])
def test_period_index_matches_pandas(period):
    # Reference: pandas floor / to_period (weeks Monday to Sunday: "W-SUN" periods).
    _, _, t = _weekday_data(2000)
    ids, starts = period_index(t, period)
    key = PANDAS_KEY[period](pd.Series(t)).to_numpy().astype("datetime64[ns]")
    np.testing.assert_array_equal(starts[ids], key)
    full = pd.date_range(key.min(), key.max(), freq=PANDAS_FREQ[period]).to_numpy()
    np.testing.assert_array_equal(starts, full.astype("datetime64[ns]"))


@pytest.mark.parametrize("period", ["hour", "shift", "day", "week"])
@pytest.mark.parametrize("higher", [True, False])
def test_flags_per_period_equal_a_pandas_groupby(period, higher):
    # Reference: pandas groupby over the flagged rows, every period of the span reindexed (empty = 0).
    y, s, t = _weekday_data()
    if not higher:
        s = 1 - s
    curve = sweep(y, s, higher_is_riskier=higher)
    thresholds = np.quantile(s, [0.5, 0.8, 0.95, 0.99])
    got = flags_per_period(curve, s, t, thresholds, period=period)
    df = pd.DataFrame({"t": t, "s": s})
    key = PANDAS_KEY[period](df["t"])
    full = pd.date_range(key.min(), key.max(), freq=PANDAS_FREQ[period])
    for th in thresholds:
        flagged = df["s"] >= th if higher else df["s"] <= th
        ref = flagged.groupby(key).sum().reindex(full, fill_value=0)
        np.testing.assert_array_equal(got[th].to_numpy(), ref.to_numpy().astype(float))
    assert got.index[0] == full[0] and len(got) == len(full)


def test_weekday_pattern_shows_in_the_distribution():
    # The weekday pattern of the synthetic data: weekend days flag fewer cases than weekdays.
    y, s, t = _weekday_data()
    curve = sweep(y, s)
    got = flags_per_period(curve, s, t, [0.5], period="day")[0.5]
    weekday = got.index.day_of_week < 5
    assert got[weekday].mean() > 2 * got[~weekday].mean()


def test_weighted_and_rescaled_counts_equal_a_weighted_groupby():
    # Reference: pandas groupby of reweighted rows -- events x pi/pi_v, non-events x (1-pi)/(1-pi_v),
    # then all x cases_per_period / (mean cases per day).
    y, s, t = _weekday_data(3000, seed=9)
    w = np.random.default_rng(2).uniform(0.5, 3.0, y.shape[0])
    curve = sweep(y, s, w)
    pi, cases = 0.02, 500.0
    got = flags_per_period(curve, s, t, [0.4, 0.6], period="day", sample_weight=w, y_true=y,
                           prevalence=pi, cases_per_period=cases)
    pv = w[y].sum() / w.sum()
    rw = w * np.where(y, pi / pv, (1 - pi) / (1 - pv))
    df = pd.DataFrame({"t": t, "s": s, "w": rw})
    key = df["t"].dt.floor("D")
    full = pd.date_range(key.min(), key.max(), freq="D")
    rw_total = df["w"].groupby(key).sum().reindex(full, fill_value=0.0)
    scale = cases / rw_total.mean()
    for th in (0.4, 0.6):
        ref = (df["w"] * (df["s"] >= th)).groupby(key).sum().reindex(full, fill_value=0.0) * scale
        np.testing.assert_allclose(got[th].to_numpy(), ref.to_numpy(), rtol=1e-10, atol=1e-9)
    # all cases flagged: every day's total, with the mean equal to the deployment volume
    allf = flags_per_period(curve, s, t, [s.min()], period="day", sample_weight=w, y_true=y,
                            prevalence=pi, cases_per_period=cases)
    assert allf.iloc[:, 0].mean() == pytest.approx(cases, rel=1e-12)


def test_summary_quantiles_and_share_over():
    # Reference: numpy on the pandas groupby counts; quantiles are the inverted-CDF kind.
    y, s, t = _weekday_data()
    curve = sweep(y, s)
    pf = PeriodFlags(curve, s, t, period="day")
    ks = [curve.index_at(0.45), curve.index_at(0.6)]
    summ = pf.summary(ks, quantile=0.75, capacity=40)
    df = pd.DataFrame({"t": t, "s": s})
    key = df["t"].dt.floor("D")
    full = pd.date_range(key.min(), key.max(), freq="D")
    for j, th in enumerate(curve.thresholds[ks]):
        ref = (df["s"] >= th).groupby(key).sum().reindex(full, fill_value=0).to_numpy()
        assert summ["median"][j] == np.sort(ref)[int(np.ceil(0.5 * len(ref))) - 1]
        assert summ["p90"][j] == np.sort(ref)[int(np.ceil(0.9 * len(ref))) - 1]
        assert summ["quantile"][j] == np.sort(ref)[int(np.ceil(0.75 * len(ref))) - 1]
        assert summ["max"][j] == ref.max()
        assert summ["mean"][j] == pytest.approx(ref.mean())
        assert summ["share_over"][j] == pytest.approx(np.mean(ref > 40))


@settings(derandomize=True, deadline=None, max_examples=60)
@given(st.integers(20, 300), st.integers(0, 10_000), st.floats(0.5, 1.0), st.integers(1, 40))
def test_largest_index_within_capacity_equals_a_scan_of_every_point(n, seed, q, cap):
    # Brute force over every curve point (no outside source): the binary search finds the same edge.
    rng = np.random.default_rng(seed)
    y = rng.random(n) < 0.2
    y[:2] = [True, False]
    s = rng.integers(0, 30, n) / 30
    t = np.datetime64("2025-01-01") + rng.integers(0, 10 * 24, n).astype("timedelta64[h]")
    curve = sweep(y, s)
    pf = PeriodFlags(curve, s, t, period="day")
    k = pf.largest_index_within(cap, q)
    all_counts = pf.counts(np.arange(curve.n_points))
    qs = np.quantile(all_counts, q, axis=0, method="inverted_cdf")
    ok = np.flatnonzero(qs <= cap)
    assert k == ok.max()
    assert np.all(np.diff(qs) >= 0)  # monotone in the threshold


def test_counts_at_many_points_equal_one_at_a_time():
    y, s, t = _weekday_data(1500, seed=5)
    curve = sweep(y, s)
    pf = PeriodFlags(curve, s, t, period="shift")
    ks = np.array([0, 5, 5, 40, 3, curve.n_points - 1])
    many = pf.counts(ks)
    for j, k in enumerate(ks):
        np.testing.assert_array_equal(many[:, j], pf.counts_at(k))
    assert many[:, 0].sum() == 0 and many[:, -1].sum() == len(y)


def test_missing_score_times_are_named():
    t = np.array(["2025-01-01T10:00", "NaT", "2025-01-02T09:00", "NaT"], dtype="datetime64[ns]")
    with pytest.raises(InputError, match=r"score_time: is missing.*2 rows: rows 2, 4"):
        period_index(t, "day")
    with pytest.raises(InputError, match="period: must be one of"):
        period_index(t[:1], "fortnight")
