"""Allow ``python -m upswing``."""

from upswing.cli import main

raise SystemExit(main())
