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
