"""The ``index.parquet`` member: one row per channel segment, the coders in the footer's key-value metadata.

Columns: ``channel`` (string), ``segment`` (int32, from 0, time order),
``level`` (int64, the segment's mean in units of ``level_step``), ``c0`` .. ``c7`` (int8, the
learned code, one column per code value so that each is entropy-coded on its own; null past the
channel's code size), and one uint8 column per fact of
:data:`tsarchive.index.build.FACT_NAMES` (magnitudes on the log scale of
:func:`tsarchive.index.segments.log_code` against the channel's ``ref``).
Parquet's zstd stage entropy-codes the small integers.

Footer key ``tsarchive.index`` holds JSON: ``{"version": 1, "channels": [...]}``
with, per channel: ``name``, ``segment`` (samples), ``n_samples``, ``ref``,
``kind`` (``linear`` / ``nonlinear``: which coder won on held-out segments),
``code_size``, ``step``, ``level_step``, ``basis`` (base64 of int8 rows) and ``shifts``, or
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

from tsarchive.errors import ArchiveCorrupt
from tsarchive.model.intnet import IntDecoder

from .build import FACT_NAMES, ChannelIndex
from .learn import Coder

NAME = "index.parquet"
KEY = b"tsarchive.index"
VERSION = 1
ROW_GROUP = 1 << 16
MAX_CODE_SIZE = 8
CODE_COLUMNS = tuple(f"c{k}" for k in range(MAX_CODE_SIZE))
SCHEMA = pa.schema([("channel", pa.string()), ("segment", pa.int32()), ("level", pa.int64())]
                   + [(c, pa.int8()) for c in CODE_COLUMNS] + [(n, pa.uint8()) for n in FACT_NAMES])
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


def _describe(ci: ChannelIndex) -> dict:
    c = ci.coder
    out = {"name": ci.name, "segment": ci.segment, "n_samples": ci.n_samples, "ref": ci.ref, "kind": c.kind,
           "code_size": c.code_size, "step": c.step, "level_step": ci.level_step, "note": c.note, "worst": ci.worst,
           "heldout_linear": None if math.isnan(c.heldout_linear) else c.heldout_linear,
           "heldout_nonlinear": None if math.isnan(c.heldout_nonlinear) else c.heldout_nonlinear}
    if c.kind == "linear":
        out.update(basis=_pack_array(c.basis), shifts=[int(s) for s in c.shifts])
    else:
        out["decoder"] = {k: _pack_array(v) for k, v in c.decoder.to_arrays().items()}
    return out


def write(folder: Path, index: list[ChannelIndex]) -> Path:
    """Write ``index.parquet`` into ``folder`` (the staging folder of an archive)."""
    parts = []
    for ci in index:
        cols = {"channel": pa.array([ci.name] * ci.n_segments, pa.string()),
                "segment": pa.array(np.arange(ci.n_segments, dtype=np.int32)),
                "level": pa.array(ci.level.astype(np.int64)),
                **{c: (pa.array(ci.codes[:, k].astype(np.int8)) if k < ci.coder.code_size
                       else pa.nulls(ci.n_segments, pa.int8())) for k, c in enumerate(CODE_COLUMNS)}}
        cols.update({n: pa.array(ci.facts[:, k]) for k, n in enumerate(FACT_NAMES)})
        parts.append(pa.table(cols, schema=SCHEMA))
    table = pa.concat_tables(parts) if parts else SCHEMA.empty_table()
    meta = {"version": VERSION, "channels": [_describe(ci) for ci in index]}
    path = Path(folder) / NAME
    with pq.ParquetWriter(path, SCHEMA, compression="zstd", compression_level=19, store_schema=False,
                          write_statistics=["channel", "segment"], use_dictionary=["channel"],
                          column_encoding={"segment": "DELTA_BINARY_PACKED", "level": "DELTA_BINARY_PACKED"}) as w:
        w.write_table(table, row_group_size=ROW_GROUP)
        w.add_key_value_metadata({KEY: json.dumps(meta, separators=(",", ":"), sort_keys=True).encode("ascii")})
    return path


def has_index(archive) -> bool:
    """Whether the archive lists an index member (archives packed before the index have none)."""
    return NAME in archive.manifest.get("members", {})


def _number(d: dict, key: str, lo: float, hi: float, integer: bool = False):
    v = d.get(key)
    ok = isinstance(v, int) if integer else isinstance(v, (int, float))
    if isinstance(v, bool) or not ok or not (lo <= v <= hi):
        raise ArchiveCorrupt(f"{NAME}: field {key!r} is missing or out of range; the archive is damaged")
    return v


def _coder(d: dict) -> Coder:
    kind, K, S = d.get("kind"), _number(d, "code_size", 1, MAX_CODE_SIZE, True), _number(d, "segment", 1, 1 << 20, True)
    lin = d.get("heldout_linear")
    non = d.get("heldout_nonlinear")
    common = dict(heldout_linear=math.nan if lin is None else float(lin),
                  heldout_nonlinear=math.nan if non is None else float(non), note=str(d.get("note", ""))[:500])
    if kind == "linear":
        basis = _unpack_array(d.get("basis", {}))
        shifts = np.asarray(d.get("shifts", []))
        if basis.shape != (K, S) or basis.dtype != np.int8 or shifts.shape != (K,) or \
                not np.issubdtype(shifts.dtype, np.integer) or np.abs(shifts).max(initial=0) > 60:
            raise ArchiveCorrupt(f"{NAME}: channel {d.get('name')!r} has a malformed basis; the archive is damaged")
        return Coder("linear", S, K, basis=basis, shifts=shifts.astype(np.int64),
                     step=float(_number(d, "step", 2.0 ** -60, 2.0 ** 60)), **common)
    if kind == "nonlinear" and isinstance(d.get("decoder"), dict):
        dec = IntDecoder.from_arrays({k: _unpack_array(v) for k, v in d["decoder"].items()})
        if dec.code_size != K or dec.window != S:
            raise ArchiveCorrupt(f"{NAME}: channel {d.get('name')!r} has a decoder of the wrong shape")
        return Coder("nonlinear", S, K, decoder=dec, **common)
    raise ArchiveCorrupt(f"{NAME}: channel {d.get('name')!r} names an unknown coder; upgrade tsarchive or re-pack")


def read(archive, channel: str, *, facts: bool = True) -> ChannelIndex:
    """The stored index of ``channel`` (see :func:`has_index`); ArchiveCorrupt when damaged.  Without
    ``facts`` (a preview needs none) those columns are not read and come back as zeros."""
    path = Path(archive.path) / NAME
    try:
        f = pq.ParquetFile(path)
        meta = json.loads((f.metadata.metadata or {}).get(KEY, b"null"))
        cols = [c for c in SCHEMA.names if facts or c not in FACT_NAMES]
        t = f.read(columns=cols)
        t = t.filter(pc.equal(t["channel"], channel))
    except (OSError, ValueError, pa.ArrowException) as exc:
        raise ArchiveCorrupt(f"{NAME} cannot be read ({str(exc)[:80]}); the archive is damaged") from None
    if not isinstance(meta, dict) or meta.get("version") != VERSION or not isinstance(meta.get("channels"), list):
        raise ArchiveCorrupt(f"{NAME} has no readable description; the archive is damaged or newer than this tsarchive")
    d = next((c for c in meta["channels"] if isinstance(c, dict) and c.get("name") == channel), None)
    if d is None:
        raise ArchiveCorrupt(f"{NAME} has no entry for channel {channel!r}; the archive is damaged")
    coder = _coder(d)
    n = _number(d, "n_samples", 0, 1 << 62, True)
    seg = t["segment"].to_numpy()
    if len(seg) and not np.all(seg[1:] > seg[:-1]):
        t = t.take(pc.sort_indices(t["segment"]))
        seg = t["segment"].to_numpy()
    used = [c for c in t.column_names if c not in CODE_COLUMNS[coder.code_size:]]
    if len(seg) != -(-n // coder.segment) or not np.array_equal(seg, np.arange(len(seg))) or \
            any(t[c].null_count for c in used):
        raise ArchiveCorrupt(f"{NAME}: channel {channel!r} is missing segment rows; the archive is damaged")
    codes = np.stack([t[c].to_numpy() for c in CODE_COLUMNS[:coder.code_size]], axis=1).astype(np.int16) \
        if len(seg) else np.zeros((0, coder.code_size), np.int16)
    facts = np.stack([t[n].to_numpy() for n in FACT_NAMES], axis=1).astype(np.uint8) if len(seg) and facts else \
        np.zeros((len(seg), len(FACT_NAMES)), np.uint8)
    return ChannelIndex(channel, coder.segment, n, float(_number(d, "ref", 0.0, 1e300)), coder,
                        t["level"].to_numpy().astype(np.int64), float(_number(d, "level_step", 2.0 ** -1000, 1e300)),
                        codes, facts, float(_number(d, "worst", 0.0, 1e300)))
