"""Allow ``python -m logger``."""

from logger.cli import main

raise SystemExit(main())
