"""Entropy coding of integer residual windows: range coding (``constriction``) or zstd.

Batch API (use it in loops): :func:`encode_many` / :func:`decode_many`.

Every window (a 1-D int64 array) is coded on its own, so any window decodes
without the others, given one per-channel :class:`FreqTable`.

Values become tokens plus raw bits and tables are integer frequencies summing
to 2**24: see :mod:`tsarchive.entropy_table` (its API is re-exported here).

Payload ("range" coder).  Tokens, then raw bits in <=16-bit uniform chunks, are range coded
(the stream of constriction's RangeEncoder: 32-bit words, 64-bit state); the words are
written big-endian and the stream is terminated by the shortest byte string
that selects a point of the final interval, trailing zero bytes dropped (the
decoder reads zeros past the end).  Framing is about 3-4 bits per window; a
window of values all equal to ``center`` is ``b""``.  Decoding raises
:class:`ArchiveCorrupt` on structural damage and, by default (``strict``), on
any payload that is not the canonical encoding of what it decodes to; the
code has no redundancy, so callers keep a per-window CRC
(:mod:`tsarchive.checksum`) to catch the rest.

Coding runs in compiled batch loops (:mod:`tsarchive.rangecoder`, numba),
byte for byte the stream constriction writes and reads one window per call;
:func:`encode_reference` / :func:`decode_reference` are that constriction path,
used without numba and as the tests' reference.

Coders.  :class:`RangeCoder` and :class:`ZstdCoder` follow the codec contract of
:mod:`tsarchive.codecs` (``id``, ``encode``, ``decode``, ``get_config``/``from_config``) and are
registered there as kind ``coder``; beside it they have the batch forms ``encode_many(windows)`` /
``decode_many(payloads, lengths)`` and ``cost_bits(values)``.  A range coder's config is its table's
bytes in base64, exactly as a channel's table entry in ``manifest.json`` holds them.
"""

from __future__ import annotations

import base64
import binascii
from dataclasses import dataclass
from typing import ClassVar, Sequence

import numpy as np

from tsarchive.entropy_table import (  # noqa: F401  (re-exported: the coding API lives here)
    PRECISION, TOTAL, FreqTable, _as_int64, _corrupt, _unzigzag, _zigzag, build_table, n_tokens,
    order0_entropy_bits, tokenize)
from tsarchive import codecs, rangecoder
from tsarchive.zstdcoder import ZstdCoder  # noqa: F401  (re-exported beside RangeCoder)

CHUNK_BITS = 16
_MAX_N = (1 << 31) - 1
_M64 = (1 << 64) - 1
_U64 = np.uint64


