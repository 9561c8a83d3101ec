"""Write an archive atomically: build it in a hidden sibling folder, then rename.

Nothing half-written is ever left at the target path: the target is claimed
for the whole write (``store/claim.py``), on any error (or cancellation) the
staging folder is removed, and an existing archive is only replaced (with
``force``) once the new one is complete, in one atomic exchange where the
system has one.  The manifest goes into ``windows.parquet``'s footer with
every other member's SHA-256 and the window rows' SHA-256, and the footer's
own digest into it (``store/inside.py``): every byte is bound.
"""

from __future__ import annotations

import json
import os
import shutil
from contextlib import ExitStack
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from ..checksum import file_sha256
from ..errors import BadInput
from . import schema as S
from . import lean, lean6
from . import inside
from .compact import compact
from .slim import slim
from .claim import check_target, claim_target, is_archive_dir, move_into_place, staging_name  # noqa: F401

class ArchiveWriter:
    """Stage an archive; use as a context manager and call :meth:`commit` last."""

    def __init__(self, path: str | os.PathLike, channels: list[str], *, force: bool = False,
                 with_code: bool = False) -> None:
        self.path = Path(path)
        self._index = {name: i for i, name in enumerate(channels)}   # a row's channel -> its key (lean.py)
        self._pending: dict[int, list[pa.Table]] = {}                # rows not yet in a full row group
        self._claim = ExitStack()
        if not self.path.parent.exists():
            raise BadInput(f"folder {self.path.parent} does not exist; create it or choose another output path")
        self._claim.enter_context(claim_target(self.path, force))   # held until the writer is closed
        try:
            self.force = force
            self.with_code = with_code
            self.schema = lean6.lean6_schema(with_code)
            self.stage = staging_name(self.path)
            self.stage.mkdir()
        except BaseException:
            self._claim.close()
            raise
        self._windows: pq.ParquetWriter | None = None
        self._sink: pa.OSFile | None = None
        self._groups: list[list[int]] = []      # [channel, first window] of each row group (lean6.py)
        self._exceptions: pq.ParquetWriter | None = None
        self._committed = False

    def __enter__(self) -> "ArchiveWriter":
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        try:
            self._close()
        finally:
            if not self._committed:
                shutil.rmtree(self.stage, ignore_errors=True)
            self._claim.close()

    # -- members ---------------------------------------------------------------
    def _close(self, names=("_windows", "_exceptions")) -> None:
        for name in names:
            w = getattr(self, name)
            if w is not None:
                w.close()
                setattr(self, name, None)
        if "_windows" in names and getattr(self, "_sink", None) is not None:
            self._sink.close()
            self._sink = None

    def add_windows(self, rows: pa.Table) -> None:
        """Append logical window rows (``schema.WINDOWS_SCHEMA``) of one channel, in window order.

        A channel's rows go out in full row groups of ``ROW_GROUP_WINDOWS``; what is left of every channel
        goes out at :meth:`finalize`, together in channel order (so a short recording is one row group)."""
        if not rows.num_rows:
            return
        channel = self._index[rows["channel"][0].as_py()]
        pending = self._pending.setdefault(channel, [])
        key = (np.int64(channel) << lean.CHANNEL_SHIFT) | rows["window"].to_numpy().astype(np.int64)
        pending.append(lean6.pack(rows, self.with_code).append_column("key", pa.array(key)))
        held = pa.concat_tables(pending)
        full = held.num_rows - held.num_rows % S.ROW_GROUP_WINDOWS
        if full:
            self._write(held.slice(0, full))
        self._pending[channel] = [held.slice(full)] if full < held.num_rows else []

    def _open_windows(self) -> None:
        if self._windows is None:    # an unbuffered sink: every row group is in the file once written (finalize)
            self._sink = pa.OSFile(str(self.stage / S.WINDOWS), "wb")
            self._windows = pq.ParquetWriter(self._sink, self.schema, **lean6.writer_opts(self.schema))

    def _write(self, rows: pa.Table) -> None:
        """Rows (with their ``key``, which the file does not keep) in row groups of ``ROW_GROUP_WINDOWS``;
        each group's first window goes to the manifest's ``groups`` (lean6.py)."""
        self._open_windows()
        if rows.num_rows:
            self._groups += lean6.group_starts(rows["key"].to_numpy())
        self._windows.write_table(rows.drop_columns(["key"]), row_group_size=S.ROW_GROUP_WINDOWS)

    def add_exceptions(self, rows: pa.Table) -> None:
        """Append one channel's windows with verbatim samples (the member exists only if this is called)."""
        if not rows.num_rows:
            return
        if self._exceptions is None:
            self._exceptions = pq.ParquetWriter(self.stage / S.EXCEPTIONS, lean.EXCEPTIONS_SCHEMA,
                                                **lean.EXCEPTIONS_OPTS)
        self._exceptions.write_table(lean.pack_exceptions(rows, self._index[rows["channel"][0].as_py()]))

    def write_model(self, arrays: dict[str, np.ndarray]) -> None:
        """The decoder's arrays; nothing is written for an archive without a model."""
        if not arrays:
            return
        names = sorted(arrays)
        table = pa.table({
            "name": names,
            "shape": [list(np.shape(arrays[n])) for n in names],
            "values": [np.asarray(arrays[n], dtype=np.int64).ravel() for n in names],
        }, schema=S.MODEL_SCHEMA)
        pq.write_table(table, self.stage / S.MODEL, compression="zstd", compression_level=19, store_schema=False,
                       use_dictionary=False, write_statistics=False, column_encoding={"name": "PLAIN", "shape": "PLAIN",
                                                              "values": "BYTE_STREAM_SPLIT"})

    def write_index(self, index) -> None:
        """The learned index (optional member ``index.parquet``; :mod:`tsarchive.index.member`); none if empty."""
        if index:
            from ..index.member import write
            self._flush_pending()          # every window row staged first: the index's byte budget is measured on them
            write(self.stage, index)

    def _flush_pending(self) -> None:
        """Every channel's remaining rows, together in channel order (rows arrive no more after this)."""
        rest = [t for c in sorted(self._pending) for t in self._pending[c]]
        self._pending = {}
        if rest:
            self._write(pa.concat_tables(rest))
        self._open_windows()

    def staged_bytes(self) -> int:
        """Bytes staged so far, every window row included (windows.parquet stays open for its footer: its
        footer is not counted)."""
        self._flush_pending()
        self._close(("_exceptions",))
        return sum(p.stat().st_size for p in self.stage.iterdir())

    def finalize(self, manifest: dict) -> Path:
        """Seal the staged archive: the manifest (compact, with every other member's size and SHA-256) goes
        into windows.parquet's footer, zstd-compressed, and the footer's digest into its slot (inside.py).

        Returns the staging folder, which is a complete archive that can be
        opened and checked before :meth:`commit` moves it into place.
        """
        self._flush_pending()
        self._close(("_exceptions",))
        manifest = json.loads(json.dumps(compact(manifest)))  # the values exactly as a reader will see them
        members = {}
        for p in sorted(self.stage.iterdir()):               # every member, whoever added it, is listed
            if p.suffix == ".parquet" and p.name != S.WINDOWS:
                slim(p)
            if p.name != S.WINDOWS:
                members[p.name] = {"bytes": p.stat().st_size, "sha256": file_sha256(p)}
        data = self._sink.tell()                              # the window rows, before the footer
        manifest = dict(manifest, layout=lean6.LAYOUT, groups=self._groups, members=members,
                        data={"bytes": data, "sha256": inside.prefix_sha256(self.stage / S.WINDOWS, data)})
        self._windows.add_key_value_metadata({S.MANIFEST_KEY: inside.compress(manifest), S.DIGEST_KEY: inside.ZERO})
        self._close()
        slim(self.stage / S.WINDOWS)                          # the pages stay: the rows' digest holds
        inside.seal(self.stage / S.WINDOWS)
        for p in self.stage.iterdir():
            with open(p, "rb") as fh:
                os.fsync(fh.fileno())
        _fsync_dir(self.stage)
        return self.stage

    def commit(self) -> Path:
        """Move the finalized archive into place (replacing an old one with ``force``: one atomic exchange)."""
        move_into_place(self.stage, self.path, replace=self.force)
        self._committed = True
        _fsync_dir(self.path.parent)
        return self.path


def _fsync_dir(path: Path) -> None:
    """Make a folder's entries durable (POSIX; a no-op where folders cannot be opened)."""
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
