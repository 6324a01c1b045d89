"""Start the real app on a free loopback port and drive it in Debian's Chromium.

Shared by the browser tests. Locally without /usr/bin/chromium the tests skip
with the reason; with CI=true they must run (``.ci/run`` installs chromium).
Screenshots go to the ignored ``artifacts/`` folder.
"""

from __future__ import annotations

import contextlib
import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
ARTIFACTS = ROOT / "artifacts"
CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--disable-quic", "--no-first-run"]


def require_browser():
    """Skip (locally) or fail (CI) when Chromium or Playwright is missing."""
    missing = []
    if not Path(CHROMIUM).exists():
        missing.append(f"{CHROMIUM} (Debian package chromium)")
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        missing.append("the playwright Python package")
    if missing:
        reason = "browser tests need " + " and ".join(missing)
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(reason + " (CI=true: they must run)")
        pytest.skip(reason)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@contextlib.contextmanager
def running_app(env_extra: dict | None = None, timeout: float = 90.0):
    """Yield the base URL of a freshly started app; stop it afterwards."""
    from core.cli import SERVER_ENV, SERVER_FLAGS

    port = free_port()
    env = {**os.environ, **SERVER_ENV, **(env_extra or {})}  # the environment `fulcrum app` sets
    cmd = [sys.executable, "-m", "streamlit", "run", str(ROOT / "app" / "main.py"), *SERVER_FLAGS,
           f"--server.port={port}", "--server.headless=true", "--server.fileWatcherType=none"]
    ARTIFACTS.mkdir(exist_ok=True)
    log = open(ARTIFACTS / f"server-{port}.log", "w")
    proc = subprocess.Popen(cmd, cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT)
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + timeout
        while True:
            try:
                with urllib.request.urlopen(url + "/_stcore/health", timeout=2) as r:
                    if r.status == 200:
                        break
            except OSError:
                pass
            if proc.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError(f"the app did not start (see {log.name})")
            time.sleep(0.3)
        yield url, proc
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
        log.close()


@contextlib.contextmanager
def browser():
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=CHROMIUM_ARGS)
        try:
            yield b
        finally:
            b.close()


def wait_idle(page, timeout: float = 60_000) -> None:
    """Wait until Streamlit has finished the current run.

    Streamlit's running-status indicator: the app root carries the script
    state (``data-test-script-state``: running / notRunning) and the header's
    status widget shows its running icon while a run is in progress; stale
    elements from the previous run are marked ``data-stale="true"``.
    """
    page.wait_for_function(
        """() => {
            const app = document.querySelector('[data-testid="stApp"]');
            if (!app) return false;
            const state = app.getAttribute('data-test-script-state');
            const running = document.querySelector('[data-testid="stStatusWidgetRunningIcon"],'
                                                   + '[data-testid="stStatusWidgetRunningManIcon"]');
            const stale = document.querySelector('[data-stale="true"]');
            const skeleton = document.querySelector('[data-testid="stSkeleton"]');
            return state === 'notRunning' && !running && !stale && !skeleton;
        }""", timeout=timeout)


def wait_text(page, text: str, timeout: float = 120_000) -> None:
    """Wait until the main area shows ``text`` (the server has drawn it), then until idle."""
    page.wait_for_function(
        "t => document.querySelector('[data-testid=\"stMain\"]')?.innerText.includes(t)",
        arg=text, timeout=timeout)
    wait_idle(page, timeout)


def open_page(page, link: str, text: str) -> None:
    """Click a navigation link and wait for the new page's content, not just for idleness
    (right after the click the previous page may still report that it is idle)."""
    page.get_by_role("link", name=link).click()
    wait_text(page, text)


def switch_on(page, label: str, then: str, timeout: float = 120_000) -> None:
    """Turn a Streamlit toggle on and wait for the widget it reveals (label ``then``).

    A click that lands while the page is still re-running can be swallowed, and a
    second click on a toggle that did take would turn it off again, so the toggle's
    own checked state decides whether to click, and the click is repeated until
    the revealed widget is there."""
    box = page.get_by_label(label, exact=True)
    deadline = time.monotonic() + timeout / 1000
    while True:
        wait_idle(page)
        if not box.is_checked():
            page.get_by_text(label, exact=True).click()
            wait_idle(page)
        try:
            page.get_by_label(then, exact=True).wait_for(timeout=15_000)
            return
        except Exception:
            if time.monotonic() > deadline:
                raise


def screenshot(page, name: str) -> Path:
    ARTIFACTS.mkdir(exist_ok=True)
    path = ARTIFACTS / f"{name}.png"
    page.screenshot(path=str(path), full_page=True)
    return path
