"""The index member: range-coded columns of the segment table and the coders' description.

Format 6 stores it as ``index.zst`` (:func:`to_bytes`: one zstd frame of the description's JSON, the
rows, and their tables and payloads, without Parquet framing), format 5 as ``index.parquet``
(:func:`parquet_bytes`; both are read).  What they hold:

The index of a channel is a table of one row per segment: ``level`` (the
segment's mean in units of ``level_step``), the code ``c0`` .. ``c{K-1}``
(int8 range) and the facts :data:`tsarchive.index.build.FACT_NAMES` (uint8,
magnitudes on the log scale of :func:`tsarchive.index.segments.log_code`
against the channel's ``ref``, counts against 1; a fact of ``OPTIONAL_FACTS``
came later and reads as zeros from archives without its column).  Each of those columns (a *part*) is stored
in blocks of :data:`BLOCK` segments, one Parquet row per (channel, part,
block): ``channel``, ``part``, ``first`` (first segment), ``n``, ``table``
(a :class:`tsarchive.entropy.FreqTable`'s bytes) and ``payload`` (the block's
values range coded with it, :func:`tsarchive.entropy.encode`; levels as the
first value and then differences).  Range coding with a table per column
comes within a few percent of each column's order-0 entropy, where zstd on
small int8 columns spent about half as much again.

Footer key ``tsarchive.index`` holds JSON: ``{"version": 1, "channels": [...]}``
with, per channel: ``name``, ``segment`` (samples), ``n_samples``, ``ref``,
``kind`` (``linear`` / ``nonlinear``: which coder won on held-out segments; ``facts``: no codes, the
byte budget kept only levels and facts, ``code_size`` 0; optional on reading, as the member is),
``code_size``, ``step``, ``level_step``, ``basis`` (int8 rows as first value and differences, range coded: ``shape``, ``table``, ``payload`` in base64) and ``shifts``, or
``decoder`` (the integer decoder's arrays, base64 of little-endian integers),
``heldout_linear``/``heldout_nonlinear`` (normalised mean squared errors, null
where not tried), ``note``, ``worst`` (the code-only preview's worst error,
channel units, measured at pack time).

The member is optional: archives without it read as before.  Nothing is
unpickled; every field is checked and a bad one raises ArchiveCorrupt.
"""

from __future__ import annotations

import base64
import binascii
import json
import math
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import zstandard

from tsarchive import entropy
from tsarchive.errors import ArchiveCorrupt
from tsarchive.model.intnet import IntDecoder
from tsarchive.store.members import Findings, open_parquet

from .budget import fit_index, staged_bytes
from .build import FACT_NAMES, OPTIONAL_FACTS, ChannelIndex
from .learn import Coder

NAME = "index.zst"            # format 6 (to_bytes); format 5 wrote PARQUET_NAME
PARQUET_NAME = "index.parquet"
MAX_BYTES = 1 << 30          # what an index.zst may declare it decompresses to
KEY = b"tsarchive.index"
VERSION = 1
MAX_CODE_SIZE = 8
CODE_COLUMNS = tuple(f"c{k}" for k in range(MAX_CODE_SIZE))
SCHEMA = pa.schema([("channel", pa.string()), ("part", pa.string()), ("first", pa.int64()), ("n", pa.int32()),
                    ("table", pa.binary()), ("payload", pa.binary())])
BLOCK = 1 << 16              # segments per row: a row's part decodes on its own
_INT_DTYPES = {"int8": np.int8, "int16": np.int16, "int64": np.int64}


def _pack_array(a: np.ndarray) -> dict:
    a = np.asarray(a)
    kind = "int16" if a.dtype == np.int16 else ("int8" if a.dtype == np.int8 else "int64")
    data = np.ascontiguousarray(a, dtype=np.dtype(_INT_DTYPES[kind]).newbyteorder("<")).tobytes()
    return {"dtype": kind, "shape": list(a.shape), "data": base64.b64encode(data).decode("ascii")}


