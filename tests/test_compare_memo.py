"""The comparison section of the threshold memo and the decision record's optional
``comparison`` key.

Data: the Wisconsin Diagnostic Breast Cancer set shipped with scikit-learn
(malignant, coded 0 there, is the event), two of its measurements as two
scores of the same cases. The section must say what the core's comparison
says (AUCs against scikit-learn's ``roc_auc_score``), print the brief's
cautions, keep the record valid (checked by :func:`core.record.loads_record`)
and hold no data row.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.metrics import roc_auc_score

from core import cautions
from core.compare import compare_mapped
from core.compare_memo import comparison_blocks
from core.dataset import Dataset
from core.decision import DEFAULT_POLICY, analyse
from core.errors import InputError
from core.memo_markdown import memo_markdown
from core.memo_pdf import memo_pdf
from core.policy import Policy
from core.record import (
    build_record,
    dumps_record,
    loads_record,
    restore_decision,
    without_timestamps,
)

A, B = "mean radius", "worst concave points"


@pytest.fixture(scope="module")
def made():
    bc = load_breast_cancer(as_frame=True)
    y = (bc.target == 0).to_numpy()
    ds = Dataset.from_arrays(y, bc.frame[A].to_numpy(), extra_scores={B: bc.frame[B].to_numpy()})
    policy = Policy.from_dict(DEFAULT_POLICY)
    a = analyse(ds, policy, seed=1, n_replicates=60)
    comp = compare_mapped(ds, policy=policy, seed=1, n_replicates=60)
    return ds, a, comp, y, bc.frame


def test_record_with_a_comparison_stays_valid_and_is_digested(made):
    ds, a, comp, y, frame = made
    rec = build_record(a, comparison=comp)
    back = loads_record(dumps_record(rec))  # schema, types and integrity digests checked
    assert "comparison" in back["integrity"]["sections"]
    assert back["comparison"]["data"]["fingerprint"] == ds.fingerprint
    # the record's data describe the decided score alone: the fingerprint of the same cases
    # without the extra score, so a recheck or a restore needs no other score column
    alone = Dataset.from_arrays(y, frame[A].to_numpy())
    assert back["data"]["sha256"] == alone.fingerprint != ds.fingerprint
    assert "extra_scores" not in back["data"]["mapping"]
    assert without_timestamps(build_record(a, comparison=comp)) | {"comparison": None} == \
        without_timestamps(build_record(analyse(alone, Policy.from_dict(DEFAULT_POLICY), seed=1,
                                                n_replicates=60))) | {"comparison": None}
    # reference: scikit-learn's roc_auc_score on each score
    for col, s in (("y_score", frame[A]), (B, frame[B])):
        assert back["comparison"]["summaries"][col]["roc_auc"] == pytest.approx(
            roc_auc_score(y, s), abs=1e-12)
    tampered = dict(back, comparison={**back["comparison"], "verdict_text": "changed"})
    with pytest.raises(InputError, match="comparison"):
        loads_record(dumps_record(tampered))
    plain = build_record(a)
    assert "comparison" not in plain and "comparison" not in plain["integrity"]["sections"]
    # a recheck of this decision needs the decided score only
    assert restore_decision(back).mapping.extra_scores == ()


def test_comparison_of_other_data_is_refused(made):
    _, _, comp, y, frame = made
    other = Dataset.from_arrays(y[::-1], frame[A].to_numpy(), extra_scores={B: frame[B].to_numpy()})
    other_analysis = analyse(other, Policy.from_dict(DEFAULT_POLICY), n_replicates=50)
    with pytest.raises(InputError, match="other data"):
        build_record(other_analysis, comparison=comp)


def test_memo_gains_the_comparison_section(made):
    _, a, comp, _, _ = made
    rec = build_record(a, comparison=comp)
    md = memo_markdown(rec)
    assert "14\\. Comparison with other score versions" in md
    assert "Compared on the same cases: 'worst concave points'" in md  # first-page line
    assert "McNemar" in md and "DeLong" in md
    assert "Accuracy misleads when events are rare" in md
    assert "Fulcrum is decision support for qualified reviewers" in md
    assert "14\\. Comparison" not in memo_markdown(build_record(a))
    pdf = memo_pdf(rec)
    assert pdf[:5] == b"%PDF-" and len(pdf) > len(memo_pdf(build_record(a)))


def test_section_blocks_carry_the_numbers_of_the_comparison(made):
    comp = made[2]
    d = comp.to_dict()
    blocks = comparison_blocks(d)
    tables = [b for b in blocks if b.kind == "table"]
    summary = {r[0]: r for r in tables[0].rows}
    assert summary[B][2] == f"{comp.summaries[B].roc_auc:.3f}"
    diffs = {r[0]: r for r in tables[1].rows}
    auc = comp.pair(B).roc_auc_difference
    assert diffs["ROC AUC"][3] == f"{auc.difference:+.3f}"
    assert diffs["ROC AUC"][4] == f"{auc.low:+.3f} to {auc.high:+.3f}"
    assert any(b.kind == "caution" and b.text == cautions.ACCURACY_TRAP for b in blocks)
    dis = comp.pair(B).disagreement[comp.own_points]
    rows = {r[0]: r for r in tables[2].rows}
    assert rows["Events caught by the candidate only"][1] == f"{dis.events_only_candidate:,.0f}"
    assert np.isfinite(dis.mcnemar_events.p_value)
