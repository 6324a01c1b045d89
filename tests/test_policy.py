"""Policy files: the contract keys, every bad file, the round-trip, resolution against data."""

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from core.dataset import Dataset
from core.errors import InputError
from core.policy import (
    OBJECTIVES,
    PERIODS,
    Costs,
    Deployment,
    Fairness,
    Objective,
    Policy,
    PolicyError,
    Rules,
    dumps_policy,
    load_policy,
    loads_policy,
    resolve_policy,
    save_policy,
)

POLICIES = Path(__file__).resolve().parents[1] / "sample_data" / "policies"

FULL = """
[objective]
kind = "min_cost"
[costs]
false_positive = 1.0
false_negative = 25.0
true_positive = 0.0
true_negative = 0.0
unit = "harm points"
[deployment]
prevalence = 0.02
prevalence_low = 0.015
prevalence_high = 0.03
prevalence_source = "admissions audit 2025"
cases_per_period = 1200
period = "day"
[rules]
min_recall = 0.80
min_precision = 0.10
min_specificity = 0.50
max_flag_rate = 0.10
max_flagged_per_period = 60
capacity_quantile = 0.9
confidence = 0.95
[fairness]
metric = "recall"
groups = ["site"]
tolerance = 0.05
reference = ""
"""


def _dataset(n=400, seed=0, **kw):
    rng = np.random.default_rng(seed)
    y = rng.random(n) < 0.1
    y[:3] = True
    y[3:6] = False
    s = np.round(rng.random(n) * 0.5 + 0.4 * y, 3)
    return Dataset.from_arrays(y, s, **kw)


# ------------------------------------------------------------------ the contract

def test_full_contract_file_loads():
    p = loads_policy(FULL)
    assert p.objective == Objective("min_cost")
    assert p.costs.false_negative == 25.0 and p.costs.unit == "harm points"
    assert p.deployment.prevalence_source == "admissions audit 2025"
    assert p.deployment.cases_per_period == 1200.0 and p.deployment.period == "day"
    assert p.rules.active() == {"min_recall": 0.8, "min_precision": 0.1, "min_specificity": 0.5,
                                "max_flag_rate": 0.1, "max_flagged_per_period": 60.0}
    assert p.rules.capacity_quantile == 0.9 and p.rules.confidence == 0.95
    assert p.fairness == Fairness("recall", ("site",), 0.05, "")


@pytest.mark.parametrize("name", ["hospital.toml", "invoices.toml"])
def test_sample_policies_load_and_round_trip(name, tmp_path):
    p = load_policy(POLICIES / name)
    assert loads_policy(dumps_policy(p)) == p
    save_policy(p, tmp_path / name)
    assert load_policy(tmp_path / name) == p


def test_sample_policies_say_what_the_brief_asks():
    h = load_policy(POLICIES / "hospital.toml")
    assert h.objective.kind == "min_cost" and h.rules.min_recall == pytest.approx(0.80)
    assert h.rules.max_flagged_per_period is not None
    assert h.deployment.prevalence_low < h.deployment.prevalence < h.deployment.prevalence_high
    inv = load_policy(POLICIES / "invoices.toml")
    assert inv.costs.false_negative_column == "invoice_amount" and inv.costs.false_negative is None
    assert inv.costs.false_positive == 15.0


def test_each_objective_kind_loads():
    base = "[costs]\nfalse_positive = 1\nfalse_negative = 9\n[rules]\nmin_recall = 0.5\nmax_flag_rate = 0.2\n"
    extra = {"max_fbeta": "beta = 2.0\n", "max_net_benefit": "threshold_probability = 0.1\n"}
    for kind in OBJECTIVES:
        p = loads_policy(f'[objective]\nkind = "{kind}"\n{extra.get(kind, "")}' + base)
        assert p.objective.kind == kind


