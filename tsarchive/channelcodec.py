"""One channel's codecs together (grid, scale, LPC sets, entropy coders, the shared decoder).

:meth:`ChannelCodec.to_dict` is the coding part of the channel's entry in
``manifest.json`` (``eps``, ``grid``, ``scale``, ``lpc``, ``tables``, in that
order); :meth:`ChannelCodec.from_entry` rebuilds it through the registry of
:mod:`tsarchive.codecs`.  ε is read in one place, :attr:`ChannelCodec.eps`
(the grid's); the entry's copy of it is checked to agree when the manifest is
parsed (:func:`tsarchive.store.parse.channel_meta`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

from . import codecs
from .codec import CODER_ID, TableSet
from .errors import ArchiveCorrupt, UnknownCodec
from .predict.lpc import LpcCoefs
from .quantize import Grid


@dataclass(frozen=True, eq=False)
class ChannelCodec:
    """How one channel's windows are coded: see :mod:`tsarchive.windowcodec` for both directions.

    ``tables`` maps ``(predictor id, activity class)`` to an entropy coder
    (kind ``coder`` of the registry); ``decoder`` is the archive's integer
    autoencoder decoder shared by all channels (None without a model).
    """

    name: str
    window: int
    grid: Grid
    scale: int
    lpc: tuple[LpcCoefs, ...]
    coders: dict = field(default_factory=dict)
    decoder: object | None = None

    @property
    def eps(self) -> float:
        """The channel's budget in its units (0: exact); every decoded sample is within it."""
        return self.grid.eps

    def coder(self, mode: int, cls: int):
        """The entropy coder of predictor ``mode`` and activity class ``cls``."""
        try:
            return self.coders[(int(mode), int(cls))]
        except KeyError:
            from .predict import mode_name
            raise ArchiveCorrupt(f"channel {self.name}: no entropy table for predictor {mode_name(mode)} class "
                                 f"{cls}; the archive is damaged") from None

    @cached_property
    def table_set(self) -> TableSet:
        """The range coders' tables, as the encoder keeps them (made once)."""
        return TableSet({k: c.table for k, c in self.coders.items()})

    def to_dict(self) -> dict:
        """The coding fields of the channel's manifest entry (JSON-safe)."""
        return {"eps": self.eps, "grid": self.grid.to_dict(), "scale": int(self.scale),
                "lpc": [c.to_dict() for c in self.lpc],
                "tables": [{"mode": int(m), "table": int(c), "coder": coder.id, **coder.get_config()}
                           for (m, c), coder in sorted(self.coders.items())]}

    @classmethod
    def for_tables(cls, name: str, window: int, grid: Grid, scale: int, lpc, tables: TableSet,
                   decoder=None) -> "ChannelCodec":
        """A packing channel's codec from the tables the plan built (all range coded)."""
        from .entropy import RangeCoder
        return cls(name, window, grid, int(scale), tuple(lpc),
                   {k: RangeCoder(t) for k, t in tables.tables.items()}, decoder)

    @classmethod
    def from_entry(cls, meta, entries, decoder=None) -> "ChannelCodec":
        """From a parsed manifest channel (:class:`~tsarchive.store.parse.ChannelMeta`) and its table
        entries (:class:`~tsarchive.store.parse.TableEntry`), each coder rebuilt by its registered id."""
        coders = {}
        for t in entries:
            if t.coder != CODER_ID:   # table entries hold a range coder's frequencies; no other coder has them
                raise ArchiveCorrupt(f"entropy coder {t.coder[:40]!r} is unknown to this tsarchive version; "
                                     "upgrade tsarchive to read the archive")
            try:
                coders[(t.mode, t.table)] = codecs.from_config("coder", t.coder, {"freqs": t.freqs})
            except UnknownCodec as exc:
                raise ArchiveCorrupt(str(exc)) from None
        return cls(meta.name, meta.window, meta.grid, meta.scale, meta.lpc, coders, decoder)
