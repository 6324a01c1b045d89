"""Label maturity: cases whose outcome window is still open at the as-of date are left out."""

import datetime as dt
import json

import numpy as np
import pandas as pd
import pytest

from core.dataset import Dataset
from core.errors import InputError
from core.maturity import (
    LIVE_THRESHOLD_STATEMENT,
    NO_MATURITY_STATEMENT,
    dataset_maturity,
    label_maturity,
    model_effect_statement,
    parse_as_of,
)


def _times(*texts):
    return np.array(texts, dtype="datetime64[ns]")


def test_mature_means_score_time_plus_horizon_on_or_before_as_of():
    # The issue's definition (mature <=> score_time + horizon <= as_of), checked against pandas'
    # own Timedelta arithmetic, boundary included.
    t = _times("2025-05-01T08:00", "2025-06-01T00:00", "2025-06-01T00:00:00.000000001",
               "2025-06-20T12:00", "2025-03-01")
    m = label_maturity(t, 30, "2025-07-01")
    expected = (pd.Series(t) + pd.Timedelta(days=30) <= pd.Timestamp("2025-07-01")).to_numpy()
    np.testing.assert_array_equal(m.mask, expected)
    np.testing.assert_array_equal(m.mask, [True, True, False, False, True])
    assert (m.n_cases, m.n_mature, m.n_open) == (5, 3, 2)
    assert m.mature_share == pytest.approx(0.6)
    assert m.cutoff == np.datetime64("2025-06-01T00:00", "ns")
    assert "2025-07-01 00:00" in m.statement and "2 of 5 cases" in m.statement


def test_fractional_horizon_and_random_cases_against_pandas():
    rng = np.random.default_rng(0)
    base = np.datetime64("2025-01-01", "ns")
    t = base + (rng.integers(0, 200 * 86400, 5000) * 10 ** 9).astype("timedelta64[ns]")
    m = label_maturity(t, 2.5, "2025-06-15T06:00")
    as_of = pd.Timestamp("2025-06-15 06:00")
    expected = (pd.Series(t) + pd.Timedelta(hours=60) <= as_of).to_numpy()
    np.testing.assert_array_equal(m.mask, expected)


def test_as_of_parsing_dates_mean_their_start_and_zones_become_utc():
    assert parse_as_of("2025-07-01") == np.datetime64("2025-07-01T00:00", "ns")
    assert parse_as_of(dt.date(2025, 7, 1)) == np.datetime64("2025-07-01T00:00", "ns")
    assert parse_as_of("2025-07-01T10:00+02:00") == np.datetime64("2025-07-01T08:00", "ns")
    assert parse_as_of(None) == np.datetime64(dt.date.today(), "ns")
    with pytest.raises(InputError, match="as_of"):
        parse_as_of("not a date")


def test_known_events_in_open_windows_are_left_out_and_counted():
    t = _times("2025-05-01", "2025-06-25", "2025-06-28", "2025-05-10")
    y = np.array([True, True, False, False])
    w = np.array([1.0, 3.0, 1.0, 5.0])
    m = label_maturity(t, 30, "2025-07-01", y_true=y, sample_weight=w)
    assert m.events_open == 1 and "1 event already known" in m.statement
    assert m.mature_share == pytest.approx(6 / 10)  # by weight


def test_outcomes_after_and_scores_after_the_as_of_date_are_reported():
    t = _times("2025-05-01", "2025-07-03")
    ot = _times("2025-07-05", "NaT")
    m = label_maturity(t, 90, "2025-07-01", y_true=[True, False], outcome_time=ot)
    assert m.scored_after == 1 and m.outcomes_after == 1
    assert "scored after the as-of date" in m.statement
    assert "a later as-of date would keep more cases" in m.statement
    assert m.n_mature == 0 and "No case is mature" in m.statement


def test_missing_score_time_names_the_rows():
    t = _times("2025-05-01", "NaT", "2025-05-03", "NaT")
    with pytest.raises(InputError) as e:
        label_maturity(t, 30, "2025-07-01")
    assert e.value.column == "score_time" and e.value.rows == (2, 4)
    with pytest.raises(InputError, match="positive number"):
        label_maturity(_times("2025-05-01"), 0, "2025-07-01")


def test_without_times_or_horizon_the_page_says_recent_cases_may_look_like_non_events():
    m = label_maturity(None, 30, "2025-07-01", y_true=[True, False, False])
    assert not m.available and m.mask.all() and m.n_cases == 3
    assert NO_MATURITY_STATEMENT in m.statement and "2025-07-01" in m.statement
    assert "recent cases may look like non-events" in m.statement
    m = label_maturity(_times("2025-05-01"), None, "2025-07-01")
    assert not m.available and m.mask.tolist() == [True]
    json.dumps(m.to_dict(), allow_nan=False)


def test_dataset_maturity_rows_and_count_tables():
    t = _times("2025-05-01", "2025-06-25", "2025-05-20")
    ds = Dataset.from_arrays([True, False, False], [0.9, 0.2, 0.4], score_time=t,
                             outcome_horizon_days=14)
    m = dataset_maturity(ds, "2025-06-01")
    assert m.horizon_days == 14 and m.mask.tolist() == [True, False, False]
    assert dataset_maturity(ds, "2025-06-01", horizon_days=7).mask.tolist() == [True, False, True]
    sub = ds.subset(m.mask)
    assert sub.n_rows == 1
    ct = Dataset.from_count_table([0.1, 0.5], [1.0, 2.0], [10.0, 5.0])
    mc = dataset_maturity(ct, "2025-06-01", horizon_days=30)
    assert not mc.available and mc.mask.tolist() == [True, True]
    json.dumps(m.to_dict(), allow_nan=False)


def test_model_effect_statement_when_data_were_collected_while_live():
    assert model_effect_statement(False) is None
    s = model_effect_statement(True)
    assert s == LIVE_THRESHOLD_STATEMENT
    assert "recall and precision" in s.lower() and "biased" in s and "unactioned audit sample" in s
