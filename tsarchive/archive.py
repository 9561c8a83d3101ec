"""Open an archive and decode any time range (numpy, pyarrow and numba kernels; no torch).

Reading reverses packing: Parquet rows -> entropy decode -> predictor
inverse (integer) -> grid -> samples, with every window's CRC-32 checked.
Nothing here imports torch or textual, and nothing is unpickled: the
manifest is JSON, the model is plain integer arrays.
"""

from __future__ import annotations

import math
import threading
from concurrent.futures import ThreadPoolExecutor
from dataclasses import replace
from functools import cached_property
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .channelcodec import ChannelCodec
from .errors import ArchiveCorrupt, BadInput, FormatVersionError
from .model.intnet import IntDecoder
from .workers import workers as worker_count
from .store import lean, lean6
from .store import parse as P
from .store import schema as S
from .store.binding import check_folder, read_manifest
from .store.members import inspect, member_problems
from .store.parse import ChannelMeta
from .store.rows import lengths as _lengths
from .store import sidecar
from .store.timeaxis import Times, Timeline, load_timeline
from .windowcodec import block_span, decode_windows
from .windows import CHUNK_SAMPLES


READ_SAMPLES = CHUNK_SAMPLES     # samples decoded per step of a long read (one packing block)


def _channel_meta(d: dict, window: int) -> ChannelMeta:
    return P.channel_meta(d, window)


