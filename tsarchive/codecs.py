"""The codec contract and its registry: the one place where a stage of the coding is described.

Every codec (an entropy coder, a predictor, a grid) is an object with

* ``id`` — a stable identifier stored in the archive (a text; a predictor's
  is the small integer of the ``mode`` column).  An id is never reused for
  another meaning;
* ``encode(...)`` and ``decode(...)`` — exact inverses on integers (no
  floating point on the decoding side, so decoding is bit-exact anywhere);
* ``get_config() -> dict`` — JSON-safe, and ``from_config(dict)`` — a
  classmethod with ``from_config(c.get_config()) == c``.

The kinds and their encode/decode shapes:

=============  =========================================  ==============================================
kind           encode                                     decode
=============  =========================================  ==============================================
``coder``      ``encode(values: int64[n]) -> bytes``      ``decode(payload: bytes, n) -> int64[n]``
``predictor``  ``encode(q, ctx) -> residuals`` (int64)    ``decode(residuals, ctx) -> q``
``grid``       ``encode(x) -> (q, positions, raw bits)``  ``decode(q) -> samples`` in the channel's dtype
=============  =========================================  ==============================================

Coders: :mod:`tsarchive.entropy` (``range``, per-window tables), :mod:`tsarchive.zstdcoder` (``zstd``),
:mod:`tsarchive.coding` (``adaptive``, ``classic``: one coder for a whole channel, with its config under
the channel's manifest ``coder``); a new leaf coder with the same four members registers itself with
:func:`register` and is found by its id.  Predictors: :mod:`tsarchive.predict`.  Grids: :mod:`tsarchive.quantize`.
A channel's codecs together are a :class:`tsarchive.channelcodec.ChannelCodec`,
whose ``to_dict()`` is the channel's entry in ``manifest.json``.

    >>> from tsarchive import codecs
    >>> coder = codecs.from_config("coder", "zstd", {"level": 3})
    >>> coder.decode(coder.encode([0, -5, 7]), 3).tolist()
    [0, -5, 7]
    >>> codecs.get("predictor", 0).id
    0

An unknown id raises :class:`~tsarchive.errors.UnknownCodec`.
"""

from __future__ import annotations

import importlib
from typing import Any, Callable

from .errors import UnknownCodec

KINDS = ("coder", "predictor", "grid")
#: modules that register the built-in codecs when they are imported
_BUILTIN = ("tsarchive.entropy", "tsarchive.zstdcoder", "tsarchive.coding", "tsarchive.predict", "tsarchive.quantize")

_FACTORIES: dict[tuple[str, Any], Callable[[dict], Any]] = {}
_loaded = False


def register(kind: str, codec_id, from_config: Callable[[dict], Any]) -> None:
    """Make ``from_config(config)`` the way to rebuild codecs of ``kind`` stored as ``codec_id``."""
    if kind not in KINDS:
        raise ValueError(f"unknown codec kind {kind!r}; one of {', '.join(KINDS)}")
    known = _FACTORIES.get((kind, codec_id))
    if known is not None and known is not from_config:
        raise ValueError(f"{kind} id {codec_id!r} is taken; choose a new id")
    _FACTORIES[(kind, codec_id)] = from_config


def _load_builtins() -> None:
    global _loaded
    if not _loaded:
        for name in _BUILTIN:
            importlib.import_module(name)
        _loaded = True


def from_config(kind: str, codec_id, config: dict | None = None):
    """The codec of ``kind`` stored as ``codec_id`` with ``config``; UnknownCodec if none is registered."""
    _load_builtins()
    factory = _FACTORIES.get((kind, codec_id))
    if factory is None:
        raise UnknownCodec(f"{kind} {str(codec_id)[:40]!r} is unknown to this tsarchive version; upgrade tsarchive "
                           "to read it")
    return factory({} if config is None else config)


def get(kind: str, codec_id):
    """A codec that needs no config (a predictor)."""
    return from_config(kind, codec_id)


def ids(kind: str) -> list:
    """The registered ids of ``kind``."""
    _load_builtins()
    return sorted((i for k, i in _FACTORIES if k == kind), key=str)
