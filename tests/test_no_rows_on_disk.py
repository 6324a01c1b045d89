"""No uploaded row reaches the disk or the logs: the whole flow with a marker in the data.

The data carry values that exist only in rows: patient ids and a free-text note containing
``ZQXMARKER7731``, and one non-event whose score is written with thirteen digits
(``0.0731415926535``; every other score has four decimals, so it cannot be a threshold the
app stores). The app server and the command line run with a fresh HOME, TMPDIR and XDG
folders (MPLCONFIGDIR unset, so matplotlib would write under HOME) and the whole path runs:
upload, map, move the point, Decide, Evidence, Memo (PDF, record, Markdown, test vectors
downloaded), Recheck on a second upload (its record, Markdown and PDF downloaded), then
``fulcrum pick`` and ``fulcrum recheck`` as subprocesses. Every file written under HOME,
TMPDIR, the CLI's working folder, the download folder and the server's working folder (the
repository) since the start is scanned -- PDF streams inflated and their text extracted,
zip members (xlsx) and gzip unpacked, Parquet read -- for the marker text, the marker
score's digits and its float64 bytes; so are the server's and the CLI's stdout/stderr.
The test's own two input files are left out. Common practice, no source: a privacy check
by planted canary values.
"""

from __future__ import annotations

import gzip
import io
import json
import os
import re
import struct
import subprocess
import sys
import time
import zipfile
import zlib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from tests.browser import (
    ROOT,
    browser,
    open_page,
    require_browser,
    running_app,
    screenshot,
    wait_idle,
    wait_text,
)
from tests.reliability import report

pytestmark = pytest.mark.browser

MARKER = "ZQXMARKER7731"
SCORE_TEXT = "0.0731415926535"
SCORE = float(SCORE_TEXT)
NEEDLES = (MARKER.encode(), SCORE_TEXT.encode(), SCORE_TEXT[2:].encode(), struct.pack("<d", SCORE),
           struct.pack(">d", SCORE))


