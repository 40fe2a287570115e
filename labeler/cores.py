"""How many cores this process may run on (a leaf module: imports nothing of labeler)."""

from __future__ import annotations

import os


def usable_cores() -> int:
    """The cores this process may run on (its CPU affinity where the system tells it, else every
    core the system has), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # not on every system
        return max(1, os.cpu_count() or 1)
