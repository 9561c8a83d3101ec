"""Residual coders that plug into the codec contract of :mod:`tsarchive.codecs` (kind ``coder``).

Every coder here is a frozen dataclass with a stable ``id``, ``encode(values) ->
bytes``, ``decode(payload, n) -> int64 array`` (:class:`ArchiveCorrupt` on
damage), ``encode_many(windows)`` / ``decode_many(payloads, lengths)`` /
``decode_flat(buf, starts, ends, n)``, ``cost_bits(values)``, a JSON-safe
``get_config()`` holding the id, and ``from_config(config)``; importing this
package registers them, so ``codecs.from_config("coder", id, config)`` finds them:

* :class:`~tsarchive.coding.adaptive.AdaptiveCoder` (``"adaptive"``): context-adaptive
  binary range coding, window by window, optionally from a fitted initial state;
  the packer chooses it per channel where it is smaller (:func:`tsarchive.encoder.choose_coder`);
* :class:`~tsarchive.coding.classic.ClassicCoder` (``"classic"``): difference + the
  smallest of zstd -19 / xz -9e / bzip2 -9, the fallback that is never worse than
  a general-purpose compressor on the same integers; the packer codes a whole channel
  with it where it is smaller (:mod:`tsarchive.coding.fallback`, not imported here).

Importing this package imports neither numba (compiled on first use) nor torch.
"""

from __future__ import annotations

from tsarchive import codecs

from .adaptive import AdaptiveCoder
from .classic import ClassicCoder

codecs.register("coder", AdaptiveCoder.id, AdaptiveCoder.from_config)
codecs.register("coder", ClassicCoder.id, ClassicCoder.from_config)
