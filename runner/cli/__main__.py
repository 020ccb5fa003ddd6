"""``python -m runner.cli`` is the same as the ``trialdeck`` command."""

from __future__ import annotations

import sys

from runner.cli.app import main

sys.exit(main())
