"""The participant's display (pygame lives only in this package)."""

from __future__ import annotations

import os

# pygame prints a greeting on import unless told not to; the console is for the experimenter.
os.environ.setdefault("PYGAME_HIDE_SUPPORT_PROMPT", "1")
