"""The ordered grid's map (:mod:`tsarchive.quantize`, format 8): a float32 or float16 sample's bits as a
signed integer with a negative float's magnitude bits flipped.

``b ^ ((b >> 31) & 0x7fffffff)`` on the int32 view of a float32 (``>> 15`` and
``0x7fff`` for float16) keeps positive floats' bits as they are and turns a
negative float of magnitude bits ``m`` into ``-1 - m``: the integers follow
IEEE 754's totalOrder (-0.0 is -1, +0.0 is 0), neighbouring floats are
neighbouring integers, and the map is its own inverse, so every bit pattern
(NaN payloads, infinities, subnormals) comes back exactly.
"""

from __future__ import annotations

import numpy as np

#: float dtype -> (its same-width signed integer view, the sign bit's position)
ORDERED_DTYPES = {"float32": (np.int32, 31), "float16": (np.int16, 15)}


def ordered_ints(x: np.ndarray, dtype: str) -> np.ndarray:
    """The ordered grid's integers (int64) of samples ``x`` in float ``dtype`` (see the module doc)."""
    view, top = ORDERED_DTYPES[dtype]
    b = np.ascontiguousarray(x, dtype=dtype).view(view)
    return (b ^ ((b >> top) & view(np.iinfo(view).max))).astype(np.int64)


def ordered_floats(q: np.ndarray, dtype: str) -> np.ndarray:
    """Samples in float ``dtype`` from the ordered grid's integers ``q`` (the map is its own inverse)."""
    view, top = ORDERED_DTYPES[dtype]
    with np.errstate(over="ignore"):
        b = np.asarray(q, dtype=np.int64).astype(view)
    return (b ^ ((b >> top) & view(np.iinfo(view).max))).view(dtype)