class Archive:
    """A read-only view of one archive directory; see :func:`open_archive`.

    Not thread-safe: it caches open Parquet files and tables lazily.  Give
    each thread its own ``Archive`` (opening one only reads the manifest) or
    serialise access; :meth:`read_many` decodes channels on threads safely.
    """

    def __init__(self, path: str | Path, *, strict: bool = True) -> None:
        """Open and check an archive (manifest fields, member sizes, the binding, row counts, caps).

        ``strict`` (reading) refuses any damage with :class:`ArchiveCorrupt`; without it (``verify``)
        damage to the members is collected in :attr:`damage` and :attr:`decodable` says whether
        decoding may still be tried.  A manifest that cannot be understood is refused either way.
        """
        self.path = Path(path)
        check_folder(self.path)
        stored = read_manifest(self.path)
        v = self.format_version = P.format_version(stored)
        if v > S.FORMAT_VERSION:
            raise FormatVersionError(f"archive {self.path.name} was written by a newer tsarchive (format {v}; "
                                     f"this one reads {S.OLDEST_READABLE}..{S.FORMAT_VERSION}); upgrade tsarchive")
        if v < S.OLDEST_READABLE:
            raise FormatVersionError(f"archive {self.path.name} has format {v}, older than this tsarchive reads "
                                     f"({S.OLDEST_READABLE}..{S.FORMAT_VERSION}); use the version that wrote it")
        m = self.manifest = P.expanded(stored, v)      # format 5 stores each fact once (store/compact.py)
        self.window = P.window(m)
        self.members = P.members(m, v)
        model = P.model_spec(m, self.window)
        P.facts(m)
        chans = P.channel_list(m)
        self.channels = tuple(_channel_meta(c, self.window) for c in chans)
        P.grids_of_version(self.channels, v)
        P.budget_spec_agrees(m, self.channels)
        self._by_name = {c.name: c for c in self.channels}
        self._index = {c.name: i for i, c in enumerate(self.channels)}     # a channel's key in lean rows
        self._local = threading.local()
        # the coders are rebuilt once, at opening (a malformed table is named here)
        codecs = {c.name: ChannelCodec.from_entry(c, P.tables(d), coder=d.get("coder"))
                  for c, d in zip(self.channels, chans)}
        opened = inspect(self.path, stored, v, self.members, self.window, self.channels, model, strict,
                         make_decoder=IntDecoder.from_arrays)
        self._windows_file, self._groups, self._decoder = opened.windows, opened.groups, opened.decoder
        self._runs = opened.runs                  # format 6: each row group's windows (store/lean6.py)
        self._codecs = {n: replace(c, decoder=opened.decoder) for n, c in codecs.items()}
        self.bound, self.damage, self.decodable = opened.bound, opened.damage, opened.decodable

    def check_members(self) -> None:
        """Hash every member against the manifest (a full read); raise :class:`ArchiveCorrupt` on a mismatch."""
        problems = member_problems(self.path, self.members)
        if problems:
            raise ArchiveCorrupt(f"{problems[0]}; run tsarchive verify for the details")

    def member_table(self, name: str, columns: list[str] | None = None, filters=None) -> pa.Table | None:
        """A Parquet member listed in the manifest (e.g. an optional ``index.parquet``), read by name;
        None when the archive has no such member.  Its size was checked at opening; ``verify`` hashes it."""
        if name not in {m.name for m in self.members}:
            return None
        try:
            return pq.read_table(self.path / name, columns=columns, filters=filters)
        except (OSError, pa.ArrowException) as exc:
            raise ArchiveCorrupt(f"{name} cannot be read ({str(exc)[:80]}); the archive is damaged") from None

    # -- facts -------------------------------------------------------------------
    @property
    def source_name(self) -> str:
        return self.manifest.get("source", {}).get("name", "")

    @property
    def archive_bytes(self) -> int:
        return sum(p.stat().st_size for p in self.path.iterdir() if p.is_file())

    @property
    def raw_bytes(self) -> int:
        return int(self.manifest["summary"]["raw_bytes"])

    @property
    def ratio(self) -> float:
        return self.raw_bytes / self.archive_bytes if self.archive_bytes else math.inf

    def channel(self, name: str) -> ChannelMeta:
        try:
            return self._by_name[name]
        except KeyError:
            raise BadInput(f"no channel {name!r} in the archive; channels are: {', '.join(self._by_name)}") from None

    # -- members -----------------------------------------------------------------
    def _thread_file(self) -> pq.ParquetFile:
        """windows.parquet opened once per thread (a ParquetFile is not shared between threads)."""
        if threading.current_thread() is threading.main_thread():
            return self._windows_file
        f = getattr(self._local, "windows", None)
        if f is None:
            try:
                f = self._local.windows = pq.ParquetFile(self.path / S.WINDOWS)
            except (OSError, pa.ArrowException) as exc:
                raise ArchiveCorrupt(f"windows.parquet cannot be read ({exc}); the archive is damaged") from None
        return f

    @property
    def _row_groups(self) -> dict[str, list[tuple[int, int, int]]]:
        """channel -> [(row group, first window, last window)] from Parquet statistics (checked at opening)."""
        return self._groups

    def codec(self, channel: str) -> ChannelCodec:
        """The channel's :class:`~tsarchive.channelcodec.ChannelCodec` (its grid, ε, predictors, coders)."""
        self.channel(channel)
        return self._codecs[channel]

    @property
    def decoder(self):
        """The integer decoder (numpy), or None for an archive packed without a model (read once, at opening)."""
        return self._decoder

    def rows(self, channel: str, w0: int, w1: int, columns: list[str] | None = None) -> pa.Table:
        """Window rows ``w0 <= window < w1`` of a channel, reading only overlapping row groups."""
        schema = self._schema
        if columns is not None:       # a column this archive does not have (``code`` without a model) is left out
            columns = [c for c in schema.names if c in set(columns) | {"channel", "window"}]
        groups = [g for g, a, b in self._row_groups.get(channel, []) if b >= w0 and a < w1]
        if not groups:
            return schema.empty_table() if columns is None else pa.schema([schema.field(c) for c in columns]).empty_table()
        lean_rows, inside = self.format_version >= S.LEAN_FROM_VERSION, self.format_version >= S.INSIDE_FROM_VERSION
        with_code = "code" in schema.names
        wanted = (lean6.physical_columns if inside else lean.physical_columns)(columns, with_code) if lean_rows \
            else columns
        try:
            t = self._thread_file().read_row_groups(groups, columns=wanted)
        except (OSError, pa.ArrowException) as exc:
            raise ArchiveCorrupt(f"windows.parquet cannot be read ({str(exc)[:80]}); the archive is damaged") from None
        if inside:
            keys = np.concatenate([lean6.keys(self._runs[g]) for g in groups])
            if len(keys) != t.num_rows:
                raise ArchiveCorrupt("windows.parquet holds other row counts than its footer; the archive is damaged")
            t = lean.select(t.append_column("key", pa.array(keys)), self._index[channel], w0, w1)
            return lean6.unpack(t.drop_columns(["key"]), channel, t["key"].to_numpy() & lean.WINDOW_MASK, columns)
        if lean_rows:
            return lean.unpack(lean.select(t, self._index[channel], w0, w1), channel, columns)
        mask = pc.and_(pc.and_(pc.equal(t["channel"], channel), pc.greater_equal(t["window"], w0)),
                       pc.less(t["window"], w1))
        t = t.filter(mask)
        return t.take(pc.sort_indices(t["window"]))

    # -- decoding ----------------------------------------------------------------
    def decode_windows(self, channel: str, w0: int, w1: int, *, check: bool = True):
        """Decode windows ``w0..w1-1``; returns ``(values, window numbers, bad-crc windows)``.

        With ``check`` a CRC mismatch raises :class:`ArchiveCorrupt`;
        without, the mismatching windows are returned for reporting
        (see :func:`tsarchive.windowcodec.decode_windows`).
        """
        meta, codec = self.channel(channel), self.codec(channel)
        a0, a1 = block_span(codec, w0, w1, meta.n_windows)      # a block-coded channel decodes whole blocks
        if (a0, a1) != (max(w0, 0), min(w1, meta.n_windows)):
            x, windows, bad = self.decode_windows(channel, a0, a1, check=False)
            keep = (windows >= w0) & (windows < w1)
            bad = [w for w in bad if w0 <= w < w1]
            if check and bad:
                raise ArchiveCorrupt(f"channel {channel} window {bad[0]}: checksum mismatch; "
                                     "the archive is damaged — restore it from a copy")
            lo = int(np.argmax(keep)) * meta.window
            return x[lo:lo + int(_lengths(meta, windows[keep]).sum())], windows[keep], bad
        t = self.rows(channel, w0, w1)
        if any(c.null_count for c in t.columns):
            raise ArchiveCorrupt(f"channel {channel}: windows {w0}..{w1 - 1} have empty (null) fields; "
                                 "the archive is damaged")
        nrow = t.num_rows
        windows = t["window"].to_numpy()
        if nrow != max(0, min(w1, meta.n_windows) - max(w0, 0)) or \
                (nrow and not np.array_equal(windows, np.arange(windows[0], windows[0] + nrow))):
            raise ArchiveCorrupt(f"channel {channel}: windows {w0}..{w1 - 1} are missing rows; the archive is damaged")
        x, bad = decode_windows(t, _lengths(meta, windows), self._held(channel, w0, w1), codec, check=check)
        return x, windows, bad

    @property
    def _schema(self) -> pa.Schema:
        """windows.parquet's columns (``code`` only in archives with a model; checked at opening)."""
        return S.windows_schema("code" in self._windows_file.schema_arrow.names)   # every version's logical rows

    def _held(self, channel: str, w0: int, w1: int) -> dict[int, tuple[np.ndarray, np.ndarray]]:
        """The verbatim samples of windows ``w0..w1-1``: window -> (positions int64, raw bits int64)."""
        if S.EXCEPTIONS not in self.manifest.get("members", {}):
            return {}
        try:
            where = lean.key_filter(self._index[channel], w0, w1) if self.format_version >= S.LEAN_FROM_VERSION \
                else [("channel", "=", channel), ("window", ">=", w0), ("window", "<", w1)]
            t = pq.read_table(self.path / S.EXCEPTIONS, filters=where)
            if "key" in t.column_names:
                t = t.append_column("window", pc.bit_wise_and(t["key"], lean.WINDOW_MASK))
        except (OSError, pa.ArrowException) as exc:
            raise ArchiveCorrupt(f"exceptions.parquet cannot be read ({exc}); the archive is damaged") from None
        out = {}
        for w, pos, raw in zip(t["window"].to_pylist(), t["pos"].to_pylist(), t["bits"].to_pylist()):
            out[int(w)] = (np.asarray(pos, np.int64), np.asarray(raw, np.int64))
        return out

    # -- time axis, notes, text columns (store/timeaxis.py, store/sidecar.py) ---------
    @cached_property
    def timeline(self) -> Timeline:
        """The recording's time axis as logged (gaps, jitter, zone), exact to the ns or bit."""
        first = self.channels[0] if self.channels else None
        return load_timeline(self.manifest, self.path, first.n_samples if first else 0,
                             first.rate if first else 1.0, first.start if first else None)

    def span(self, start=None, end=None) -> tuple[int, int]:
        """Samples ``[a, b)`` whose times lie in ``start <= t - t[0] < end`` (seconds from the first sample)."""
        return self.timeline.span(start, end)

    def times(self, start=None, end=None) -> Times:
        """The exact times of the samples that :meth:`read` gives for the same ``start`` and ``end``."""
        return self.timeline.times(*self.span(start, end))

    @property
    def notes(self) -> tuple[str, ...]:
        """The source's preamble lines, as found."""
        return sidecar.notes(self.manifest)

    def extra(self, start=None, end=None) -> pa.Table | None:
        """The source's non-numeric columns over the same rows as :meth:`read`, or None."""
        a, b = self.span(start, end)
        return sidecar.read_extra(self.manifest, self.path, self.timeline.n, a, b)

    def read(self, channel: str, start: float | None = None, end: float | None = None) -> np.ndarray:
        """Samples of ``channel`` whose times lie in ``start <= t - t[0] < end`` (seconds from the first sample;
        on the logged time axis, so gaps and jitter count)."""
        meta = self.channel(channel)
        a, b = self.span(start, end)
        if b <= a:
            return np.zeros(0, dtype=np.dtype(meta.grid.out_dtype))
        W = meta.window
        w0, w1 = a // W, -(-b // W)
        step = max(1, READ_SAMPLES // W)
        if w1 - w0 <= step:
            x, _, _ = self.decode_windows(channel, w0, w1)
            return x[a - w0 * W:b - w0 * W]
        out = np.empty(b - a, dtype=np.dtype(meta.grid.out_dtype))
        if meta.grid.missing is not None:                 # an integer channel with missing samples
            out = np.ma.MaskedArray(out, mask=np.zeros(b - a, dtype=bool))
        for c0 in range(w0 - w0 % step, w1, step):   # bounded temporaries: a long channel decodes in steps
            c0, c1 = max(c0, w0), min(w1, c0 + step)
            x, _, _ = self.decode_windows(channel, c0, c1)
            lo, hi = max(a, c0 * W), min(b, c0 * W + len(x))
            out[lo - a:hi - a] = x[lo - c0 * W:hi - c0 * W]
        return out

    def read_many(self, channels=None, start: float | None = None, end: float | None = None,
                  workers: int | None = None) -> dict[str, np.ndarray]:
        """:meth:`read` of several channels (all by default), decoded on ``workers`` threads
        (default: one per core).  Each channel is decoded on its own with the same integer
        kernels, so the samples are identical whatever the thread count."""
        names = [c.name for c in self.channels] if channels is None else list(channels)
        for n in names:
            self.channel(n)
        workers = max(1, min(workers, len(names))) if workers else worker_count(len(names))
        if workers == 1:
            return {n: self.read(n, start, end) for n in names}
        self.prepare_threads()
        with ThreadPoolExecutor(workers) as pool:
            return dict(zip(names, pool.map(lambda n: self.read(n, start, end), names)))

    def prepare_threads(self) -> None:
        """Fill the lazy caches (row-group map, schema, tables, decoder) before threads share them."""
        self._row_groups, self._schema, self.decoder, self.timeline

    # -- browsing (tsarchive/browse.py) ---------------------------------------------
    def preview(self, channel: str, start: float | None = None, end: float | None = None) -> np.ndarray:
        """See :func:`tsarchive.browse.preview`."""
        from .browse import preview
        return preview(self, channel, start, end)

    def windows(self, channel: str):
        """See :func:`tsarchive.browse.window_table`."""
        from .browse import window_table
        return window_table(self, channel)

    def outliers(self, channel: str, k: int = 20) -> list[int]:
        """See :func:`tsarchive.browse.outliers`."""
        from .browse import outliers
        return outliers(self, channel, k)

    def similar(self, channel: str, window_index: int, k: int = 10) -> list[tuple[int, float]]:
        """See :func:`tsarchive.browse.similar`."""
        from .browse import similar
        return similar(self, channel, window_index, k)

    def verify(self, against=None, progress=None, **options):
        """See :func:`tsarchive.verifier.verify_archive` (``rate``, ``even_if_changed``)."""
        from .verifier import verify_archive
        return verify_archive(self, against=against, progress=progress, **options)

    def export(self, out_path, channels=None, start=None, end=None, *, force: bool = False,
               replace_original: str | None = None) -> Path:
        """Write a reconstruction; see :func:`tsarchive.export_range.export_range` for what it refuses."""
        from .export_range import export_range
        return export_range(self, out_path, channels=channels, start=start, end=end, force=force,
                            replace_original=replace_original)


def open_archive(path: str | Path, *, strict: bool = True) -> Archive:
    """Open an archive directory for reading (no torch, no pickle); see :class:`Archive`."""
    return Archive(path, strict=strict)
