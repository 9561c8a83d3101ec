"""Check an archive's member files against its manifest when it is opened (cheap: footers only).

* every listed member exists as a regular file of the listed size;
* ``windows.parquet``'s footer carries the manifest's digest (the binding,
  :mod:`tsarchive.store.binding`), its columns are the format's, every row
  group holds one channel (statistics), each channel has exactly the rows
  its declared sample count needs, and no row group declares more
  uncompressed bytes than its windows can hold;
* ``exceptions.parquet`` and ``model.parquet`` likewise, and the model is
  read once, checked against the manifest's layer sizes before any array
  is shaped.

Each finding is one line; :class:`Findings` raises the first one
(``strict``, for reading) or collects them all (for ``verify``, which
reports damage rather than refusing).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from ..errors import ArchiveCorrupt
from . import lean, lean6
from . import schema as S
from .binding import file_sha256, footer_digest, manifest_digest, member_size
from .footer import BYTE_ARRAY, DICTIONARY_ENCODINGS, Footer, read_footer
from .inside import V6, V7, digest_ok, footer_problem, place_of, prefix_sha256, stored_in
from .parse import ChannelMeta, Member, ModelSpec


@dataclass(frozen=True)
class Opened:
    """What opening found: the windows file, its row groups per channel, the decoder, and any damage."""

    windows: pq.ParquetFile | None
    groups: dict
    decoder: object
    bound: bool
    damage: tuple[str, ...]
    decodable: bool
    runs: tuple = ()           # format 6: per row group, its (channel, first window, end window) runs (lean6.py)


def inspect(path: Path, manifest: dict, version: int, members: tuple[Member, ...], window: int,
            channels: tuple[ChannelMeta, ...], model: ModelSpec | None, strict: bool, make_decoder=None) -> Opened:
    """Every check of the module doc, in order; ``strict`` raises the first finding.

    ``make_decoder(arrays)`` builds the model from its integer arrays (the store moves bytes only: it
    does not know the model's class)."""
    found = Findings(strict)
    check_sizes(path, members, found)
    wf = open_parquet(path, S.WINDOWS, found) if found.decodable else None
    bound, groups, decoder, runs = False, {}, None, ()
    if wf is not None:
        bound = check_binding(path, wf[1], manifest, version, found)
        if version >= S.INSIDE_FROM_VERSION:
            groups, runs = lean6_groups(*wf, channels, window, found, manifest.get("groups"))
        else:
            groups = (row_groups if version < S.LEAN_FROM_VERSION else lean_groups)(*wf, channels, window, found)
    if found.decodable and S.EXCEPTIONS in {x.name for x in members}:
        ef = open_parquet(path, S.EXCEPTIONS, found)
        if ef is not None:
            check_exceptions(*ef, window, sum(c.n_windows for c in channels), found,
                             lean.EXCEPTIONS_SCHEMA if version >= S.LEAN_FROM_VERSION else S.EXCEPTIONS_SCHEMA)
    if found.decodable and model is not None:
        mf = open_parquet(path, S.MODEL, found)
        decoder = None if mf is None else load_model(*mf, model, found, make_decoder)
    return Opened(wf and wf[0], groups, decoder, bound, tuple(found.problems), found.decodable, runs)


def member_problems(path: Path, members: tuple[Member, ...]) -> list[str]:
    """Every listed member hashed against the manifest's SHA-256 (a full read; format 6's windows.parquet up
    to its footer, which its own digest covers: inside.py), and files the manifest does not list."""
    out = []
    listed = {m.name for m in members} | {S.MANIFEST}
    for m in members:
        p = path / m.name
        size = member_size(p)
        if size is not None and (prefix_sha256(p, m.bytes) if m.prefix else file_sha256(p)) != m.sha256:
            out.append(f"member {m.name}: SHA-256 differs from the manifest (file damaged or replaced)")
    out.extend(f"member {p.name}: not listed in the manifest (added after packing)"
               for p in sorted(path.iterdir()) if p.name not in listed)
    return out


@dataclass
class Findings:
    """Problems found while opening: raised at once when ``strict``, else collected."""

    strict: bool
    problems: list[str] = field(default_factory=list)
    decodable: bool = True

    def add(self, message: str, fatal: bool = False) -> None:
        if self.strict:
            raise ArchiveCorrupt(message)
        self.problems.append(message)
        self.decodable = self.decodable and not fatal


def check_sizes(path: Path, members: tuple[Member, ...], found: Findings) -> None:
    for m in members:
        size = member_size(path / m.name)
        if size is None:
            found.add(f"archive member {m.name} is missing; the archive is incomplete", fatal=True)
        elif m.prefix and size < m.bytes + 12:
            found.add(f"archive member {m.name} is {size} bytes, shorter than the {m.bytes} bytes of window rows "
                      "the manifest declares: it was truncated; restore the archive from a copy")
        elif size != m.bytes and not m.prefix:
            found.add(f"archive member {m.name} is {size} bytes but the manifest says {m.bytes}: it was truncated "
                      "or replaced; restore the archive from a copy")


def open_parquet(path: Path, name: str, found: Findings) -> tuple[pq.ParquetFile, Footer] | None:
    """The member opened by pyarrow after its footer was read and checked here (footer.py)."""
    footer = read_footer(path / name)          # before pyarrow: some of its metadata accessors abort the process
    if isinstance(footer, str):
        found.add(f"{name} cannot be read ({footer}); the archive is damaged", fatal=True)
        return None
    try:
        return pq.ParquetFile(path / name), footer
    except (OSError, pa.ArrowException) as exc:
        found.add(f"{name} cannot be read ({str(exc)[:80]}); the archive is damaged", fatal=True)
        return None


def leaves_bounded(footer: Footer, per_row: dict[str, int], row_bytes: int) -> bool:
    """At most ``per_row[column]`` values per row (default 1), and no variable-length column whose
    dictionary could expand past ``row_bytes`` per row.

    Without a dictionary a column's uncompressed pages are at least as long as the data they decode
    to, so the caps on declared bytes and value counts bound what reading may allocate; with one, a
    row's value is at most the whole dictionary (fixed-width values cannot grow).  ``channel`` is
    exempt: its values are the channel names, checked through the statistics.
    """
    for g in footer.groups:
        for col in g.chunks:
            top = col.path.split(".")[0]
            if col.num_values > g.num_rows * per_row.get(top, 1):
                return False
            if top != "channel" and col.type == BYTE_ARRAY and \
                    any(e in DICTIONARY_ENCODINGS for e in col.encodings) and \
                    col.num_values * col.uncompressed > g.num_rows * row_bytes:
                return False
    return True


def check_binding(path: Path, footer: Footer, manifest: dict, version: int, found: Findings) -> bool:
    """True when the manifest is bound to windows.parquet (False: an unbound version-3 archive).  Format 6
    keeps it inside that file, under the file's digest (checked with the members: :func:`member_problems`)."""
    if version >= S.INSIDE_FROM_VERSION:
        if stored_in(footer) is None or not digest_ok(footer):
            found.add(f"{S.WINDOWS} does not carry the manifest and its digest; the archive is damaged", True)
        elif place_of(footer.key_value) is not (V7 if version >= S.TEXT_FROM_VERSION else V6):
            found.add(f"{S.WINDOWS} keeps its manifest as another format version than {version} does; "
                      "the archive is damaged or crafted", True)
        else:
            data = manifest.get("data", {})
            problem = footer_problem(path / S.WINDOWS, data.get("bytes") if isinstance(data, dict) else None)
            if problem:
                found.add(problem)
        return True
    stored = footer_digest(footer.key_value)
    if stored is None:
        if version >= S.BOUND_FROM_VERSION:
            found.add(f"{S.WINDOWS} does not carry the manifest's digest; the archive is damaged or was edited")
        return False
    if stored != manifest_digest(manifest):
        found.add(f"{S.MANIFEST} does not match {S.WINDOWS} (the manifest was edited or the members mixed "
                  "from different archives); restore the archive from a copy")
    return True


def _stats(chunk) -> tuple[str, str] | tuple[int, int] | None:
    """(min, max) of a ``channel`` (text) or ``window`` (int32) chunk from the footer, None when absent."""
    if chunk.min is None or chunk.max is None:
        return None
    if chunk.path == "channel":
        return chunk.min.decode("utf-8", "replace"), chunk.max.decode("utf-8", "replace")
    if len(chunk.min) != 4 or len(chunk.max) != 4:
        return None
    return int.from_bytes(chunk.min, "little", signed=True), int.from_bytes(chunk.max, "little", signed=True)


def _windows_columns(f: pq.ParquetFile, footer: Footer, expected, window: int, found: Findings):
    """(schema, uncompressed bytes a row may hold) when windows.parquet has the columns ``expected(with_code)``
    and no leaf exceeds what a row may hold; (None, 0) after a finding."""
    schema = f.schema_arrow.remove_metadata()
    if not schema.equals(expected("code" in schema.names)):
        found.add(f"{S.WINDOWS} does not have the columns of this format version; the archive is damaged", True)
        return None, 0
    limit = window * S.ROW_BYTES_PER_SAMPLE + S.ROW_BYTES_FIXED
    if not leaves_bounded(footer, {"code": S.MAX_CODE_SIZE}, limit):
        found.add(f"{S.WINDOWS} uses encodings or value counts this format never writes; the archive is "
                  "damaged or crafted", True)
        return None, 0
    return schema, limit


def row_groups(f: pq.ParquetFile, footer: Footer, channels: tuple[ChannelMeta, ...], window: int,
               found: Findings) -> dict[str, list[tuple[int, int, int]]]:
    """channel -> [(row group, first window, last window)], after checking rows and declared sizes."""
    schema, limit = _windows_columns(f, footer, S.windows_schema, window, found)
    if schema is None:
        return {}
    ci, wi = schema.names.index("channel"), schema.names.index("window")
    out: dict[str, list[tuple[int, int, int]]] = {}
    rows: dict[str, int] = {}
    for g, rg in enumerate(footer.groups):
        cs, ws = _stats(rg.chunks[ci]), _stats(rg.chunks[wi])
        if cs is None or ws is None or cs[0] != cs[1]:
            found.add(f"{S.WINDOWS} row groups lack per-channel statistics; the archive is damaged", True)
            return {}
        if rg.total_byte_size > rg.num_rows * limit:
            found.add(f"{S.WINDOWS} row group {g} declares {rg.total_byte_size} bytes for {rg.num_rows} windows "
                      f"of {window} samples; the archive is damaged or crafted", True)
            return {}
        out.setdefault(cs[0], []).append((g, ws[0], ws[1]))
        rows[cs[0]] = rows.get(cs[0], 0) + rg.num_rows
    for ch in channels:
        if rows.get(ch.name, 0) != ch.n_windows:
            found.add(f"channel {ch.name}: the manifest declares {ch.n_samples} samples ({ch.n_windows} windows) "
                      f"but {S.WINDOWS} holds {rows.get(ch.name, 0)} windows; the archive is damaged", True)
    extra = set(rows) - {c.name for c in channels}
    if extra:
        found.add(f"{S.WINDOWS} holds windows of channel(s) the manifest does not list "
                  f"({', '.join(sorted(extra))[:60]}); the archive is damaged", True)
    return out


def lean_groups(f: pq.ParquetFile, footer: Footer, channels: tuple[ChannelMeta, ...], window: int,
                found: Findings) -> dict[str, list[tuple[int, int, int]]]:
    """Format 5 (store/lean.py): channel -> [(row group, first window, last window)] from the ``key``
    statistics, after checking the columns, the declared sizes and the row counts."""
    schema, limit = _windows_columns(f, footer, lean.lean_schema, window, found)
    if schema is None:
        return {}
    ki, last = schema.names.index("key"), max(len(channels) - 1, 0)
    out: dict[str, list[tuple[int, int, int]]] = {}
    alone = [0] * len(channels)             # rows in groups that hold one channel only
    for g, rg in enumerate(footer.groups):
        st = rg.chunks[ki]
        ok = st.min is not None and st.max is not None and len(st.min) == len(st.max) == 8
        lo, hi = (int.from_bytes(st.min, "little", signed=True), int.from_bytes(st.max, "little", signed=True)) \
            if ok else (0, -1)
        (c0, w0), (c1, w1) = divmod(lo, 1 << lean.CHANNEL_SHIFT), divmod(hi, 1 << lean.CHANNEL_SHIFT)
        if not ok or not 0 <= lo <= hi or c1 > last or (c0 == c1 and rg.num_rows > hi - lo + 1):
            found.add(f"{S.WINDOWS} row group {g} lacks or contradicts its key statistics; the archive is damaged",
                      True)
            return {}
        if rg.total_byte_size > rg.num_rows * limit:
            found.add(f"{S.WINDOWS} row group {g} declares {rg.total_byte_size} bytes for {rg.num_rows} windows "
                      f"of {window} samples; the archive is damaged or crafted", True)
            return {}
        for c in range(c0, c1 + 1):
            out.setdefault(channels[c].name, []).append((g, w0 if c == c0 else 0,
                                                         w1 if c == c1 else lean.WINDOW_MASK))
        if c0 == c1:
            alone[c0] += rg.num_rows
    for ch, n in zip(channels, alone):
        if n > ch.n_windows:
            found.add(f"channel {ch.name}: the manifest declares {ch.n_samples} samples ({ch.n_windows} windows) "
                      f"but {S.WINDOWS} holds {n} windows; the archive is damaged", True)
    total = sum(c.n_windows for c in channels)
    if footer.num_rows != total:
        found.add(f"the manifest declares {total} windows but {S.WINDOWS} holds {footer.num_rows}; "
                  "the archive is damaged", True)
    return out


def lean6_groups(f: pq.ParquetFile, footer: Footer, channels: tuple[ChannelMeta, ...], window: int,
                 found: Findings, starts) -> tuple[dict[str, list[tuple[int, int, int]]], tuple]:
    """Format 6 (store/lean6.py): channel -> [(row group, first window, last window)] and each group's runs,
    from the manifest's ``groups``, after checking the columns, the declared sizes and that the groups tile
    every channel's windows exactly once."""
    schema, limit = _windows_columns(f, footer, lean6.lean6_schema, window, found)
    if schema is None:
        return {}, ()
    for g, rg in enumerate(footer.groups):
        if rg.total_byte_size > rg.num_rows * limit:
            found.add(f"{S.WINDOWS} row group {g} declares {rg.total_byte_size} bytes for {rg.num_rows} windows "
                      f"of {window} samples; the archive is damaged or crafted", True)
            return {}, ()
    total = sum(c.n_windows for c in channels)
    if footer.num_rows != total:
        found.add(f"the manifest declares {total} windows but {S.WINDOWS} holds {footer.num_rows}; "
                  "the archive is damaged", True)
        return {}, ()
    try:
        runs = lean6.runs(starts, [rg.num_rows for rg in footer.groups], [c.n_windows for c in channels])
    except ValueError as exc:
        found.add(f"{exc}; the archive is damaged", True)
        return {}, ()
    out: dict[str, list[tuple[int, int, int]]] = {}
    for g, mine in enumerate(runs):
        for c, a, b in mine:
            out.setdefault(channels[c].name, []).append((g, a, b - 1))
    return out, tuple(tuple(m) for m in runs)


def check_exceptions(f: pq.ParquetFile, footer: Footer, window: int, total_windows: int, found: Findings,
                     schema: pa.Schema) -> None:
    if f.schema_arrow.remove_metadata() != schema:
        found.add(f"{S.EXCEPTIONS} has unexpected columns; the archive is damaged", True)
    elif footer.num_rows > total_windows:
        found.add(f"{S.EXCEPTIONS} lists {footer.num_rows} windows, more than the archive's {total_windows}; "
                  "the archive is damaged", True)
    elif any(g.total_byte_size > g.num_rows * (12 * window + S.ROW_BYTES_FIXED) for g in footer.groups) or \
            not leaves_bounded(footer, {"pos": window, "bits": window}, S.ROW_BYTES_FIXED):
        found.add(f"{S.EXCEPTIONS} declares more bytes than its windows can hold; the archive is damaged or "
                  "crafted", True)


def load_model(f: pq.ParquetFile, footer: Footer, spec: ModelSpec, found: Findings, make_decoder):
    """The integer decoder (``make_decoder(arrays)``), read once and checked against the manifest's sizes;
    None if it is damaged."""
    cap = 16 * (spec.n_params + 64) + S.ROW_BYTES_FIXED
    if footer.num_rows > 2 * S.MAX_LAYERS + 3 or f.schema_arrow.remove_metadata() != S.MODEL_SCHEMA or \
            sum(g.total_byte_size for g in footer.groups) > cap or \
            not leaves_bounded(footer, {"shape": 2, "values": spec.n_params + 64}, S.ROW_BYTES_FIXED) or \
            sum(g.chunks[2].num_values for g in footer.groups) > spec.n_params + 64:
        found.add(f"{S.MODEL} is not the model the manifest describes ({spec.n_params} parameters); "
                  "the archive is damaged or crafted", True)
        return None
    try:
        t = f.read()
        arrays = {}
        for n, s, v in zip(t["name"].to_pylist(), t["shape"].to_pylist(), t["values"].to_pylist()):
            if n is None or s is None or v is None or any(x is None or x < 0 for x in s) or \
                    int(np.prod(s, dtype=object)) != len(v):
                raise ArchiveCorrupt(f"model array {n!r} does not have the shape it declares")
            arrays[n] = np.asarray(v, dtype=np.int64).reshape(s)
        decoder = make_decoder(arrays)
        if tuple(decoder.sizes) != spec.sizes:
            raise ArchiveCorrupt(f"model layer sizes {list(decoder.sizes)} differ from the manifest's "
                                 f"{list(spec.sizes)}")
        return decoder
    except (OSError, pa.ArrowException, ArchiveCorrupt, ValueError, TypeError, OverflowError) as exc:
        found.add(f"{S.MODEL} cannot be used ({str(exc)[:100]}); the archive is damaged", True)
        return None
