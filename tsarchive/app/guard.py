"""One lock per open archive, so that worker threads take turns reading it.

The app reads an archive from several workers (plot stretches, Shortlist rankings,
verification, exports). An ``Archive`` keeps one Parquet reader per member file and
is not documented as safe for concurrent use, so every worker holds the archive's
lock while it calls the library. Work on different archives still runs in parallel.
"""

from __future__ import annotations

import threading
from weakref import WeakKeyDictionary

_locks: WeakKeyDictionary = WeakKeyDictionary()
_guard = threading.Lock()


def archive_lock(archive) -> threading.RLock:
    """The lock belonging to ``archive`` (created on first use)."""
    with _guard:
        lock = _locks.get(archive)
        if lock is None:
            lock = _locks[archive] = threading.RLock()
        return lock
