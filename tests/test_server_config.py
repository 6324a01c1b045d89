"""The app's server defaults: loopback only, no usage statistics, XSRF/CORS on, errors hidden, upload limit."""

from __future__ import annotations

import tomllib
from pathlib import Path

from core.cli import SERVER_FLAGS

ROOT = Path(__file__).resolve().parents[1]
EXPECTED = {
    ("server", "address"): "127.0.0.1",
    ("server", "enableXsrfProtection"): True,
    ("server", "enableCORS"): True,
    ("server", "maxUploadSize"): 1024,
    ("browser", "gatherUsageStats"): False,
    ("client", "showErrorDetails"): "none",
    ("client", "toolbarMode"): "minimal",
}


def test_project_config_file():
    cfg = tomllib.loads((ROOT / ".streamlit" / "config.toml").read_text())
    for (section, key), value in EXPECTED.items():
        assert cfg[section][key] == value, (section, key)


def test_launch_flags_match_the_config():
    flags = dict(f.removeprefix("--").split("=", 1) for f in SERVER_FLAGS)
    for (section, key), value in EXPECTED.items():
        text = str(value).lower() if isinstance(value, bool) else str(value)
        assert flags[f"{section}.{key}"] == text, (section, key)


def test_readme_states_the_upload_limit():
    assert "1,024 MB" in (ROOT / "README.md").read_text()


def _listeners(port: int) -> list[tuple[str, str]]:
    """(family, local address) of every listening socket on ``port`` (/proc/net, Linux)."""
    import ipaddress

    found = []
    for family in ("tcp", "tcp6"):
        for line in Path(f"/proc/net/{family}").read_text().splitlines()[1:]:
            fields = line.split()
            addr, hex_port = fields[1].split(":")
            if int(hex_port, 16) != port or fields[3] != "0A":  # 0A: LISTEN
                continue
            raw = bytes.fromhex(addr)
            if family == "tcp":
                ip = ipaddress.IPv4Address(raw[::-1])
            else:  # four little-endian 32-bit words
                ip = ipaddress.IPv6Address(b"".join(raw[i:i + 4][::-1] for i in range(0, 16, 4)))
            found.append((family, str(ip)))
    return found


def test_the_launched_server_listens_on_loopback_only_and_refuses_foreign_requests():
    """The server as the browser tests start it (SERVER_FLAGS): one listening socket, on
    127.0.0.1; an upload without the XSRF token is refused; a foreign origin gets no CORS grant.
    Common practice, no source: loopback binding, CSRF tokens and same-origin CORS."""
    import urllib.error
    import urllib.request

    from tests.browser import running_app

    with running_app() as (url, _proc):
        port = int(url.rsplit(":", 1)[1])
        assert _listeners(port) == [("tcp", "127.0.0.1")]
        req = urllib.request.Request(url + "/_stcore/health", headers={"Origin": "http://elsewhere.example"})
        with urllib.request.urlopen(req, timeout=10) as r:
            assert r.status == 200
            assert r.headers.get("Access-Control-Allow-Origin") in (None, url)
        put = urllib.request.Request(url + "/_stcore/upload_file/some-session/some-file", method="PUT",
                                     data=b"--x--", headers={"Content-Type": "multipart/form-data; boundary=x"})
        try:
            urllib.request.urlopen(put, timeout=10)
            refused = None
        except urllib.error.HTTPError as exc:
            refused = exc.code
        assert refused == 403  # no XSRF cookie and header: Tornado refuses before reading the file


def test_every_launch_sets_usage_statistics_off_in_its_environment():
    """`fulcrum app` and the browser tests' server start with the same environment."""
    from core.cli import SERVER_ENV

    assert SERVER_ENV["STREAMLIT_BROWSER_GATHER_USAGE_STATS"] == "false"
    assert int(SERVER_ENV["MALLOC_ARENA_MAX"]) >= 1
