"""How many threads tsarchive's own pools use (channels encoded, decoded or checked side by side).

``TSARCHIVE_THREADS`` (a positive integer) caps it; otherwise one per core.
Results never depend on it: channels and windows are coded independently
with integer kernels, so any thread count gives the same bytes and samples.
"""

from __future__ import annotations

import os

ENV = "TSARCHIVE_THREADS"


def workers(jobs: int) -> int:
    """Threads for ``jobs`` independent jobs: at most one per job, per core and ``TSARCHIVE_THREADS``."""
    limit = os.cpu_count() or 1
    text = os.environ.get(ENV, "").strip()
    if text:
        try:
            limit = max(1, int(text))
        except ValueError:
            pass                      # a malformed setting is ignored rather than failing a long pack
    return max(1, min(int(jobs), limit))
