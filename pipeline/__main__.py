"""``python -m pipeline`` is the ``thermochain`` command."""

from .cli import main

raise SystemExit(main())
