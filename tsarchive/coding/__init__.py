"""Residual coders that plug into the codec contract (leaf modules; the pipeline does not use them yet).

Every coder is a frozen dataclass with a stable ``id``, ``encode(values) ->
bytes``, ``decode(payload, n) -> int64 array`` (:class:`ArchiveCorrupt` on
damage), ``encode_many(windows)`` / ``decode_many(payloads, lengths)``,
``cost_bits(values)``, a JSON-safe ``get_config()`` holding the id, and
``from_config(config)``:

* :class:`~tsarchive.coding.adaptive.AdaptiveCoder` (``"adaptive"``): context-adaptive
  binary range coding, window by window, optionally from a fitted initial state;
* :class:`~tsarchive.coding.classic.ClassicCoder` (``"classic"``): difference + the
  smallest of zstd -19 / xz -9e / bzip2 -9, the fallback that is never worse than
  a general-purpose compressor on the same integers.

Importing this package imports neither numba (compiled on first use) nor torch.
"""

from __future__ import annotations

from tsarchive.errors import UnknownCodec

from .adaptive import AdaptiveCoder
from .classic import ClassicCoder

CODERS: dict[str, type] = {AdaptiveCoder.id: AdaptiveCoder, ClassicCoder.id: ClassicCoder}


def coder_from_config(config: dict):
    """The coder a stored config describes; :class:`UnknownCodec` for an id this version does not know."""
    cls = CODERS.get(str(config.get("id")))
    if cls is None:
        raise UnknownCodec(f"residual coder {str(config.get('id'))[:40]!r} is unknown to this tsarchive version; "
                           "upgrade tsarchive to read the archive")
    return cls.from_config(config)
