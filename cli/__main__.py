"""``python -m trapbudget.cli``: the same as the ``trapbudget`` command."""

from trapbudget.cli import main

raise SystemExit(main())
