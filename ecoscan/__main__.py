"""Allow ``python -m ecoscan``."""

from ecoscan.cli import main

raise SystemExit(main())
