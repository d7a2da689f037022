"""The physically sensible ranges of request values, shared by the schemas and readers."""

from __future__ import annotations

#: physically sensible ranges (common practice: refuse values no farm has, so the
#: arithmetic downstream never overflows or underflows): times in seconds, speeds relative
MAX_SECONDS = 1e10  # about 317 years
MIN_DEADLINE = 1e-3
SPEEDS = (1e-3, 1e3)
RESOLUTIONS = (1e-6, 1e6)
