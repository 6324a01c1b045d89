"""The reliability figures the hardening tests print and the README quotes.

:func:`report` prints one figure line into the pytest output (outside the
captured output, so it shows without ``-s`` or ``-rA``) and stores it in
``artifacts/reliability.json`` (one key per figure, merged with what other
tests stored there).
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

ARTIFACT = Path(__file__).resolve().parents[1] / "artifacts" / "reliability.json"

__all__ = ["ARTIFACT", "report"]


def report(capsys, key: str, line: str, **numbers) -> None:
    """Print ``line`` past pytest's capture and store it with ``numbers`` under ``key``."""
    ARTIFACT.parent.mkdir(parents=True, exist_ok=True)
    try:
        data = json.loads(ARTIFACT.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        data = {}
    data[key] = {"figure": line, **numbers}
    fd, tmp = tempfile.mkstemp(dir=ARTIFACT.parent, prefix=".reliability-", suffix=".json")
    with os.fdopen(fd, "w", encoding="utf-8") as fh:
        json.dump(data, fh, indent=2, sort_keys=True, ensure_ascii=False)
    os.replace(tmp, ARTIFACT)
    with capsys.disabled():
        print(f"\n{line}")