def _unpack_array(d) -> np.ndarray:
    try:
        dt = np.dtype(_INT_DTYPES[d["dtype"]]).newbyteorder("<")
        shape = tuple(int(s) for s in d["shape"])
        raw = base64.b64decode(d["data"], validate=True)
        a = np.frombuffer(raw, dtype=dt)
        return a.reshape(shape).astype(_INT_DTYPES[d["dtype"]])
    except (KeyError, TypeError, ValueError, binascii.Error):
        raise ArchiveCorrupt(f"{NAME}: a stored array is malformed; the archive is damaged") from None


def _pack_rows(q: np.ndarray) -> dict:
    """int8 rows (K, S) as their first value and differences along S, range coded (smooth rows: small)."""
    v = np.concatenate([q[:, :1], np.diff(q.astype(np.int64), axis=1)], axis=1).ravel()
    table = entropy.build_table(v)
    return {"shape": list(q.shape), "table": base64.b64encode(table.to_bytes()).decode("ascii"),
            "payload": base64.b64encode(entropy.encode(v, table)).decode("ascii")}


def _unpack_rows(d) -> np.ndarray:
    try:
        K, S = (int(x) for x in d["shape"])
        if not (1 <= K <= MAX_CODE_SIZE and 1 <= S <= 1 << 16):
            raise ValueError
        table = entropy.FreqTable.from_bytes(base64.b64decode(d["table"], validate=True))
        v = entropy.decode(base64.b64decode(d["payload"], validate=True), K * S, table, strict=False)
    except (KeyError, TypeError, ValueError, binascii.Error):
        raise ArchiveCorrupt(f"{NAME}: a stored basis is malformed; the archive is damaged") from None
    q = np.cumsum(v.reshape(K, S), axis=1)
    if q.min() < -127 or q.max() > 127:
        raise ArchiveCorrupt(f"{NAME}: a stored basis is out of range; the archive is damaged")
    return q.astype(np.int8)


def _describe(ci: ChannelIndex) -> dict:
    c = ci.coder
    out = {"name": ci.name, "segment": ci.segment, "n_samples": ci.n_samples, "ref": ci.ref, "kind": c.kind,
           "code_size": c.code_size, "step": c.step, "level_step": ci.level_step, "note": c.note, "worst": ci.worst,
           "heldout_linear": None if math.isnan(c.heldout_linear) else c.heldout_linear,
           "heldout_nonlinear": None if math.isnan(c.heldout_nonlinear) else c.heldout_nonlinear}
    if c.kind == "linear":
        out.update(basis=_pack_rows(c.basis), shifts=[int(s) for s in c.shifts])
    elif c.kind == "nonlinear":
        out["decoder"] = {k: _pack_array(v) for k, v in c.decoder.to_arrays().items()}
    return out


def _parts(ci: ChannelIndex) -> dict[str, np.ndarray]:
    out = {"level": ci.level.astype(np.int64)}
    out.update({c: ci.codes[:, k].astype(np.int64) for k, c in enumerate(CODE_COLUMNS[:ci.coder.code_size])})
    out.update({n: ci.facts[:, k].astype(np.int64) for k, n in enumerate(FACT_NAMES)})
    return out


def _block_values(part: str, v: np.ndarray) -> np.ndarray:
    """What is coded for a block: levels as their first value and then differences, the rest as they are."""
    return np.concatenate([v[:1], np.diff(v)]) if part == "level" and len(v) else v


