"""``python -m inversion.cli``: the ``sondage`` command line."""

from . import main

raise SystemExit(main())
