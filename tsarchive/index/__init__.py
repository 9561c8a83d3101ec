"""The learned index: a short code and a few facts for every browse segment of every channel.

Packing builds it (:func:`build_index`) and stores it as the optional member
``index.parquet`` (:mod:`tsarchive.index.member`); reading needs numpy and
pyarrow only.  Its bytes are held to a small share of the archive's
(:mod:`tsarchive.index.budget`).  On top of it: unusual segments, look-alikes and the
code-only preview (:mod:`tsarchive.index.query`).
"""

from .build import ChannelIndex, build_channel, build_index

__all__ = ["ChannelIndex", "build_channel", "build_index"]
