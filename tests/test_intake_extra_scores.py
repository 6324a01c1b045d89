"""Intake of extra score columns (two model versions on the same rows).

Each extra score is checked exactly as the main score (same messages, 1-based
rows); ``drop_missing_scores`` drops a row missing any mapped score and counts
it once; a mapping without extra scores keeps its fingerprint. Outside
reference where one applies: pandas' own CSV reader for the values and
scikit-learn's ``roc_auc_score`` for the negated column.
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import roc_auc_score

from core.compare import compare_dataset
from core.dataset import Dataset, Mapping
from core.errors import InputError
from core.intake import load_dataset, load_demo

CSV = (
    "score,label,new,alt\n"
    "0.9,1,0.8,0.1\n"
    "0.2,0,0.3,0.7\n"
    "0.7,1,0.9,0.2\n"
    "0.1,0,0.2,0.8\n"
    "0.4,0,0.1,0.5\n"
    "0.6,1,0.5,0.3\n"
)
M = {"score": "score", "label": "label", "positive_label": 1}


def _load(text=CSV, **mapping):
    return load_dataset(text.encode(), {**M, **mapping})


def test_extra_scores_are_read_as_float64_in_row_order():
    ds = _load(extra_scores=("new", "alt"), extra_lower_is_riskier=("alt",))
    # reference: pandas' CSV reader on the same text
    ref = pd.read_csv(io.StringIO(CSV))
    assert list(ds.extra_scores) == ["new", "alt"]
    for col in ("new", "alt"):
        assert ds.extra_scores[col].dtype == np.float64
        np.testing.assert_array_equal(ds.extra_scores[col], ref[col].to_numpy(dtype=float))
    assert ds.extra_higher_is_riskier == {"new": True, "alt": False}
    assert ds.mapping.extra_scores == ("new", "alt")


def test_no_extra_scores_gives_an_empty_dict_and_the_same_fingerprint():
    plain = _load()
    assert plain.extra_scores == {}
    assert "extra_scores" not in plain.mapping.to_dict()
    assert "extra_lower_is_riskier" not in plain.mapping.to_dict()
    # the hospital demo's fingerprint as it was before extra scores existed (pinned; common
    # practice, no source: a fingerprint must not move when nothing mapped changed)
    assert load_demo("hospital_q1").fingerprint == (
        "41ff4d35388c6fca2924e8d2110a8c10db4168f3535478a8791dbe45a5381680")


def test_fingerprint_covers_the_extra_scores():
    a = _load(extra_scores=("new",))
    b = _load(CSV.replace("0.8,0.1", "0.85,0.1"), extra_scores=("new",))
    c = _load(extra_scores=("new",), extra_lower_is_riskier=("new",))
    assert len({_load().fingerprint, a.fingerprint, b.fingerprint, c.fingerprint}) == 4


def test_mapping_round_trips_through_a_plain_dict():
    m = Mapping(score="score", label="label", positive_label=1, extra_scores=("new", "alt"),
                extra_lower_is_riskier=("alt",))
    d = m.to_dict()
    assert d["extra_scores"] == ["new", "alt"] and d["extra_lower_is_riskier"] == ["alt"]
    assert Mapping.from_dict(d) == m
    assert Mapping.from_dict({**d, "extra_scores": "new", "extra_lower_is_riskier": None}) == \
        Mapping(score="score", label="label", positive_label=1, extra_scores=("new",))
    plain = Mapping(score="score", label="label", positive_label=1)
    assert Mapping.from_dict(plain.to_dict()) == plain


def test_a_non_number_in_an_extra_score_names_the_column_and_rows():
    bad = CSV.replace("0.3,0.7", "n/a?,0.7").replace("0.5,0.3", "high,0.3")
    with pytest.raises(InputError) as e:
        _load(bad, extra_scores=("new",))
    assert e.value.column == "new"
    assert e.value.rows == (2, 6) and e.value.n_rows == 2
    assert str(e.value).startswith("new: ")


def test_missing_extra_scores_are_an_error_worded_as_for_the_score():
    text = CSV.replace("0.2,0,0.3", "0.2,0,").replace("0.6,1,0.5", "0.6,1,")
    with pytest.raises(InputError) as e:
        _load(text, extra_scores=("new",))
    main_text = CSV.replace("0.2,0,0.3", ",0,0.3").replace("0.6,1,0.5", ",1,0.5")
    with pytest.raises(InputError) as e_main:
        _load(main_text)
    assert e.value.column == "new" and e.value.rows == (2, 6)
    assert e.value.problem == e_main.value.problem == "has missing values"
    assert str(e.value).replace("new", "score") == str(e_main.value)


def test_drop_missing_counts_rows_missing_any_score_once():
    # row 2 misses the score and the extra; row 5 the extra only; row 6 the score only
    text = ("score,label,new\n0.9,1,0.8\n,0,\n0.7,1,0.9\n0.1,0,0.2\n0.4,0,\n,1,0.5\n0.3,1,0.6\n"
            "0.2,0,0.1\n")
    ds = _load(text, extra_scores=("new",), drop_missing_scores=True)
    assert ds.dropped_rows == 3 and ds.dropped_positions == (2, 5, 6)
    assert ds.n_rows == 5
    np.testing.assert_array_equal(ds.y_score, [0.9, 0.7, 0.1, 0.3, 0.2])
    np.testing.assert_array_equal(ds.extra_scores["new"], [0.8, 0.9, 0.2, 0.6, 0.1])
    (w,) = [w for w in ds.warnings if w.code == "dropped_missing_scores"]
    assert w.message == ("score, new: 3 rows with a missing score (in at least one of these "
                         "columns) were dropped as chosen (rows 2, 5, 6); the analysis uses "
                         "the other 5 rows")
    # only the extra missing: the message names it alone, worded as for the score
    only = _load(text.replace("\n,0,\n", "\n0.5,0,0.4\n").replace("\n,1,0.5", "\n0.6,1,0.5"),
                 extra_scores=("new",), drop_missing_scores=True)
    (w,) = [w for w in only.warnings if w.code == "dropped_missing_scores"]
    assert w.message.startswith("new: 1 row with a missing score was dropped as chosen (row 5)")


@pytest.mark.parametrize("mapping, column, words", [
    ({"extra_scores": ("score",)}, "score", "is the score (the reference model)"),
    ({"extra_scores": ("new", "new")}, "new", "is listed twice among the extra score"),
    ({"extra_scores": ("label",)}, "label", "is mapped as both the label and an extra score"),
    ({"extra_scores": ("new",), "groups": ("new",)}, "new", "cannot also be a group column"),
    ({"extra_scores": ("new",), "extra_lower_is_riskier": ("alt",)}, "alt",
     "is declared lower-is-riskier but is not among the extra score columns"),
])
def test_mapping_clashes_get_a_clear_message(mapping, column, words):
    with pytest.raises(InputError) as e:
        _load(**mapping)
    assert e.value.column == column and words in str(e.value)


def test_a_count_table_takes_no_extra_score():
    table = "score,events,non_events,new\n0.1,1,9,0.2\n0.5,4,6,0.4\n"
    with pytest.raises(InputError, match="count table holds one score only"):
        load_dataset(table.encode(), {"score": "score", "kind": "counts", "events": "events",
                                      "non_events": "non_events", "extra_scores": ("new",)})


def test_a_missing_extra_column_is_named():
    with pytest.raises(InputError, match="nope"):
        _load(extra_scores=("nope",))


def test_subset_and_from_arrays_carry_the_extra_scores():
    ds = _load(extra_scores=("new",))
    sub = ds.subset(ds.y_score > 0.15)
    np.testing.assert_array_equal(sub.extra_scores["new"], ds.extra_scores["new"][ds.y_score > 0.15])
    arr = Dataset.from_arrays(ds.y_true, ds.y_score, extra_scores={"new": ds.extra_scores["new"]},
                              extra_lower_is_riskier=("new",))
    assert arr.mapping.extra_scores == ("new",) and arr.extra_higher_is_riskier == {"new": False}
    with pytest.raises(InputError, match="not among the extra scores"):
        Dataset.from_arrays(ds.y_true, ds.y_score, extra_lower_is_riskier=("new",))
    with pytest.raises(InputError, match="new"):
        Dataset.from_arrays(ds.y_true, ds.y_score, extra_scores={"new": [0.1, np.nan, 0, 0, 0, 0]})


def test_a_negated_column_is_handled_by_its_direction():
    rng = np.random.default_rng(7)
    n = 400
    y = rng.random(n) < 0.2
    s = np.round(rng.normal(size=n) + 1.5 * y, 3)
    text = "score,label,neg\n" + "".join(f"{a},{int(b)},{-a}\n" for a, b in zip(s, y))
    # declared higher-is-riskier the negation ranks events low: refused, with the fix named
    ds = _load(text, extra_scores=("neg",))
    with pytest.raises(InputError) as e:
        compare_dataset(ds, ds.extra_scores, higher_is_riskier=ds.extra_higher_is_riskier,
                        bootstrap=False)
    assert e.value.column == "neg" and "--lower-is-riskier neg" in str(e.value)
    assert "negation of 'score'" in str(e.value)
    # declared lower-is-riskier: compared, reported as one model, AUCs equal
    ds = _load(text, extra_scores=("neg",), extra_lower_is_riskier=("neg",))
    c = compare_dataset(ds, ds.extra_scores, higher_is_riskier=ds.extra_higher_is_riskier,
                        bootstrap=False)
    (rel,) = c.relations
    assert rel["kind"] == "negation" and rel["directions_agree"]
    assert any("one model, not two" in w for w in c.warnings)
    # reference: scikit-learn's roc_auc_score on the score and on minus the negation
    assert c.summaries["neg"].roc_auc == pytest.approx(roc_auc_score(y, s), abs=1e-12)
    assert c.pair("neg").roc_auc_difference.difference == pytest.approx(0.0, abs=1e-12)