@settings(derandomize=True, deadline=None, max_examples=150)
@given(
    kind=st.sampled_from(OBJECTIVES),
    fp=st.floats(0.1, 100), fn=st.floats(0.5, 1000), use_col=st.booleans(),
    tp=st.one_of(st.none(), st.floats(-5, 0.05)), tn=st.one_of(st.none(), st.floats(-5, 0.05)),
    unit=st.one_of(st.none(), st.text("abcxyz ", min_size=1, max_size=8).filter(str.strip)),
    prev=st.one_of(st.none(), st.floats(0.01, 0.2)), rng=st.booleans(),
    cases=st.one_of(st.none(), st.integers(1, 10_000)), period=st.one_of(st.none(), st.sampled_from(list(PERIODS))),
    rules=st.fixed_dictionaries({}, optional={
        "min_recall": st.floats(0, 1), "min_precision": st.floats(0.01, 1),
        "min_specificity": st.floats(0, 1), "max_flag_rate": st.floats(0, 1),
        "max_flagged_per_period": st.floats(1, 500), "confidence": st.floats(0.51, 0.999)}),
    fair=st.booleans(),
)
def test_round_trip_of_any_valid_policy(kind, fp, fn, use_col, tp, tn, unit, prev, rng, cases, period,
                                        rules, fair):
    # Common practice, no source: what is saved loads back equal, and the text is stable.
    rules = dict(rules)
    if kind == "max_recall":
        rules.setdefault("max_flag_rate", 0.2)
    if kind == "max_precision":
        rules.setdefault("min_recall", 0.5)
    if "max_flagged_per_period" in rules:
        rules["capacity_quantile"] = 0.9
    costs = Costs(false_positive=fp + 0.1, false_negative=None if use_col else fn + 0.1,
                  false_negative_column="amount" if use_col else None, true_positive=tp,
                  true_negative=tn, unit=unit)
    dep = Deployment(prevalence=prev, prevalence_low=prev * 0.5 if (prev and rng) else None,
                     prevalence_high=min(prev * 1.5, 0.9) if (prev and rng) else None,
                     prevalence_source="survey" if (prev and rng) else None,
                     cases_per_period=None if cases is None else float(cases), period=period)
    obj = Objective(kind, beta=2.0 if kind == "max_fbeta" else None,
                    threshold_probability=0.2 if kind == "max_net_benefit" else None)
    p = Policy(objective=obj, costs=costs, deployment=dep, rules=Rules(**rules),
               fairness=Fairness("precision", ("site", "age band"), 0.1, "North") if fair else None)
    text = dumps_policy(p)
    q = loads_policy(text)
    assert q == p
    assert dumps_policy(q) == text


# ------------------------------------------------------------------ bad files