def write(folder: Path, index: list[ChannelIndex], *, fit: bool = True) -> Path | None:
    """Write ``index.parquet`` into ``folder`` (the staging folder of an archive), first made to fit its
    byte budget against the bytes already staged there (:mod:`tsarchive.index.budget`; ``fit=False``:
    as built).  Nothing is written (None) when not even the coarsest index fits."""
    made: list = [None, b""]                 # the last index encoded and its bytes: the one that fits is not encoded twice

    def encoded(ix: list[ChannelIndex]) -> bytes:
        if made[0] is None or len(made[0]) != len(ix) or any(a is not b for a, b in zip(made[0], ix)):
            made[:] = [list(ix), to_bytes(ix)]
        return made[1]
    if fit:
        index = fit_index(index, staged_bytes(folder, NAME), encoded)
    if not index:
        return None
    path = Path(folder) / NAME
    path.write_bytes(encoded(index))
    return path


def to_bytes(index: list[ChannelIndex]) -> bytes:
    """The member's bytes for ``index`` (the same bytes for the same index): format 6's ``index.zst``, one
    zstd frame (level 19, content size in its header) of ``<4-byte little-endian length> <JSON> <blobs>``:
    the JSON is ``{"version": 2, "channels": [...], "rows": [[channel, part, first, n, table bytes,
    payload bytes], ...]}`` (the columns of :data:`SCHEMA`) and the rows' tables and payloads follow it,
    concatenated in row order.  No Parquet framing: a small index fits its byte budget."""
    t = _rows(index)
    blobs = [b for pair in zip(t["table"], t["payload"]) for b in pair]
    rows = [[c, p, f, n, len(a), len(b)] for c, p, f, n, a, b in zip(*(t[k] for k in SCHEMA.names))]
    meta = json.dumps({"version": 2, "channels": [_describe(ci) for ci in index], "rows": rows},
                      separators=(",", ":"), sort_keys=True).encode("ascii")
    raw = len(meta).to_bytes(4, "little") + meta + b"".join(blobs)
    return zstandard.ZstdCompressor(level=19, write_content_size=True).compress(raw)


def parquet_bytes(index: list[ChannelIndex]) -> bytes:
    """The ``index.parquet`` member of format 5 for ``index`` (kept to make and read format-5 archives)."""
    rows = _rows(index)
    meta = {"version": VERSION, "channels": [_describe(ci) for ci in index]}
    sink = pa.BufferOutputStream()
    # no statistics and no dictionaries: the reader reads the whole (small) member, and both cost footer bytes
    with pq.ParquetWriter(sink, SCHEMA, compression="zstd", compression_level=19, store_schema=False,
                          write_statistics=False, use_dictionary=False) as w:
        w.write_table(pa.table(rows, schema=SCHEMA))
        w.add_key_value_metadata({KEY: json.dumps(meta, separators=(",", ":"), sort_keys=True).encode("ascii")})
    return sink.getvalue().to_pybytes()


def _rows(index: list[ChannelIndex]) -> dict[str, list]:
    """The index's rows (columns of :data:`SCHEMA`), each part of each channel in blocks of :data:`BLOCK`."""
    rows: dict[str, list] = {n: [] for n in SCHEMA.names}
    for ci in index:
        for part, v in _parts(ci).items():
            blocks = [_block_values(part, v[a:a + BLOCK]) for a in range(0, len(v), BLOCK)]
            table = entropy.build_table(np.concatenate(blocks) if blocks else np.zeros(1, np.int64))
            for k, vals in enumerate(blocks):
                rows["channel"].append(ci.name)
                rows["part"].append(part)
                rows["first"].append(k * BLOCK)
                rows["n"].append(len(vals))
                rows["table"].append(table.to_bytes())
                rows["payload"].append(entropy.encode(vals, table))
    return rows


def has_index(archive) -> bool:
    """Whether the archive lists an index member (archives packed before the index have none)."""
    listed = archive.manifest.get("members", {})
    return NAME in listed or PARQUET_NAME in listed


