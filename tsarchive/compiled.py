"""numba compile-or-fallback, in one place: compiled kernels where numba imports, else None.

numba is imported on first use, not with tsarchive.  Kernels are compiled
with ``nogil`` (threads run them side by side) and cached on disk where a
cache directory is writable, else compiled once per process.  Callers keep
a numpy (or constriction) path that gives the same bits when this is None.
"""

from __future__ import annotations


def compile_kernels(kernels, namespace: dict | None = None, helpers: tuple[str, ...] = ()) -> tuple | None:
    """The compiled ``kernels``, or None without numba.  ``helpers`` are names in ``namespace`` (a
    module's globals) that the kernels call: each is replaced by the compiled ``<name>_py`` first."""
    try:
        from numba import njit
    except ImportError:
        return None

    def build(cache: bool) -> tuple:
        for name in helpers:
            namespace[name] = njit(cache=cache, nogil=True)(namespace[name + "_py"])
        return tuple(njit(cache=cache, nogil=True)(f) for f in kernels)

    try:
        return build(True)
    except RuntimeError:                     # no writable cache directory anywhere: compile once per process
        return build(False)