BAD = [
    ("[objective]\nkind = 'min_cost'\n[costs]\nfalse_positive = 1\nfalse_negative = 2\n[extras]\na = 1\n",
     ["[extras]: unknown section", "allowed sections: objective, costs, deployment, rules, fairness"]),
    ("[objective]\nkind = 'max_youden'\n[rules]\nmin_recal = 0.8\n",
     ["rules.min_recal: unknown key", "min_recall, min_precision"]),
    ("[objective]\nkind = 'max_youden'\n[rules]\nmin_recall = '0.8'\n",
     ["rules.min_recall: wrong type", "a rate between 0 and 1"]),
    ("[objective]\nkind = 'max_youden'\n[rules]\nmin_recall = true\n",
     ["rules.min_recall: wrong type"]),
    ("[objective]\nkind = 'min_cost'\n[costs]\nfalse_positive = 1\nfalse_negative = 5\n"
     "false_negative_column = 'amount'\n", ["both false_negative and false_negative_column",
                                            "exactly one of the two"]),
    ("[objective]\nkind = 'min_cost'\n[costs]\nfalse_positive = 1\n",
     ["neither false_negative nor false_negative_column", "exactly one of the two"]),
    ("[objective]\nkind = 'min_cost'\n[costs]\nfalse_negative = 5\n", ["costs.false_positive: missing"]),
    ("[objective]\nkind = 'max_youden'\n[rules]\nmin_recall = 1.2\n",
     ["rules.min_recall: out of range (got 1.2)", "a rate between 0 and 1"]),
    ("[objective]\nkind = 'max_youden'\n[rules]\nmax_flag_rate = -0.1\n", ["rules.max_flag_rate: out of range"]),
    ("[objective]\nkind = 'max_youden'\n[rules]\nmin_precision = 0.0\n", ["rules.min_precision: out of range",
                                                                          "above 0"]),
    ("[objective]\nkind = 'max_youden'\n[deployment]\nprevalence = 1.5\n",
     ["deployment.prevalence: out of range", "strictly between 0 and 1"]),
    ("[objective]\nkind = 'max_youden'\n[rules]\nconfidence = 1.0\n", ["rules.confidence: out of range"]),
    ("[objective]\nkind = 'max_youden'\n[rules]\ncapacity_quantile = 0.9\n",
     ["capacity_quantile: only used with max_flagged_per_period"]),
    ("[objective]\nkind = 'max_accuracy'\n", ["objective.kind: unknown objective",
                                              "min_cost, max_fbeta, max_net_benefit"]),
    ("[costs]\nfalse_positive = 1\nfalse_negative = 2\n", ["[objective]: missing"]),
    ("[objective]\nbeta = 2.0\n", ["objective.kind: missing"]),
    ("[objective]\nkind = 'min_cost'\n", ["[costs]: required with kind = \"min_cost\""]),
    ("[objective]\nkind = 'max_recall'\n", ["needs a rule that limits flagging", "max_flag_rate"]),
    ("[objective]\nkind = 'max_recall'\n[rules]\nmin_recall = 0.5\n", ["needs a rule that limits flagging"]),
    ("[objective]\nkind = 'max_precision'\n[rules]\nmax_flag_rate = 0.5\n", ["needs rules.min_recall"]),
    ("[objective]\nkind = 'max_net_benefit'\n", ["threshold_probability: required"]),
    ("[objective]\nkind = 'max_net_benefit'\nthreshold_probability = 1.0\n",
     ["objective.threshold_probability: out of range"]),
    ("[objective]\nkind = 'max_youden'\nbeta = 2.0\n", ["objective.beta: only used with kind = \"max_fbeta\""]),
    ("[objective]\nkind = 'max_fbeta'\nbeta = -1.0\n", ["objective.beta: out of range"]),
    ("[objective]\nkind = 'max_youden'\n[deployment]\nprevalence = 0.02\nprevalence_low = 0.01\n",
     ["prevalence_low and prevalence_high go together"]),
    ("[objective]\nkind = 'max_youden'\n[deployment]\nprevalence = 0.02\nprevalence_low = 0.01\n"
     "prevalence_high = 0.03\n", ["prevalence_source: required with a prevalence range"]),
    ("[objective]\nkind = 'max_youden'\n[deployment]\nprevalence = 0.05\nprevalence_low = 0.01\n"
     "prevalence_high = 0.03\nprevalence_source = 'x'\n", ["lies outside the range"]),
    ("[objective]\nkind = 'max_youden'\n[deployment]\nprevalence_low = 0.03\nprevalence_high = 0.01\n"
     "prevalence_source = 'x'\n", ["prevalence_low (0.03) exceeds prevalence_high (0.01)"]),
    ("[objective]\nkind = 'max_youden'\n[deployment]\nperiod = 'fortnight'\n",
     ["deployment.period: unknown period", "hour, shift, day, week, month"]),
    ("[objective]\nkind = 'max_youden'\n[deployment]\ncases_per_period = 0\n",
     ["deployment.cases_per_period: out of range"]),
    ("[objective]\nkind = 'min_cost'\n[costs]\nfalse_positive = 1\nfalse_negative = -3\n",
     ["costs.false_negative: out of range"]),
    ("[objective]\nkind = 'min_cost'\n[costs]\nfalse_positive = 1\nfalse_negative = 5\ntrue_negative = 2\n",
     ["false_positive (1) must exceed true_negative (2)"]),
    ("[objective]\nkind = 'max_youden'\n[fairness]\nmetric = 'auc'\ngroups = ['site']\n",
     ["fairness.metric: unknown metric", "recall, precision"]),
    ("[objective]\nkind = 'max_youden'\n[fairness]\nmetric = 'recall'\n", ["fairness.groups: missing"]),
    ("[objective]\nkind = 'max_youden'\n[fairness]\nmetric = 'recall'\ngroups = 'site'\n",
     ["fairness.groups: wrong type"]),
    ("[objective]\nkind = 'max_youden'\n[fairness]\nmetric = 'recall'\ngroups = ['site', 'site']\n",
     ["a column is listed twice"]),
    ("[objective]\nkind = 'max_youden'\n[fairness]\nmetric = 'recall'\ngroups = ['site']\ntolerance = 2\n",
     ["fairness.tolerance: out of range"]),
    ("[objective]\nkind = 'max_youden'\nrules = 3\n", ["objective.rules: unknown key"]),
    ("objective = 3\n", ["[objective]: must be a table of keys"]),
    ("[objective\nkind = 'x'\n", ["not valid TOML"]),
]


