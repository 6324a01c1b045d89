"""Sessions never see each other's data, points or policies; caches are content-keyed and bounded.

The browser test opens two Chromium contexts (two users, separate cookies and websockets) on
one server at the same time, uploads a different invented file in each, moves each point
differently and prices the errors in a different unit, then checks in each, with both still
open, that the sidebar, the tiles (against ``core.curve.sweep`` on that session's own file)
and the policy are its own. The unit tests check ``app.cache.BoundedCache`` and that every
cache in ``app/`` is bounded and keyed by content (the data fingerprint), never by session.
Common practice, no source: session isolation and bounded caches of a multi-user server.
"""

from __future__ import annotations

import ast
import threading
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from app import format as fmt
from app.cache import BoundedCache
from core.curve import sweep
from tests.browser import (
    browser,
    open_page,
    require_browser,
    running_app,
    screenshot,
    switch_on,
    wait_idle,
    wait_text,
)
from tests.reliability import report

ROOT = Path(__file__).resolve().parents[1]
TILE_NAMES = ("Precision", "Recall", "Specificity")


# --------------------------------------------------------------------------- the cache itself

def test_bounded_cache_keeps_at_most_max_entries_least_recently_used_out():
    cache = BoundedCache(max_entries=3)
    calls = []

    def compute(k):
        calls.append(k)
        return {"value": k}

    for k in ("a", "b", "c"):
        cache.get_or_compute(k, lambda k=k: compute(k))
    assert cache.get_or_compute("a", lambda: compute("a!")) == {"value": "a"}  # hit, now most recent
    cache.get_or_compute("d", lambda: compute("d"))  # evicts "b", the least recently used
    assert len(cache) == 3
    cache.get_or_compute("b", lambda: compute("b"))  # computed again
    assert calls == ["a", "b", "c", "d", "b"]
    for i in range(100):
        cache.get_or_compute(("fp", i), lambda i=i: i)
        assert len(cache) <= 3
    assert len(cache) == 3


