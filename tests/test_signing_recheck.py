"""The signature check in fulcrum recheck (--public-key, --signature) and on the Recheck page.

References as in tests/test_signing.py (Ed25519 via the `cryptography` package).
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from core.signing import key_fingerprint
from tests.test_signing import _run, _write_keys, make_record


@pytest.fixture(scope="module")
def record_path(tmp_path_factory):
    return make_record(tmp_path_factory.mktemp("signing_recheck"))


@pytest.fixture()
def keys(tmp_path):
    return _write_keys(tmp_path)


# --------------------------------------------------------------------------- recheck


def _new_data(tmp_path) -> Path:
    from sklearn.datasets import load_breast_cancer

    data = load_breast_cancer(as_frame=True)
    frame = pd.DataFrame({"worst_radius": data.frame["worst radius"],
                          "diagnosis": np.where(data.target == 0, "malignant", "benign")})
    csv = tmp_path / "new.csv"
    frame.iloc[1::2].to_csv(csv, index=False)
    return csv


def test_recheck_checks_the_signature_first(record_path, keys, tmp_path):
    priv, pub, key = keys
    rec = tmp_path / "r.json"
    shutil.copy(record_path, rec)
    assert _run(["sign", rec, "--key", priv])[0] == 0
    csv = _new_data(tmp_path)
    out = tmp_path / "recheck.json"
    md, pdf = tmp_path / "recheck.md", tmp_path / "recheck.pdf"
    code, text, err = _run(["recheck", "--record", rec, csv, "--replicates", "50",
                            "--public-key", pub, "--out", out, "--markdown", md, "--memo", pdf])
    assert code in (0, 1), err
    fp = key_fingerprint(key)
    assert f"signature: valid, key {fp}" in text.splitlines()
    sig = json.loads(out.read_text())["signature"]
    assert sig["valid"] is True and sig["key_fingerprint"] == fp
    assert sig["record_sha256"] == json.loads(rec.read_text())["integrity"]["sha256"]
    # the recheck memo says whose signature held, in the Markdown and in the PDF (read back with pypdf)
    line = f"valid, Ed25519 key {fp}, signed {sig['signed_utc']}"
    from core.memo_markdown import md_escape

    assert md_escape(line) in md.read_text(encoding="utf-8")
    from pypdf import PdfReader

    pdf_text = " ".join(" ".join(pg.extract_text() for pg in PdfReader(pdf).pages).split())
    assert "Decision record signature" in pdf_text and f"Ed25519 key {fp[:16]}" in pdf_text
    # another key: refused before any recheck, exit 2 with one line
    _, other_pub, _ = _write_keys(tmp_path, "other")
    code, text, err = _run(["recheck", "--record", rec, csv, "--public-key", other_pub])
    assert code == 2 and text == "" and len(err.splitlines()) == 1 and "NOT VALID" in err
    code, _, err = _run(["recheck", "--record", rec, csv, "--signature", str(rec) + ".sig"])
    assert code == 2 and "--public-key" in err
    # without the options the recheck record says it was not checked
    code, _, err = _run(["recheck", "--record", rec, csv, "--replicates", "50", "--out", out,
                         "--markdown", md])
    assert code in (0, 1) and json.loads(out.read_text()).get("signature") is None
    assert "Decision record signature | not checked: no signature file" in md.read_text(encoding="utf-8")


def test_recheck_page_checks_an_uploaded_signature(record_path, keys, tmp_path):
    from streamlit.testing.v1 import AppTest

    priv, pub, key = keys
    rec = tmp_path / "r.json"
    shutil.copy(record_path, rec)
    assert _run(["sign", rec, "--key", priv])[0] == 0
    sig = Path(str(rec) + ".sig")
    _, other_pub, _ = _write_keys(tmp_path, "other")
    at = AppTest.from_file(str(Path(__file__).resolve().parents[1] / "app" / "main.py"),
                           default_timeout=180)
    at.run()
    at.switch_page("views/recheck.py").run()
    at.file_uploader(key="recheck_record_file").set_value(("r.json", rec.read_bytes(),
                                                           "application/json")).run()
    at.file_uploader(key="recheck_public_key").set_value(("other.pub.pem", other_pub.read_bytes(),
                                                          "application/x-pem-file"))
    at.file_uploader(key="recheck_signature").set_value(("r.json.sig", sig.read_bytes(),
                                                         "application/json")).run()
    assert not at.exception
    assert any("signature: NOT VALID" in e.value for e in at.error), [e.value for e in at.error]
    assert "recheck_data_source" not in {w.key for w in at.radio}  # refused: no recheck offered
    at.file_uploader(key="recheck_public_key").set_value(("key.pub.pem", pub.read_bytes(),
                                                          "application/x-pem-file")).run()
    line = f"signature: valid, key {key_fingerprint(key)}"
    assert any(line in s.value for s in at.success), [s.value for s in at.success]
    at.radio(key="recheck_data_source").set_value("Upload a file").run()
    at.file_uploader(key="recheck_data_file").set_value(("new.csv", _new_data(tmp_path).read_bytes(),
                                                         "text/csv")).run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    signed = at.session_state["fulcrum_recheck_record"]["signature"]
    assert signed["valid"] is True and signed["key_fingerprint"] == key_fingerprint(key)