@pytest.mark.parametrize("text, expected", BAD, ids=[f"bad{i}" for i in range(len(BAD))])
def test_each_bad_policy_is_an_error_that_lists_what_is_allowed(text, expected):
    with pytest.raises(PolicyError) as info:
        loads_policy(text, source="p.toml")
    msg = str(info.value)
    assert isinstance(info.value, InputError) and isinstance(info.value, ValueError)
    assert msg.startswith("policy file p.toml: ")
    for part in expected:
        assert part in msg, (part, msg)


def test_all_problems_are_reported_at_once():
    text = ("[objective]\nkind = 'min_cost'\n[rules]\nmin_recall = 1.5\nmin_specificity = -1\n"
            "[deployment]\nperiod = 'year'\n")
    with pytest.raises(PolicyError) as info:
        loads_policy(text)
    problems = info.value.problems
    assert len(problems) == 4
    assert any("min_recall" in p for p in problems) and any("period" in p for p in problems)
    assert any("[costs]: required" in p for p in problems)


def test_policies_built_in_code_are_validated_too():
    with pytest.raises(PolicyError, match="required with kind = \"min_cost\""):
        Policy(objective=Objective("min_cost"))
    with pytest.raises(PolicyError, match="rules.min_recall: out of range"):
        Policy(objective=Objective("max_youden"), rules=Rules(min_recall=2.0))
    p = Policy(objective=Objective("max_youden"), fairness=Fairness("recall", ["site"]))
    assert p.fairness.groups == ("site",)
    q = p.replace(rules=Rules(min_recall=0.5))
    assert q.rules.min_recall == 0.5 and q.objective == p.objective


def test_load_policy_from_file_names_the_file(tmp_path):
    path = tmp_path / "ward.toml"
    path.write_text("[objective]\nkind = 'nope'\n", encoding="utf-8")
    with pytest.raises(PolicyError, match="policy file ward.toml"):
        load_policy(path)


# ------------------------------------------------------------------ resolution

def test_resolve_fills_defaults_with_sources():
    ds = _dataset()
    p = loads_policy("[objective]\nkind = 'max_fbeta'\n[costs]\nfalse_positive = 2\nfalse_negative = 30\n"
                     "[rules]\nmin_recall = 0.5\n")
    r = resolve_policy(p, ds)
    assert r.beta == 1.0 and r.sources["objective.beta"] == "default"
    assert r.prevalence == pytest.approx(ds.prevalence) and r.sources["deployment.prevalence"] == "data"
    assert r.unit == "cost units" and r.sources["costs.unit"] == "default"
    assert r.true_positive == 0.0 and r.sources["costs.true_positive"] == "default"
    assert r.false_negative == 30.0 and r.sources["costs.false_negative"] == "file"
    assert r.period == "day" and r.sources["deployment.period"] == "default"
    assert r.cases_per_period is None
    assert r.rules == {"min_recall": 0.5} and r.confidence is None
    d = r.to_dict()
    assert d["deployment"]["prevalence"] == {"value": pytest.approx(ds.prevalence), "source": "data",
                                             "note": "the validation prevalence"}
    assert d["objective"]["kind"] == {"value": "max_fbeta", "source": "file"}
    assert d["rules"]["min_recall"]["source"] == "file"
    assert "min_precision" not in d["rules"]