def marked_data(seed: int, n: int, prefix: str) -> pd.DataFrame:
    """Invented rows: repeated patients, three sites, ~3 % events, one marker score."""
    rng = np.random.default_rng(seed)
    y = rng.random(n) < 0.03
    risk = np.round(1 / (1 + np.exp(-rng.normal(-2.5 + 1.8 * y, 1))), 4)
    risk = np.clip(risk, 0.0001, 0.9999)
    nonevent_low = np.flatnonzero(~y & (risk > 0.05) & (risk < 0.10))
    risk[nonevent_low[0]] = SCORE  # the one row-only score value
    patients = rng.integers(0, n // 2, n)
    return pd.DataFrame({
        "patient_id": [f"{MARKER}-{prefix}{p:06d}" for p in patients],
        "site": rng.choice(["north", "south", "east"], n),
        "risk": risk,
        "outcome": np.where(y, "event", "none"),
        "note": [f"{MARKER} free text {i:06d}" for i in range(n)],
    })


def _pdf_texts(data: bytes) -> list[bytes]:
    out = []
    for m in re.finditer(rb"stream\r?\n(.*?)\r?\nendstream", data, re.DOTALL):
        try:
            out.append(zlib.decompress(m.group(1)))
        except zlib.error:
            out.append(m.group(1))
    try:
        from pypdf import PdfReader

        reader = PdfReader(io.BytesIO(data))
        out.extend(p.extract_text().encode() for p in reader.pages)
        meta = reader.metadata or {}
        out.append(repr(dict(meta)).encode())
    except Exception as exc:  # noqa: BLE001 -- a PDF that pypdf cannot read is itself a finding
        out.append(f"unreadable PDF: {exc}".encode())
    return out


def decoded_views(data: bytes) -> list[bytes]:
    """The raw bytes plus every decompressed view this scan knows."""
    views = [data]
    if data.startswith(b"%PDF"):
        views += _pdf_texts(data)
    elif data.startswith(b"PK\x03\x04"):
        try:
            with zipfile.ZipFile(io.BytesIO(data)) as z:
                for name in z.namelist():
                    views += decoded_views(z.read(name))
        except zipfile.BadZipFile:
            pass
    elif data.startswith(b"\x1f\x8b"):
        try:
            views += decoded_views(gzip.decompress(data))
        except OSError:
            pass
    elif data.startswith(b"PAR1"):
        import pyarrow.parquet as pq

        frame = pq.read_table(io.BytesIO(data)).to_pandas()
        views.append(frame.to_csv(index=False).encode())
        views += [frame[c].to_numpy().tobytes() for c in frame.columns if frame[c].dtype.kind == "f"]
    return views


def scan(roots: list[Path], since: float, exclude: set[Path]) -> dict:
    files = nbytes = 0
    hits = []
    seen = set()
    for root in roots:
        for dirpath, _dirs, names in os.walk(root):
            for name in names:
                p = Path(dirpath, name)
                try:
                    st = p.lstat()
                except OSError:
                    continue
                if not p.is_file() or p.is_symlink() or p.resolve() in exclude or p.resolve() in seen:
                    continue
                if st.st_mtime < since and st.st_ctime < since:
                    continue
                seen.add(p.resolve())
                try:
                    data = p.read_bytes()
                except OSError:
                    continue
                files += 1
                nbytes += len(data)
                for view in decoded_views(data):
                    for needle in NEEDLES:
                        if needle in view:
                            hits.append((str(p), needle))
    return {"files": files, "bytes": nbytes, "hits": hits}


def test_the_scan_finds_planted_markers(tmp_path):
    """The scanner itself: the marker inside a compressed PDF with an embedded font subset, an
    xlsx, a snappy Parquet file, a gzip file and a float64 array is found."""
    import matplotlib
    from reportlab.pdfbase import pdfmetrics
    from reportlab.pdfbase.ttfonts import TTFont
    from reportlab.pdfgen import canvas

    frame = pd.DataFrame({"id": [f"{MARKER}-1", "x"], "s": [SCORE, 0.5]})
    frame.to_parquet(tmp_path / "a.parquet")
    frame.to_excel(tmp_path / "a.xlsx", index=False)
    (tmp_path / "a.gz").write_bytes(gzip.compress(frame.to_csv().encode()))
    (tmp_path / "a.bin").write_bytes(np.array([0.5, SCORE, 1.0]).tobytes())
    pdfmetrics.registerFont(TTFont("ScanTest", str(Path(matplotlib.get_data_path()) / "fonts/ttf/DejaVuSans.ttf")))
    c = canvas.Canvas(str(tmp_path / "a.pdf"))
    c.setFont("ScanTest", 10)
    c.drawString(72, 720, f"patient {MARKER}-1")
    c.save()
    assert MARKER.encode() not in (tmp_path / "a.pdf").read_bytes()  # compressed, subset-encoded
    found = scan([tmp_path], 0.0, set())
    assert {Path(h[0]).name for h in found["hits"]} == {"a.parquet", "a.xlsx", "a.gz", "a.bin", "a.pdf"}


def _download(page, button: str, target: Path) -> Path:
    with page.expect_download() as dl:
        page.get_by_role("button", name=button).first.click()
    dl.value.save_as(target)
    return target


def test_no_row_reaches_disk_or_logs(tmp_path, monkeypatch, capsys):
    require_browser()
    inputs = tmp_path / "inputs"
    home, tmp, work, downloads = (tmp_path / d for d in ("home", "tmp", "work", "downloads"))
    for d in (inputs, home, tmp, work, downloads):
        d.mkdir()
    old = inputs / "validation_marked.csv"
    new = inputs / "quarter2_marked.csv"
    marked_data(5, 8000, "A").to_csv(old, index=False)
    marked_data(6, 8000, "B").to_csv(new, index=False)
    assert SCORE_TEXT in old.read_text()
    monkeypatch.delenv("MPLCONFIGDIR", raising=False)
    env = {"HOME": str(home), "TMPDIR": str(tmp), "TMP": str(tmp), "TEMP": str(tmp),
           "XDG_CACHE_HOME": str(home / ".cache"), "XDG_CONFIG_HOME": str(home / ".config"),
           "XDG_DATA_HOME": str(home / ".local/share"), "XDG_STATE_HOME": str(home / ".local/state")}
    since = time.time() - 1
    logs: list[Path] = []

    with running_app(env_extra=env) as (url, _proc), browser() as b:
        logs.append(ROOT / "artifacts" / f"server-{url.rsplit(':', 1)[1]}.log")
        page = b.new_page(viewport={"width": 1400, "height": 2400}, accept_downloads=True)
        page.goto(url)
        wait_idle(page)
        page.get_by_text("Upload my own file").click()
        wait_idle(page)
        page.locator('[data-testid="stFileUploader"] input[type="file"]').first.set_input_files(str(old))
        wait_text(page, "Use this mapping")
        page.get_by_role("button", name="Use this mapping").click()
        wait_text(page, "Loaded validation_marked.csv")
        screenshot(page, "privacy-01-uploaded")

        open_page(page, "Trade-offs", "Confusion matrix at this point")
        page.locator('[data-testid="stSlider"] input[type="range"]').first.focus()
        for _ in range(8):
            page.keyboard.press("ArrowLeft")
        wait_idle(page)
        open_page(page, "Decide", "Recommended operating point")
        open_page(page, "Evidence", "Expected calibration error")
        screenshot(page, "privacy-02-evidence")

        open_page(page, "Memo", "Decision record and memo")
        page.get_by_role("button", name="Build the PDF memo").first.click()
        page.wait_for_selector('button:has-text("Memo (PDF)")', timeout=120_000)
        wait_idle(page)
        _download(page, "Memo (PDF)", downloads / "memo.pdf")
        _download(page, "Memo (Markdown)", downloads / "memo.md")
        _download(page, "Decision record (JSON)", downloads / "record.json")
        _download(page, "Test vectors (CSV)", downloads / "vectors.csv")
        screenshot(page, "privacy-03-memo")

        open_page(page, "Recheck", "Decision record")
        page.get_by_text("Upload a file").click()
        wait_idle(page)
        # the new-data uploader by its label (the signature expander holds uploaders too)
        page.locator('[data-testid="stFileUploader"]', has_text="New labelled scores") \
            .locator('input[type="file"]').set_input_files(str(new))
        try:
            wait_text(page, "Rules at the approved threshold")
        except Exception:
            screenshot(page, "privacy-04-recheck-failed")  # what the page showed instead
            raise
        _download(page, "Recheck record (JSON)", downloads / "recheck.json")
        _download(page, "Recheck memo (Markdown)", downloads / "recheck.md")
        page.get_by_role("button", name="Build the PDF memo").first.click()
        page.wait_for_selector('button:has-text("Recheck memo (PDF)")', timeout=120_000)
        wait_idle(page)
        _download(page, "Recheck memo (PDF)", downloads / "recheck.pdf")
        screenshot(page, "privacy-04-recheck")
        main = page.locator('[data-testid="stMain"]').inner_text()
        assert "Traceback" not in main and MARKER not in main

    cli_env = {k: v for k, v in os.environ.items() if k != "MPLCONFIGDIR"} | env
    out = work / "out"
    runs = [
        [sys.executable, "-m", "core", "pick", str(old), "--score", "risk", "--label", "outcome",
         "--positive", "event", "--cluster", "patient_id", "--group", "site", "--replicates", "300",
         "--record", str(out / "record.json"), "--memo", str(out / "memo.pdf"),
         "--markdown", str(out / "memo.md")],
        [sys.executable, "-m", "core", "recheck", str(new), "--record", str(out / "record.json"),
         "--replicates", "300", "--out", str(out / "recheck.json"), "--memo", str(out / "recheck.pdf"),
         "--markdown", str(out / "recheck.md")],
    ]
    out.mkdir()
    for i, cmd in enumerate(runs):
        r = subprocess.run(cmd, cwd=work, env=cli_env, capture_output=True, timeout=600, check=False)
        assert r.returncode in (0, 1), r.stderr.decode()[-2000:]
        for stream, text in (("out", r.stdout), ("err", r.stderr)):
            p = tmp_path / f"cli-{i}.std{stream}"
            p.write_bytes(text)
            logs.append(p)
    for p in ("record.json", "memo.pdf", "memo.md", "recheck.json", "recheck.pdf", "recheck.md"):
        assert (out / p).stat().st_size > 0, p
    for p in ("memo.pdf", "memo.md", "record.json", "vectors.csv", "recheck.json", "recheck.md",
              "recheck.pdf"):
        assert (downloads / p).stat().st_size > 0, p
    assert b"risk" in (downloads / "memo.md").read_bytes()  # the scan reads what the user got
    mapping = json.loads((downloads / "record.json").read_text())["data"]["mapping"]
    assert mapping["cluster"] == "patient_id" and list(mapping["groups"]) == ["site"]  # ids were used

    exclude = {old.resolve(), new.resolve()}
    written = scan([home, tmp, work, downloads, ROOT], since, exclude)
    log_scan = scan([p.parent for p in logs], since, exclude)
    log_hits = [h for h in log_scan["hits"] if Path(h[0]) in {q.resolve() for q in logs}]
    log_bytes = sum(p.stat().st_size for p in logs)
    report(capsys, "no_rows_on_disk",
           f"no rows on disk: full flow in Chromium and the CLI with marker values; "
           f"{written['files']} files written, {written['bytes']:,} bytes scanned (PDF streams "
           f"inflated and text extracted, zip/xlsx, gzip and Parquet unpacked), "
           f"hits={len(written['hits'])}; logs: {len(logs)} streams, {log_bytes:,} bytes, "
           f"hits={len(log_hits)}",
           files=written["files"], bytes=written["bytes"], hits=len(written["hits"]),
           log_streams=len(logs), log_bytes=log_bytes, log_hits=len(log_hits))
    assert written["files"] >= 13  # at least the eleven downloads and CLI outputs, plus the logs
    assert not written["hits"], written["hits"][:10]
    assert not log_hits, log_hits[:10]
