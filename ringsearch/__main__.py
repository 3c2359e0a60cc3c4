"""Allow ``python -m ringsearch``."""

from ringsearch.cli import main

raise SystemExit(main())