def _load_zst(path: Path) -> tuple[dict, pa.Table]:
    """(description, rows) of a format-6 ``index.zst``, its declared size capped before decompressing."""
    try:
        blob = path.read_bytes()
        size = zstandard.frame_content_size(blob)
        if not 4 <= size <= MAX_BYTES:
            raise ValueError(f"declares {size} bytes")
        raw = zstandard.ZstdDecompressor().decompress(blob, max_output_size=size)
        n = int.from_bytes(raw[:4], "little")
        meta = json.loads(raw[4:4 + n])
        rows, at = {k: [] for k in SCHEMA.names}, 4 + n
        for c, p, f, k, lt, lp in meta["rows"]:
            if not all(type(v) is int and v >= 0 for v in (f, k, lt, lp)) or at + lt + lp > len(raw):
                raise ValueError("a row runs past the member")
            for key, v in zip(SCHEMA.names, (c, p, f, k, raw[at:at + lt], raw[at + lt:at + lt + lp])):
                rows[key].append(v)
            at += lt + lp
        return meta, pa.table(rows, schema=SCHEMA)
    except (OSError, KeyError, TypeError, ValueError, zstandard.ZstdError, pa.ArrowException) as exc:
        raise ArchiveCorrupt(f"{NAME} cannot be read ({str(exc)[:80]}); the archive is damaged") from None


def _number(d: dict, key: str, lo: float, hi: float, integer: bool = False):
    v = d.get(key)
    ok = isinstance(v, int) if integer else isinstance(v, (int, float))
    if isinstance(v, bool) or not ok or not (lo <= v <= hi):
        raise ArchiveCorrupt(f"{NAME}: field {key!r} is missing or out of range; the archive is damaged")
    return v


def _coder(d: dict) -> Coder:
    kind, S = d.get("kind"), _number(d, "segment", 1, 1 << 20, True)
    K = _number(d, "code_size", 0 if kind == "facts" else 1, 0 if kind == "facts" else MAX_CODE_SIZE, True)
    lin = d.get("heldout_linear")
    non = d.get("heldout_nonlinear")
    common = dict(heldout_linear=math.nan if lin is None else float(lin),
                  heldout_nonlinear=math.nan if non is None else float(non), note=str(d.get("note", ""))[:500])
    if kind == "linear":
        basis = _unpack_rows(d.get("basis", {}))
        shifts = np.asarray(d.get("shifts", []))
        if basis.shape != (K, S) or basis.dtype != np.int8 or shifts.shape != (K,) or \
                not np.issubdtype(shifts.dtype, np.integer) or np.abs(shifts).max(initial=0) > 60:
            raise ArchiveCorrupt(f"{NAME}: channel {d.get('name')!r} has a malformed basis; the archive is damaged")
        return Coder("linear", S, K, basis=basis, shifts=shifts.astype(np.int64),
                     step=float(_number(d, "step", 2.0 ** -60, 2.0 ** 60)), **common)
    if kind == "facts":
        return Coder("facts", S, 0, **common)
    if kind == "nonlinear" and isinstance(d.get("decoder"), dict):
        dec = IntDecoder.from_arrays({k: _unpack_array(v) for k, v in d["decoder"].items()})
        if dec.code_size != K or dec.window != S:
            raise ArchiveCorrupt(f"{NAME}: channel {d.get('name')!r} has a decoder of the wrong shape")
        return Coder("nonlinear", S, K, decoder=dec, **common)
    raise ArchiveCorrupt(f"{NAME}: channel {d.get('name')!r} names an unknown coder; upgrade tsarchive or re-pack")


