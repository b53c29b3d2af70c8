"""``python -m phaseglass``: the same command line as the ``phaseglass`` script."""

from .cli import main

raise SystemExit(main())
