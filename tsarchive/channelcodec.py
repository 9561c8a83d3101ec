"""One channel's codecs together (grid, scale, LPC sets, entropy coders, the shared decoder).

:meth:`ChannelCodec.to_dict` is the coding part of the channel's entry in
``manifest.json`` (``eps``, ``grid``, ``scale``, ``lpc``, ``tables``, in that
order, and ``coder`` when one coder codes every window); :meth:`ChannelCodec.from_entry`
rebuilds it through the registry of :mod:`tsarchive.codecs`.

A channel's residuals are coded either window by window under the range
coder's table of the window's (predictor, activity class) -- ``tables``, no
``coder``: every archive of formats 3 and 4 -- or all by the one coder named
in ``coder`` (``{"id": "adaptive", ...}``: its ``get_config()``), with
``tables`` empty.  ε is read in one place, :attr:`ChannelCodec.eps`
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
    residual_coder: object | None = None

    @property
    def eps(self) -> float:
        """The channel's budget in its units (0: exact); every decoded sample is within it."""
        return self.grid.eps

    def coder(self, mode: int, cls: int):
        """The entropy coder of predictor ``mode`` and activity class ``cls``."""
        if self.residual_coder is not None:
            return self.residual_coder
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
        d = {"eps": self.eps, "grid": self.grid.to_dict(), "scale": int(self.scale),
             "lpc": [c.to_dict() for c in self.lpc],
             "tables": [{"mode": int(m), "table": int(c), "coder": coder.id, **coder.get_config()}
                        for (m, c), coder in sorted(self.coders.items())] if self.residual_coder is None else []}
        if self.residual_coder is not None:
            d["coder"] = {**self.residual_coder.get_config(), "id": self.residual_coder.id}
        return d

    @classmethod
    def for_tables(cls, name: str, window: int, grid: Grid, scale: int, lpc, tables: TableSet,
                   decoder=None, residual_coder=None) -> "ChannelCodec":
        """A packing channel's codec from the tables the plan built (range coded, unless
        ``residual_coder`` codes every window: then the tables only steer the choice of predictor)."""
        from .entropy import RangeCoder
        return cls(name, window, grid, int(scale), tuple(lpc),
                   {k: RangeCoder(t) for k, t in tables.tables.items()}, decoder, residual_coder)

    @classmethod
    def from_entry(cls, meta, entries, decoder=None, coder=None) -> "ChannelCodec":
        """From a parsed manifest channel (:class:`~tsarchive.store.parse.ChannelMeta`), its table
        entries (:class:`~tsarchive.store.parse.TableEntry`) and its ``coder`` config (the raw manifest
        value, None when absent), each coder rebuilt by its registered id."""
        coders = {}
        for t in entries:
            if t.coder != CODER_ID:   # table entries hold a range coder's frequencies; no other coder has them
                raise ArchiveCorrupt(f"entropy coder {t.coder[:40]!r} is unknown to this tsarchive version; "
                                     "upgrade tsarchive to read the archive")
            try:
                coders[(t.mode, t.table)] = codecs.from_config("coder", t.coder, {"freqs": t.freqs})
            except UnknownCodec as exc:
                raise ArchiveCorrupt(str(exc)) from None
        return cls(meta.name, meta.window, meta.grid, meta.scale, meta.lpc, coders, decoder,
                   None if coder is None else residual_coder(meta.name, coder))


#: longest stored config of a channel's coder (JSON text), beyond any fitted initial state
MAX_CODER_CHARS = 1 << 16


def residual_coder(name: str, config):
    """The coder a channel's manifest ``coder`` names, rebuilt through the registry; one
    :class:`ArchiveCorrupt` line for anything else (not an object, no id, an unknown id, a config the
    coder refuses, a coder that cannot decode windows from a column's buffer)."""
    import json
    damaged = f"channel {name[:40]}: its residual coder"
    if not isinstance(config, dict) or not isinstance(config.get("id"), str) or \
            len(json.dumps(config)) > MAX_CODER_CHARS:
        raise ArchiveCorrupt(f"{damaged} is malformed; the archive is damaged")
    if config["id"] == CODER_ID:                 # range coding is per window, under the channel's tables
        raise ArchiveCorrupt(f"{damaged} 'range' cannot code a whole channel; the archive is damaged")
    try:
        coder = codecs.from_config("coder", config["id"], config)
    except UnknownCodec:
        raise ArchiveCorrupt(f"{damaged} {config['id'][:40]!r} is unknown to this tsarchive version; "
                             "upgrade tsarchive to read the archive") from None
    except ArchiveCorrupt as exc:
        raise ArchiveCorrupt(f"{damaged}: {exc}") from None
    except (TypeError, ValueError, KeyError, AttributeError):
        raise ArchiveCorrupt(f"{damaged} {config['id'][:40]!r} has a malformed config; the archive is damaged") \
            from None
    if not hasattr(coder, "decode_flat"):
        raise ArchiveCorrupt(f"{damaged} {config['id'][:40]!r} cannot code a whole channel; the archive is damaged")
    return coder