def test_resolve_takes_cases_per_period_from_score_times():
    n = 300
    t = np.datetime64("2025-03-03T00:00") + np.arange(n).astype("timedelta64[h]") * 2  # 25 days
    ds = _dataset(n, score_time=t)
    p = loads_policy("[objective]\nkind = 'max_youden'\n[rules]\nmax_flagged_per_period = 5\n")
    r = resolve_policy(p, ds)
    assert r.cases_per_period == pytest.approx(12.0)  # 12 cases a day
    assert r.sources["deployment.cases_per_period"] == "data"
    assert "25 days" in r.notes["deployment.cases_per_period"]


def test_resolve_reports_what_the_data_cannot_give():
    ds = _dataset()
    cases = [
        ("[objective]\nkind = 'min_cost'\n[costs]\nfalse_positive = 1\nfalse_negative_column = 'amount'\n",
         "the data hold no per-case miss costs"),
        ("[objective]\nkind = 'max_youden'\n[rules]\nmax_flagged_per_period = 5\ncapacity_quantile = 0.9\n",
         "capacity_quantile: needs a score-time column"),
        ("[objective]\nkind = 'max_youden'\n[rules]\nmax_flagged_per_period = 5\n",
         "needs deployment.cases_per_period or a score-time column"),
        ("[objective]\nkind = 'max_youden'\n[fairness]\nmetric = 'recall'\ngroups = ['site']\n",
         "fairness.groups: site not among the data's group columns"),
        ("[objective]\nkind = 'max_youden'\n[deployment]\nprevalence_low = 0.5\nprevalence_high = 0.6\n"
         "prevalence_source = 'x'\n", "the validation prevalence"),
    ]
    for text, expected in cases:
        with pytest.raises(PolicyError, match=expected):
            resolve_policy(loads_policy(text), ds)


def test_resolve_checks_the_case_cost_column_name():
    rng = np.random.default_rng(1)
    n = 200
    y = rng.random(n) < 0.2
    y[:2] = [True, False]
    amount = rng.integers(10, 500, n).astype(float)
    ds = Dataset.from_arrays(y, rng.random(n), case_cost=amount)
    p = loads_policy("[objective]\nkind = 'min_cost'\n[costs]\nfalse_positive = 15\n"
                     "false_negative_column = 'invoice_amount'\n")
    assert resolve_policy(p, ds).false_negative_column == "invoice_amount"  # arrays: no names
    named = dataclasses.replace(ds, mapping=dataclasses.replace(ds.mapping, case_cost="net_amount"),
                                file_name="invoices.csv")
    with pytest.raises(PolicyError, match="names 'invoice_amount' but the data's case cost is the column "
                                          "'net_amount'"):
        resolve_policy(p, named)
    ok = dataclasses.replace(named, mapping=dataclasses.replace(ds.mapping, case_cost="invoice_amount"))
    assert resolve_policy(p, ok).case_dependent_costs


def test_resolve_fairness_reference_must_be_a_group_value():
    ds = _dataset(groups={"site": np.array(["North", "South"] * 200)})
    good = loads_policy("[objective]\nkind = 'max_youden'\n[fairness]\nmetric = 'recall'\ngroups = ['site']\n"
                        "reference = 'North'\n")
    r = resolve_policy(good, ds)
    assert r.fairness.tolerance == 0.05 and r.sources["fairness.tolerance"] == "default"
    bad = loads_policy("[objective]\nkind = 'max_youden'\n[fairness]\nmetric = 'recall'\ngroups = ['site']\n"
                       "reference = 'East'\n")
    with pytest.raises(PolicyError, match="'East' is not a value of site"):
        resolve_policy(bad, ds)


def test_resolve_accepts_a_bare_curve():
    ds = _dataset()
    r = resolve_policy(loads_policy(FULL.split("[fairness]")[0].replace("capacity_quantile = 0.9\n", "")),
                       ds.curve())
    assert r.prevalence == 0.02 and r.cases_per_period == 1200.0 and not r.has_score_time
