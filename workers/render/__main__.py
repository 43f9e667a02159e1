"""``python -m workers.render``: render one frame (see :mod:`workers.render.cli`)."""

from .cli import main

raise SystemExit(main())