def test_bounded_cache_same_key_same_object_across_threads():
    cache = BoundedCache(max_entries=4)
    first = cache.get_or_compute(("fingerprint", "policy"), lambda: object())
    got = []
    threads = [threading.Thread(target=lambda: got.append(cache.get_or_compute(
        ("fingerprint", "policy"), lambda: object()))) for _ in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert all(g is first for g in got) and len(cache) == 1


def _cache_sites():
    """Every st.cache_resource function and BoundedCache() in app/: (file, node, kind)."""
    for path in sorted((ROOT / "app").rglob("*.py")):
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            if isinstance(node, ast.FunctionDef):
                for dec in node.decorator_list:
                    name = ast.unparse(dec.func if isinstance(dec, ast.Call) else dec)
                    if name.endswith("cache_data"):
                        yield path, node, "cache_data"
                    if name.endswith("cache_resource"):
                        yield path, (node, dec), "cache_resource"
            if isinstance(node, ast.Call) and ast.unparse(node.func).endswith("BoundedCache"):
                yield path, node, "BoundedCache"


def test_every_app_cache_is_bounded_and_keyed_by_content():
    sites = list(_cache_sites())
    assert sum(kind == "cache_resource" for _, _, kind in sites) >= 10
    assert sum(kind == "BoundedCache" for _, _, kind in sites) >= 1
    for path, node, kind in sites:
        where = f"{path.relative_to(ROOT)}"
        assert kind != "cache_data", f"{where}: st.cache_data copies values on every rerun"
        if kind == "BoundedCache":
            kw = {k.arg: k.value for k in node.keywords}
            assert "max_entries" in kw or node.args, f"{where}: BoundedCache without a bound"
            continue
        fn, dec = node
        kw = {k.arg: k.value for k in dec.keywords} if isinstance(dec, ast.Call) else {}
        assert "max_entries" in kw, f"{where}:{fn.name}: cache_resource without max_entries"
        assert 0 < ast.literal_eval(kw["max_entries"]) <= 64, f"{where}:{fn.name}"
        hashed = [a.arg for a in fn.args.args if not a.arg.startswith("_")]
        # the hashed arguments are the key: the data fingerprint first (or the shipped demo's name)
        assert hashed and hashed[0] in ("fingerprint", "name"), f"{where}:{fn.name}: key {hashed}"
        assert not any("session" in a for a in hashed), f"{where}:{fn.name}: keyed by session"


def test_evidence_page_keys_its_caches_by_the_data_fingerprint(monkeypatch, capsys):
    """Run the Evidence page (AppTest, demo data) and record every key given to BoundedCache."""
    from streamlit.testing.v1 import AppTest

    from core.intake import load_demo

    keys = []
    original = BoundedCache.get_or_compute

    def recording(self, key, compute):
        keys.append((self.max_entries, key))
        value = original(self, key, compute)
        assert len(self) <= self.max_entries
        return value

    monkeypatch.setattr(BoundedCache, "get_or_compute", recording)
    at = AppTest.from_file(str(ROOT / "app" / "main.py"), default_timeout=180)
    at.run()
    at.switch_page("views/evidence.py").run()
    assert not at.exception, at.exception
    fp = load_demo("hospital_q1").fingerprint
    assert len(keys) >= 3  # evidence, subgroups, calibration (and repeated cases)
    for _, key in keys:
        assert isinstance(key, tuple) and key[0] == fp, key
    report(capsys, "cache_keys", f"Evidence page: {len(keys)} cache keys, each led by the data "
           "fingerprint; every st.cache_resource in app/ bounded (max_entries) and keyed by it",
           keys=len(keys))


# --------------------------------------------------------------------------- two users at once

def invented(seed: int, n: int, rate: float) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    y = rng.random(n) < rate
    return pd.DataFrame({"risk": np.round(1 / (1 + np.exp(-rng.normal(-3 + 2 * y, 1))), 4),
                         "outcome": np.where(y, "event", "none")})


def tile(page, label: str) -> str:
    import re

    m = page.locator('[data-testid="stMain"] [data-testid="stMetric"]').filter(
        has=page.locator('[data-testid="stMetricLabel"]', has_text=re.compile(f"^{re.escape(label)}$")))
    return m.first.locator('[data-testid="stMetricValue"]').inner_text().strip()


def slider_value(page) -> int:
    return int(page.locator('[data-testid="stSlider"] input[type="range"]').first.input_value())


def wait_point(page, k: int) -> None:
    page.wait_for_function(
        """k => { const e = document.querySelector('[data-testid="stSlider"] input[type="range"]');
                  const main = document.querySelector('[data-testid="stMain"]');
                  return e && Number(e.value) === k && main
                         && main.innerText.includes('Point ' + k.toLocaleString('en-US') + ' of'); }""",
        arg=k, timeout=60_000)
    wait_idle(page)


def expected_tiles(curve, k: int) -> dict[str, str]:
    m = curve.point(k).metrics
    return {"Precision": fmt.pct(m["precision"]), "Recall": fmt.pct(m["recall"]),
            "Specificity": fmt.pct(m["specificity"])}


def upload(page, path: Path) -> None:
    page.get_by_text("Upload my own file").click()
    wait_idle(page)
    page.locator('[data-testid="stFileUploader"] input[type="file"]').first.set_input_files(str(path))
    wait_text(page, "Use this mapping")
    page.get_by_role("button", name="Use this mapping").click()
    wait_text(page, f"Loaded {path.name}")


@pytest.mark.browser
def test_two_sessions_at_once_see_only_their_own_data_point_and_policy(tmp_path, capsys):
    require_browser()
    users = {
        "alpha": {"frame": invented(11, 6000, 0.02), "move": ("ArrowLeft", 7), "unit": "alphaharm"},
        "beta": {"frame": invented(12, 9000, 0.05), "move": ("ArrowRight", 4), "unit": "betapounds"},
    }
    for name, u in users.items():
        u["path"] = tmp_path / f"{name}_scores.csv"
        u["frame"].to_csv(u["path"], index=False)
        y = (u["frame"]["outcome"] == "event").to_numpy()
        u["curve"] = sweep(y, u["frame"]["risk"].to_numpy())  # the core's own numbers for this file
        u["events"] = int(y.sum())
    with running_app() as (url, _proc), browser() as b:
        for name, u in users.items():
            u["context"] = b.new_context(viewport={"width": 1400, "height": 2200})
            u["page"] = u["context"].new_page()
            u["page"].goto(url)
        for u in users.values():
            wait_idle(u["page"])
            upload(u["page"], u["path"])
        for u in users.values():
            page = u["page"]
            open_page(page, "Trade-offs", "Confusion matrix at this point")
            k0 = slider_value(page)
            page.locator('[data-testid="stSlider"] input[type="range"]').first.focus()
            key, steps = u["move"]
            for _ in range(steps):
                page.keyboard.press(key)
            u["k"] = k0 + (steps if key == "ArrowRight" else -steps)
            wait_point(page, u["k"])
        for u in users.values():
            page = u["page"]
            open_page(page, "Decide", "Recommended operating point")
            page.get_by_text("Policy: objective, costs").click()
            switch_on(page, "Price the errors", then="Unit")
            box = page.get_by_label("Unit", exact=True)
            box.fill(u["unit"])
            box.press("Enter")
            wait_idle(page)

        held = tried = 0
        for rnd in range(2):  # check twice, interleaved, both contexts open throughout
            for name, u in users.items():
                other = users["beta" if name == "alpha" else "alpha"]
                page = u["page"]
                open_page(page, "Trade-offs", "Confusion matrix at this point")
                wait_point(page, u["k"])
                side = page.locator('[data-testid="stSidebar"]').inner_text()
                main = page.locator('[data-testid="stMain"]').inner_text()
                tried += 1
                assert u["path"].name in side and other["path"].name not in side + main
                assert fmt.count(u["events"]) in side and fmt.count(len(u["frame"])) in side
                assert {t: tile(page, t) for t in TILE_NAMES} == expected_tiles(u["curve"], u["k"])
                assert f"of {u['curve'].n_points - 1:,}" in main
                open_page(page, "Decide", "Recommended operating point")
                assert page.get_by_label("Unit", exact=True).input_value() == u["unit"]
                assert other["unit"] not in page.locator('[data-testid="stMain"]').inner_text()
                screenshot(page, f"isolation-{name}-{rnd}")
                held += 1
        report(capsys, "isolation", f"isolation: two Chromium contexts at once, {tried} checks of "
               f"data, point, tiles and policy, {held} held", tried=tried, held=held)
        for u in users.values():
            u["context"].close()
