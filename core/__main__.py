"""``python -m core …`` is the same as ``fulcrum …``."""

from core.cli import main

raise SystemExit(main())
