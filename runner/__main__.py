"""``python -m runner`` is the same as the ``trialdeck`` command."""

from __future__ import annotations

import sys

from runner.cli import main

sys.exit(main())
