"""``python -m render``: render one frame (see :mod:`render.cli`)."""

from .cli import main

raise SystemExit(main())