def _chunk_layout(nbits: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Raw fields -> <=16-bit chunks: (owning field, bit shift, uniform size)."""
    if not len(nbits) or nbits.max() <= CHUNK_BITS:  # common case: at most one chunk per field
        owner = np.flatnonzero(nbits)
        return owner, np.zeros(len(owner), _U64), (np.int64(1) << nbits[owner]).astype(np.int32)
    nch = (nbits + CHUNK_BITS - 1) // CHUNK_BITS
    owner = np.repeat(np.arange(len(nbits)), nch)
    shift = (np.arange(len(owner)) - np.repeat(np.cumsum(nch) - nch, nch)) * CHUNK_BITS
    sizes = np.int64(1) << np.minimum(CHUNK_BITS, nbits[owner] - shift)
    return owner, shift.astype(_U64), sizes.astype(np.int32)


# ---------------------------------------------------------------- range coding

def _seal(enc) -> bytes:
    """Words big-endian + the shortest bytes that pick a point of the final interval."""
    words = enc.get_compressed()
    if not len(words):
        return b""
    pos, (lower, size) = enc.pos()
    head = words[:pos].astype(">u4").tobytes()
    if lower + 0xFFFFFFFF > _M64:  # constriction's own seal point carried: keep its words
        return (head + words[pos:].astype(">u4").tobytes()).rstrip(b"\0")
    hi = min(lower + size - 1, _M64)
    k = 0
    while True:  # k = 8 (q = lower) always fits
        s = 64 - 8 * k
        q = -((-lower) >> s) << s  # lower rounded up to a multiple of 2**s
        if q <= hi:
            return (head + (q >> s).to_bytes(k, "big")).rstrip(b"\0")
        k += 1


def _flatten(windows) -> tuple[np.ndarray, np.ndarray]:
    """(all values int64, window bounds [0, n0, n0+n1, ...]) of a 2-D array or a list."""
    if isinstance(windows, np.ndarray) and windows.ndim == 2:
        return _as_int64(windows.reshape(-1)), np.arange(windows.shape[0] + 1) * windows.shape[1]
    parts = [_as_int64(w) for w in windows]
    bounds = np.concatenate(([0], np.cumsum([len(p) for p in parts], dtype=np.int64)))
    return (np.concatenate(parts) if parts else np.zeros(0, np.int64)), bounds


def _chunk_bounds(tok, bounds, nbits, table):
    """Per window, the range of its raw chunks in the flat chunk arrays."""
    nbig = np.concatenate(([0], np.cumsum(tok >= (1 << table.direct_bits))))[bounds]
    nch = np.concatenate(([0], np.cumsum((nbits + CHUNK_BITS - 1) // CHUNK_BITS)))
    return nch[nbig]


def _code(tok, raw, nbits, bounds, table) -> list[bytes]:
    import constriction

    cb = None
    if len(nbits):
        owner, shift, sizes = _chunk_layout(nbits)
        chunks = ((raw[owner] >> shift) & _U64(0xFFFF)).astype(np.int32)
        cb = _chunk_bounds(tok, bounds, nbits, table).tolist()
    model, uniform, out = table.model, constriction.stream.model.Uniform(), []
    new_encoder = constriction.stream.queue.RangeEncoder
    b = bounds.tolist()
    for i in range(len(b) - 1):
        enc = new_encoder()
        if b[i + 1] > b[i]:
            enc.encode(tok[b[i]:b[i + 1]], model)
        if cb is not None and cb[i + 1] > cb[i]:
            enc.encode(chunks[cb[i]:cb[i + 1]], uniform, sizes[cb[i]:cb[i + 1]])
        out.append(_seal(enc))
    return out


def encode_many(windows, table: FreqTable) -> list[bytes]:
    """Code each window (rows of a 2-D array, or a list of 1-D arrays) on its own.

    Same bytes as :func:`encode` per window, much faster per window.
    """
    if not rangecoder.available():
        return encode_reference(windows, table)
    values, bounds = _flatten(windows)
    buf, ob = encode_flat(values, bounds, table)
    raw = buf.tobytes()
    ob = ob.tolist()
    return [raw[ob[i]:ob[i + 1]] for i in range(len(ob) - 1)]


def encode_reference(windows, table: FreqTable) -> list[bytes]:
    """:func:`encode_many` through constriction's range coder, one window per call: the fallback
    without numba, and the reference the compiled coder is tested against."""
    values, bounds = _flatten(windows)
    return _code(*tokenize(values, table), bounds, table)


def encode_flat(values: np.ndarray, bounds: np.ndarray, table: FreqTable) -> tuple[np.ndarray, np.ndarray]:
    """Compiled batch coding: window ``w`` is ``values[bounds[w]:bounds[w+1]]``; returns
    (all payload bytes uint8, byte bounds int64).  Needs numba (:func:`rangecoder.available`)."""
    c = _compiled(table)
    return rangecoder.encode(np.ascontiguousarray(values, np.int64), np.ascontiguousarray(bounds, np.int64),
                             table.center, table.direct_bits, table.mantissa_bits, c.cum, c.freq)


@dataclass(frozen=True)
class _Compiled:
    cum: np.ndarray
    freq: np.ndarray
    lut: np.ndarray


def _compiled(table: FreqTable) -> _Compiled:
    """The table as the kernels take it (cached on the table)."""
    c = table.__dict__.get("_rc")
    if c is None:
        f = table.freq_array.astype(np.uint64)
        cum = np.concatenate(([0], np.cumsum(f))).astype(np.uint64)
        c = _Compiled(cum, f, rangecoder.lookup_table(cum))
        object.__setattr__(table, "_rc", c)
    return c


def encode(values, table: FreqTable) -> bytes:
    """Code one window (1-D integer array, any int64 values) under ``table``."""
    return encode_many([values], table)[0]


def decode_many(payloads: Sequence[bytes], lengths, table: FreqTable, strict: bool = True) -> list[np.ndarray]:
    """Inverse of :func:`encode_many`; ``lengths`` is one int or one per payload.

    Never crashes or hangs on garbage: it raises ArchiveCorrupt (naming the
    first bad window's index) or returns values.  ``strict`` (+30..60 %
    time) re-encodes the result and requires the identical payload, which
    catches most truncation, extension, wrong lengths and wrong tables.  A
    range-coded payload has no redundancy, so damage that keeps the length
    usually decodes to other values: the per-window CRC must catch that.
    """
    lengths = np.broadcast_to(np.asarray(lengths, dtype=np.int64), (len(payloads),))
    if not rangecoder.available():
        return decode_reference(payloads, lengths, table, strict)
    payloads = [bytes(p) for p in payloads]
    sizes = np.fromiter((len(p) for p in payloads), np.int64, len(payloads))
    ends = np.cumsum(sizes)
    buf = np.frombuffer(b"".join(payloads), np.uint8)
    values = decode_flat(buf, ends - sizes, ends, lengths, table, strict)
    return np.split(values, np.cumsum(lengths)[:-1])


def decode_flat(buf: np.ndarray, starts: np.ndarray, ends: np.ndarray, lengths, table: FreqTable,
                strict: bool = True) -> np.ndarray:
    """Compiled batch decoding of windows ``buf[starts[w]:ends[w]]`` of ``lengths[w]`` values;
    returns all values (int64, concatenated).  Same checks as :func:`decode_many`."""
    starts = np.ascontiguousarray(starts, np.int64)
    ends = np.ascontiguousarray(ends, np.int64)
    lengths = np.broadcast_to(np.asarray(lengths, dtype=np.int64), (len(starts),))
    if len(starts) and not (starts.min() >= 0 and ends.max() <= len(buf) and (ends >= starts).all()):
        raise _corrupt("range-coded window bounds fall outside the payload bytes")
    if not rangecoder.available():
        parts = decode_reference([bytes(buf[a:b]) for a, b in zip(starts.tolist(), ends.tolist())], lengths, table,
                                 strict)
        return np.concatenate(parts) if parts else np.zeros(0, np.int64)
    if len(lengths) and not (lengths.min() >= 0 and lengths.max() <= _MAX_N):
        raise _corrupt(f"window lengths {lengths.min()}..{lengths.max()} are out of range")
    nonempty = np.flatnonzero(ends > starts)
    zero_end = nonempty[buf[ends[nonempty] - 1] == 0] if len(nonempty) else nonempty
    if len(zero_end):
        raise _corrupt(f"range-coded window {int(zero_end[0])} ends in a zero byte")
    bounds = np.concatenate(([0], np.cumsum(lengths))).astype(np.int64)
    c = _compiled(table)
    values, bad = rangecoder.decode(np.ascontiguousarray(buf, np.uint8), starts, ends, bounds, table.center,
                                    table.direct_bits, table.mantissa_bits, c.cum, c.freq, c.lut)
    if bad >= 0:
        raise _corrupt(f"range-coded window {bad} cannot be decoded (its quantile falls outside the table)")
    if strict:
        again, ob = encode_flat(values, bounds, table)
        size = ends - starts
        same = ob[1:] - ob[:-1] == size
        if same.all() and len(starts):
            contiguous = np.array_equal(starts[1:], ends[:-1])
            src = buf[starts[0]:ends[-1]] if contiguous else \
                np.concatenate([buf[a:b] for a, b in zip(starts.tolist(), ends.tolist())])
            diff = np.flatnonzero(again != src)
            same[np.searchsorted(ob, diff, side="right") - 1] = False
        if not same.all():
            raise _corrupt(f"range-coded window {int(np.flatnonzero(~same)[0])} is not a valid payload "
                           "for its table and length")
    return values


def decode_reference(payloads: Sequence[bytes], lengths, table: FreqTable, strict: bool = True) -> list[np.ndarray]:
    """:func:`decode_many` through constriction, one window per call (fallback without numba, and the
    reference the compiled coder is tested against)."""
    import constriction

    lengths = np.broadcast_to(np.asarray(lengths, dtype=np.int64), (len(payloads),))
    if len(lengths) and not (lengths.min() >= 0 and lengths.max() <= _MAX_N):
        raise _corrupt(f"window lengths {lengths.min()}..{lengths.max()} are out of range")
    bounds = np.concatenate(([0], np.cumsum(lengths)))
    tok = np.zeros(int(bounds[-1]), np.int32)
    payloads = [bytes(p) for p in payloads]
    if any(p.endswith(b"\0") for p in payloads):
        raise _corrupt("a range-coded window ends in a zero byte")
    nw = [(len(p) + 3) // 4 for p in payloads]
    wb = np.concatenate(([0], np.cumsum(nw, dtype=np.int64))).tolist()
    words = np.frombuffer(b"".join(p + b"\0" * (-len(p) % 4) for p in payloads), ">u4").astype(np.uint32)
    model, decoders, b = table.model, [], bounds.tolist()
    new_decoder = constriction.stream.queue.RangeDecoder
    for i in range(len(payloads)):
        try:
            decoders.append(new_decoder(words[wb[i]:wb[i + 1]]))
            if b[i + 1] > b[i]:
                tok[b[i]:b[i + 1]] = decoders[-1].decode(model, b[i + 1] - b[i])
        except Exception as exc:  # constriction raises ValueError/AssertionError on bad data
            raise _corrupt(f"range-coded window {i} cannot be decoded ({exc})") from None
    d, m = table.direct_bits, table.mantissa_bits
    big = tok >= (1 << d)
    t = tok[big].astype(np.int64) - (1 << d)
    e = (t >> m) + d
    nbits = e - m
    raw = np.zeros(len(nbits), _U64)
    if len(nbits):
        owner, shift, sizes = _chunk_layout(nbits)
        chunks = np.zeros(len(sizes), np.int32)
        cb = _chunk_bounds(tok, bounds, nbits, table)
        uniform = constriction.stream.model.Uniform()
        for i in np.flatnonzero(cb[1:] > cb[:-1]).tolist():
            try:
                chunks[cb[i]:cb[i + 1]] = decoders[i].decode(uniform, sizes[cb[i]:cb[i + 1]])
            except Exception as exc:  # constriction raises ValueError/AssertionError on bad data
                raise _corrupt(f"range-coded window {i} cannot be decoded ({exc})") from None
        if shift.any():  # some field spans several chunks
            np.add.at(raw, owner, chunks.astype(_U64) << shift)
        else:
            raw[owner] = chunks
        u = tok.astype(_U64)
        u[big] = (_U64(1) << e.astype(_U64)) | ((t & ((1 << m) - 1)).astype(_U64) << nbits.astype(_U64)) | raw
        values = _unzigzag(u, table.center)
    else:
        values = table.direct_values[tok]
    if strict:
        for i, (a, b) in enumerate(zip(_code(tok, raw, nbits, bounds, table), payloads)):
            if a != b:
                raise _corrupt(f"range-coded window {i} is not a valid payload for its table and length")
    return np.split(values, bounds[1:-1])


def decode(payload: bytes, n: int, table: FreqTable, strict: bool = True) -> np.ndarray:
    """Inverse of :func:`encode`: ``n`` int64 values, or ArchiveCorrupt (see :func:`decode_many`)."""
    return decode_many([payload], n, table, strict)[0]


def cost_bits(values, table: FreqTable) -> float:
    """Ideal code length of ``values`` under ``table`` in bits (no framing)."""
    tok, _, nbits = tokenize(values, table)
    return float(table.token_cost[tok].sum() + nbits.sum())


# ---------------------------------------------------------------- coder registry

@dataclass(frozen=True)
class RangeCoder:
    """Range coding under a per-channel :class:`FreqTable` (see module docstring)."""

    table: FreqTable
    id: ClassVar[str] = "range"

    def encode(self, values) -> bytes:
        return encode(values, self.table)

    def decode(self, payload: bytes, n: int) -> np.ndarray:
        return decode(payload, n, self.table)

    def encode_many(self, windows) -> list[bytes]:
        return encode_many(windows, self.table)

    def decode_many(self, payloads: Sequence[bytes], lengths) -> list[np.ndarray]:
        return decode_many(payloads, lengths, self.table)

    def cost_bits(self, values) -> float:
        return cost_bits(values, self.table)

    def decode_flat(self, buf: np.ndarray, starts: np.ndarray, ends: np.ndarray, lengths,
                    strict: bool = True) -> np.ndarray:
        return decode_flat(buf, starts, ends, lengths, self.table, strict=strict)

    def get_config(self) -> dict:
        return {"freqs": base64.b64encode(self.table.to_bytes()).decode("ascii")}

    @classmethod
    def from_config(cls, config: dict) -> "RangeCoder":
        try:
            freqs = base64.b64decode(config["freqs"], validate=True)
        except (KeyError, TypeError, ValueError, binascii.Error):
            raise _corrupt("an entropy table entry is malformed") from None
        return cls(FreqTable.from_bytes(freqs))

    @classmethod
    def fit(cls, samples) -> "RangeCoder":
        return cls(build_table(samples))


codecs.register("coder", RangeCoder.id, RangeCoder.from_config)
