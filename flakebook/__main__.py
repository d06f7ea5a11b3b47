"""Allow ``python -m flakebook``."""

from flakebook.cli import main

raise SystemExit(main())