def read(archive, channel: str, *, facts: bool = True) -> ChannelIndex:
    """The stored index of ``channel`` (see :func:`has_index`); ArchiveCorrupt when damaged.  Without
    ``facts`` (a preview needs none) those columns are not read and come back as zeros."""
    folder = Path(archive.path)
    if (folder / NAME).is_file():                     # format 6
        meta, t = _load_zst(folder / NAME)
        t = t.filter(pc.equal(t["channel"], channel))
        versions = (VERSION + 1,)
    else:                                             # format 5: index.parquet
        f, footer = open_parquet(folder, PARQUET_NAME, Findings(strict=True))   # footer checked first
        try:
            meta = json.loads(footer.key_value.get(KEY, b"null"))
            t = f.read(use_threads=False)                 # a small file: threads cost more than they save
            t = t.filter(pc.equal(t["channel"], channel))
        except (OSError, ValueError, KeyError, pa.ArrowException) as exc:   # KeyError: a renamed column
            raise ArchiveCorrupt(f"{PARQUET_NAME} cannot be read ({str(exc)[:80]}); the archive is damaged") \
                from None
        versions = (VERSION,)
    if not isinstance(meta, dict) or meta.get("version") not in versions or not isinstance(meta.get("channels"), list):
        raise ArchiveCorrupt(f"{NAME} has no readable description; the archive is damaged or newer than this tsarchive")
    d = next((c for c in meta["channels"] if isinstance(c, dict) and c.get("name") == channel), None)
    if d is None:
        raise ArchiveCorrupt(f"{NAME} has no entry for channel {channel!r}; the archive is damaged")
    coder = _coder(d)
    n = _number(d, "n_samples", 0, 1 << 62, True)
    n_seg = -(-n // coder.segment)
    wanted = ["level", *CODE_COLUMNS[:coder.code_size]] + (list(FACT_NAMES) if facts else [])
    stored = set(t["part"].to_pylist())
    got = {p: np.zeros(n_seg, np.int64) if p in OPTIONAL_FACTS and p not in stored else
           _decode_part(t, channel, p, n_seg) for p in wanted}     # a fact added later: zeros where absent
    codes = np.stack([got[c] for c in CODE_COLUMNS[:coder.code_size]], axis=1) if n_seg and coder.code_size else \
        np.zeros((n_seg, coder.code_size))
    if codes.size and (codes.min() < -127 or codes.max() > 127) or \
            facts and any(got[p].size and (got[p].min() < 0 or got[p].max() > 255) for p in FACT_NAMES):
        raise ArchiveCorrupt(f"{NAME}: channel {channel!r} has codes or facts out of range; the archive is damaged")
    facts = np.stack([got[p] for p in FACT_NAMES], axis=1).astype(np.uint8) if facts and n_seg else \
        np.zeros((n_seg, len(FACT_NAMES)), np.uint8)
    return ChannelIndex(channel, coder.segment, n, float(_number(d, "ref", 0.0, 1e300)), coder,
                        got["level"], float(_number(d, "level_step", 2.0 ** -1000, 1e300)),
                        codes.astype(np.int16), facts, float(_number(d, "worst", 0.0, 1e300)))


def _decode_part(t: pa.Table, channel: str, part: str, n_seg: int) -> np.ndarray:
    """One part's values over every segment of the channel, from its blocks (checked to tile 0..n_seg-1)."""
    mask = pc.equal(t["part"], part)
    sel = t.filter(mask)
    firsts = sel["first"].to_numpy()
    order = np.argsort(firsts, kind="stable")
    counts = sel["n"].to_numpy()[order]
    if sel.num_rows != -(-n_seg // BLOCK) or not np.array_equal(firsts[order], np.arange(len(order)) * BLOCK) or \
            int(counts.sum()) != n_seg or any(c.null_count for c in sel.columns):
        raise ArchiveCorrupt(f"{NAME}: channel {channel!r} is missing {part} rows; the archive is damaged")
    out = np.empty(n_seg, dtype=np.int64)
    tables, payloads = sel["table"].to_pylist(), sel["payload"].to_pylist()
    for i, k in enumerate(order.tolist()):
        # strict=False: a payload that is not the canonical encoding still decodes (the member's SHA-256 in
        # the manifest is what catches damage); structural damage raises either way
        v = entropy.decode(payloads[k], int(counts[i]), entropy.FreqTable.from_bytes(tables[k]), strict=False)
        out[k * BLOCK:k * BLOCK + len(v)] = np.cumsum(v) if part == "level" else v
    return out
