"""The ``fulcrum`` command line: the same core functions as the app, without a browser.

Every command returns an exit code: 0 success, 2 bad input (the same one-line
message the app shows, no traceback). Later commands (``pick``, ``recheck``,
``compare``, ``sql``, ``sign``, ``verify``) register themselves in
:data:`COMMANDS`.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
from pathlib import Path

from core import __version__
from core.errors import InputError

__all__ = ["COMMANDS", "SERVER_ENV", "SERVER_FLAGS", "build_parser", "main"]

APP_ENTRY = Path(__file__).resolve().parents[1] / "app" / "main.py"

#: Server settings every launch passes explicitly (they also live in
#: .streamlit/config.toml for ``streamlit run`` from the project folder).
SERVER_FLAGS = (
    "--server.address=127.0.0.1",
    "--server.enableXsrfProtection=true",
    "--server.enableCORS=true",
    "--browser.gatherUsageStats=false",
    "--client.showErrorDetails=none",
    "--client.toolbarMode=minimal",
    "--server.maxUploadSize=1024",
    "--global.developmentMode=false",
)


#: Environment every launch sets: usage statistics off; at most two malloc arenas, so that the
#: server's many threads (one per session and upload) do not each keep a heap of their own and
#: memory returns to its level after a large upload is replaced (common practice for long-lived
#: multi-threaded Python servers on glibc, no source).
SERVER_ENV = {"STREAMLIT_BROWSER_GATHER_USAGE_STATS": "false", "MALLOC_ARENA_MAX": "2"}


def _cmd_app(args: argparse.Namespace) -> int:
    """Open the browser app on the demo data (bound to 127.0.0.1)."""
    if not APP_ENTRY.exists():
        raise InputError(None, f"the app is not installed next to the core ({APP_ENTRY})")
    cmd = [sys.executable, "-m", "streamlit", "run", str(APP_ENTRY), *SERVER_FLAGS,
           f"--server.port={args.port}", f"--server.headless={'true' if args.headless else 'false'}"]
    env = dict(os.environ, **SERVER_ENV)
    return subprocess.call(cmd, env=env)


def _add_app(sub) -> None:
    p = sub.add_parser("app", help="open the browser app on the demo data",
                       description=_cmd_app.__doc__)
    p.add_argument("--port", type=int, default=8501, help="port on 127.0.0.1 (default 8501)")
    p.add_argument("--headless", action="store_true", help="do not open a browser window")
    p.set_defaults(func=_cmd_app)


def _add_pick(sub) -> None:
    from core.cli_pick import add_pick

    add_pick(sub)


def _add_recheck(sub) -> None:
    from core.cli_recheck import add_recheck

    add_recheck(sub)


def _add_sql(sub) -> None:
    from core.cli_sql import add_sql

    add_sql(sub)


def _add_compare(sub) -> None:
    from core.cli_compare import add_compare

    add_compare(sub)


def _add_sign(sub) -> None:
    from core.cli_sign import add_sign, add_verify

    add_sign(sub)
    add_verify(sub)


#: name -> function that adds the subcommand to the subparsers object.
COMMANDS = {"app": _add_app, "pick": _add_pick, "recheck": _add_recheck, "sql": _add_sql,
            "compare": _add_compare, "sign": _add_sign}


def build_parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(
        prog="fulcrum",
        description="Choose and defend a decision threshold for a rare-event classifier.")
    ap.add_argument("--version", action="version", version=f"fulcrum {__version__}")
    sub = ap.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for add in COMMANDS.values():
        add(sub)
    return ap


def main(argv: list[str] | None = None) -> int:
    """Run one command; bad input prints one line on stderr and returns 2."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse: --help (0) or a usage error (2)
        return int(exc.code or 0)
    try:
        return int(args.func(args) or 0)
    except InputError as exc:
        print(f"fulcrum: {exc}", file=sys.stderr)
        return 2
    except OSError as exc:
        print(f"fulcrum: {exc.strerror or exc}: {getattr(exc, 'filename', '') or ''}".rstrip(": "),
              file=sys.stderr)
        return 2


if __name__ == "__main__":
    raise SystemExit(main())
