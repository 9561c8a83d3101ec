"""The classic fallback: integers -> difference -> the best general-purpose compressor ("classic" coder).

What a technician would do by hand, as a coder: the int64 values (samples on
the grid, or residuals) are differenced ``order`` times (0, 1 or 2; ``r[t] =
q[t] - q[t-1]`` with ``q[-1] = 0``, applied again for 2: wrap-around int64,
so the running sums undo it exactly modulo 2**64), or for order -1 summed once
(``r[t] = q[0] + ... + q[t]``, undone by one difference: residuals of the
previous-sample predictor back to the samples, the "quantized" baseline of a
channel coded by that predictor), stored in the narrowest of
1, 2, 4 or 8 bytes little-endian that holds them, optionally byte-shuffled
(byte plane k = byte k of every value, as Blosc's shuffle filter), and
compressed by zstd level 19, xz (LZMA2, ``preset 9 | PRESET_EXTREME``, the dictionary cut to the input) or
bzip2 level 9.  :meth:`ClassicCoder.encode` tries every combination of its
``compressors``, ``orders`` and ``shuffles`` and keeps the smallest, so on any
input it is at most the best of them plus its header.  A coder of one
combination (what the packer stores for a channel, :mod:`.fallback`) compresses
each window once.

Determinism: the bytes of zstd, xz and bzip2 at fixed settings are the same for
a fixed version of each library (zstandard's bundled libzstd, the system's
liblzma and libbz2 behind Python's ``lzma`` and ``bz2``); another version may
compress differently, which changes an archive's bytes (and can change which
combination is smallest) but never what it decodes to: decompression is
specified by each stream format.

Blocks: a coder with ``block`` B > 1 codes runs of consecutive windows as one
payload (:meth:`ClassicCoder.encode_blocks`: a block starts at each window
number that is a multiple of B), so the compressors reach back over the whole
block; the payload sits in the block's first window's cell and the others are
empty.  A channel's short last window belongs to the block its number falls
in when the coder has ``tail`` (config ``"tail": 1``, what the packer writes);
without it (archives written before) the short window is a block of its own
(:meth:`ClassicCoder.block_heads`).  ``block`` is stored in the config only
when above 1 (absent: one window a payload), ``tail`` only when set.

Payload: one header byte ``order & 3 | compressor << 2 | shuffle << 4 | log2(width) << 5``
(order -1 is 3; compressor 0 zstd, 1 xz, 2 bzip2; a zero-length window is ``b""``), then the
compressor's own stream.  Decoding never inflates past ``n * width`` bytes and
raises :class:`ArchiveCorrupt` on any header or stream that does not give
exactly ``n`` values.

>>> import numpy as np
>>> c = ClassicCoder()
>>> x = np.arange(1000, dtype=np.int64) * 3
>>> np.array_equal(c.decode(c.encode(x), len(x)), x)
True
"""

from __future__ import annotations

import bz2
import io
import lzma
from dataclasses import dataclass
from typing import ClassVar, Sequence

import numpy as np
import zstandard

from tsarchive.errors import ArchiveCorrupt, BadInput

COMPRESSORS = ("zstd", "xz", "bzip2")
ORDERS = (0, 1, 2)          # what ClassicCoder() tries
ALL_ORDERS = (-1, 0, 1, 2)  # what a coder may try (-1: one running sum)
SHUFFLES = (False, True)
MAX_N = 1 << 24           # longest window (values) a channel's reader decodes: a garbled length cannot allocate more
MAX_BLOCK = 1 << 12       # most windows one payload may hold (a block; the reader caps a block's values at MAX_N too)
_WIDTHS = {1: np.int8, 2: np.int16, 4: np.int32, 8: np.int64}
_XZ_PRESET = 9 | lzma.PRESET_EXTREME
_CONFIG_KEYS = {"id", "compressors", "orders", "shuffles", "block", "tail"}


def difference(q: np.ndarray, order: int) -> np.ndarray:
    """``order`` first differences with ``q[-1] = 0``, or for -1 one running sum (wrap-around int64)."""
    r = np.asarray(q, dtype=np.int64)
    if order < 0:
        return _sum(r)
    with np.errstate(over="ignore"):
        for _ in range(order):
            r = np.diff(r, prepend=np.int64(0))
    return r


def integrate(r: np.ndarray, order: int) -> np.ndarray:
    """Inverse of :func:`difference` (running sums, or for -1 one difference; wrap-around int64)."""
    q = np.asarray(r, dtype=np.int64)
    if order < 0:
        with np.errstate(over="ignore"):
            return np.diff(q, prepend=np.int64(0))
    for _ in range(order):
        q = _sum(q)
    return q


def _sum(r: np.ndarray) -> np.ndarray:
    with np.errstate(over="ignore"):
        return np.cumsum(r, dtype=np.int64)


def _narrowest(r: np.ndarray) -> int:
    if not len(r):
        return 1
    lo, hi = int(r.min()), int(r.max())
    return next(w for w, t in _WIDTHS.items() if np.iinfo(t).min <= lo and hi <= np.iinfo(t).max)


def _packed(x: np.ndarray, order: int) -> tuple[bytes, int]:
    """The values ``x`` differenced ``order`` times as the coder stores them before compressing: the
    narrowest width that holds them, little-endian; and that width."""
    r = difference(x, order)
    width = _narrowest(r)
    return r.astype(_WIDTHS[width]).astype(f"<i{width}").tobytes(), width


def value_width(values, order: int) -> int:
    """Bytes a value of ``values`` (one window) takes differenced ``order`` times, as the coder stores it."""
    return _narrowest(difference(np.asarray(values), order))


def screen_bytes(values, order: int, shuffle: bool, level: int) -> int:
    """Bytes of one window ``values`` under the combination (zstd, ``order``, ``shuffle``) were zstd run
    at ``level`` instead of 19: a quick stand-in for the packer's choice (:mod:`.fallback`)."""
    x = np.asarray(values)
    if not len(x):
        return 0
    raw, width = _packed(x, order)
    data = _shuffle(raw, width) if shuffle and width > 1 else raw
    return 1 + len(zstandard.ZstdCompressor(level=level).compress(data))


def _shuffle(raw: bytes, width: int) -> bytes:
    return np.frombuffer(raw, np.uint8).reshape(-1, width).T.tobytes()


def _unshuffle(raw: bytes, width: int) -> bytes:
    return np.frombuffer(raw, np.uint8).reshape(width, -1).T.tobytes()


def _compress(raw: bytes, kind: int) -> bytes:
    if kind == 0:
        return zstandard.ZstdCompressor(level=19).compress(raw)
    if kind == 1:       # xz -9e with a dictionary no bigger than the input: the same matches and size (a dictionary
        # the input fits in finds the same matches), without allocating 64 MiB of dictionary and
        # ~600 MiB of match finder per window (65x faster on a window of 4 KiB)
        dict_size = max(4096, 1 << (len(raw) - 1).bit_length())
        return lzma.compress(raw, format=lzma.FORMAT_XZ,
                             filters=[{"id": lzma.FILTER_LZMA2, "preset": _XZ_PRESET, "dict_size": dict_size}])
    return bz2.compress(raw, 9)


def _decompress(blob: bytes, kind: int, size: int) -> bytes:
    """At most ``size + 1`` bytes of the stream (so an overlong stream shows without inflating it)."""
    try:
        if kind == 0:
            with zstandard.ZstdDecompressor().stream_reader(io.BytesIO(blob)) as reader:
                return reader.read(size + 1)
        dec = lzma.LZMADecompressor() if kind == 1 else bz2.BZ2Decompressor()
        return dec.decompress(blob, max_length=size + 1)
    except (zstandard.ZstdError, lzma.LZMAError, OSError, EOFError, ValueError):
        raise ArchiveCorrupt("a classic-coded window's compressed stream is damaged; the archive is damaged") from None


def _cells(buf: np.ndarray, starts: np.ndarray, ends: np.ndarray, n: int) -> memoryview:
    """``buf`` as bytes once the cells ``starts``..``ends`` (int64) are checked to lie inside it and the
    window length ``n`` within ``MAX_N``."""
    if not 0 <= n <= MAX_N:
        raise ArchiveCorrupt(f"a window length is outside 0..{MAX_N}; the archive is damaged")
    if len(starts) != len(ends) or (len(starts) and (np.any(ends < starts) or starts.min() < 0
                                                     or ends.max() > len(buf))):
        raise ArchiveCorrupt("classic-coded windows point outside their column; the archive is damaged")
    return memoryview(np.ascontiguousarray(buf, np.uint8))


def window_offsets(lens, k: int) -> np.ndarray:
    """Where each of ``k`` windows of ``lens`` values (one length or one per window) starts in their flat
    values, and the end (k + 1 int64); a length outside 0..``MAX_N`` is damage."""
    lens = np.broadcast_to(np.asarray(lens, np.int64), (k,))
    if k and not (0 <= lens.min() and lens.max() <= MAX_N):
        raise ArchiveCorrupt(f"a window length is outside 0..{MAX_N}; the archive is damaged")
    return np.concatenate([[0], np.cumsum(lens)]).astype(np.int64)


def expect_id(config: dict, coder_id: str) -> None:
    """Raise :class:`ArchiveCorrupt` unless ``config`` is a config of the coder ``coder_id``."""
    if config.get("id") != coder_id:
        raise ArchiveCorrupt(f"coder config {str(config.get('id'))[:40]!r} is not {coder_id!r}; "
                             "the archive is damaged")


@dataclass(frozen=True)
class ClassicCoder:
    """Difference + byte width + shuffle + the smallest of zstd -19 / xz -9e / bzip2 -9 (module docstring).

    ``orders``, ``shuffles`` and ``compressors`` are the combinations :meth:`encode` tries (a shuffle
    applies to values wider than a byte only); decoding reads the combination from each payload's header.
    """

    compressors: tuple[str, ...] = COMPRESSORS
    orders: tuple[int, ...] = ORDERS
    shuffles: tuple[bool, ...] = SHUFFLES
    block: int = 1
    tail: bool = False      # the short last window joins its block (else, as before it, a block of its own)
    id: ClassVar[str] = "classic"

    def __post_init__(self) -> None:
        if not self.compressors or any(c not in COMPRESSORS for c in self.compressors):
            raise BadInput(f"classic coder compressors must be among {', '.join(COMPRESSORS)}; "
                           f"got {', '.join(map(str, self.compressors)) or 'none'}")
        if not self.orders or any(o not in ALL_ORDERS for o in self.orders) or \
                not self.shuffles or any(not isinstance(f, bool) for f in self.shuffles):
            raise BadInput(f"classic coder orders must be among {ALL_ORDERS} and shuffles true or false; "
                           f"got {self.orders} and {self.shuffles}")
        if type(self.block) is not int or not 1 <= self.block <= MAX_BLOCK:
            raise BadInput(f"a classic coder's block must be a whole number of windows in 1..{MAX_BLOCK}; "
                           f"got {str(self.block)[:20]}")
        if type(self.tail) is not bool or (self.tail and self.block == 1):
            raise BadInput("a classic coder's tail is true or false, and true only with a block of several windows; "
                           f"got {str(self.tail)[:20]} with block {self.block}")

    def encode(self, values) -> bytes:
        x = np.asarray(values)
        if x.ndim != 1 or not (np.issubdtype(x.dtype, np.integer) or x.size == 0):
            raise BadInput("the classic coder codes 1-D integer windows; convert the values to int64 first")
        if not len(x):
            return b""
        best = None
        for order in self.orders:
            raw, width = _packed(x, order)
            for shuf in sorted({f and width > 1 for f in self.shuffles}):
                data = _shuffle(raw, width) if shuf else raw
                for name in self.compressors:
                    kind = COMPRESSORS.index(name)
                    head = order & 3 | kind << 2 | int(shuf) << 4 | (width.bit_length() - 1) << 5
                    blob = bytes([head]) + _compress(data, kind)
                    if best is None or len(blob) < len(best):
                        best = blob
        return best

    def decode(self, payload: bytes, n: int) -> np.ndarray:
        if n == 0:
            if payload:
                raise ArchiveCorrupt("an empty classic-coded window has bytes; the archive is damaged")
            return np.zeros(0, np.int64)
        if not payload:
            raise ArchiveCorrupt("a classic-coded window has no bytes; the archive is damaged")
        head = payload[0]
        order, kind, shuf, width = head & 3, (head >> 2) & 3, (head >> 4) & 1, 1 << (head >> 5)
        if kind > 2 or width > 8:
            raise ArchiveCorrupt("a classic-coded window's header is unknown; the archive is damaged")
        raw = _decompress(bytes(payload[1:]), kind, n * width)
        if len(raw) != n * width:
            raise ArchiveCorrupt(f"a classic-coded window does not hold exactly {n} values; "
                                 "the archive is damaged")
        if shuf:
            raw = _unshuffle(raw, width)
        return integrate(np.frombuffer(raw, f"<i{width}").astype(np.int64), -1 if order == 3 else order)

    def encode_many(self, windows) -> list[bytes]:
        return [self.encode(w) for w in windows]

    def decode_many(self, payloads: Sequence[bytes], lengths) -> list[np.ndarray]:
        lens = [int(n) for n in np.asarray(lengths).reshape(-1)]
        if len(lens) != len(payloads):
            raise BadInput(f"{len(payloads)} payloads but {len(lens)} lengths; give one length per payload")
        return [self.decode(p, n) for p, n in zip(payloads, lens)]

    def decode_flat(self, buf: np.ndarray, starts: np.ndarray, ends: np.ndarray, n: int,
                    strict: bool = False) -> np.ndarray:
        """Windows of ``n`` values each from ``buf[starts[w]:ends[w]]`` (a Parquet binary column's data
        buffer and offsets), as one flat int64 array.  ``strict`` asks nothing more here: every stream
        is checked to give exactly ``n`` values, and the reader checks each window's CRC."""
        starts, ends = np.asarray(starts, np.int64), np.asarray(ends, np.int64)
        view = _cells(buf, starts, ends, n)
        out = np.empty(len(starts) * n, np.int64)
        for w, (a, b) in enumerate(zip(starts.tolist(), ends.tolist())):
            out[w * n:(w + 1) * n] = self.decode(view[a:b], n)
        return out

    def block_heads(self, windows, short) -> np.ndarray:
        """Which of consecutive window numbers ``windows`` start a block: each multiple of ``block``, and a
        channel's short last window (``short``: true for it, per window or for all) unless ``tail`` joins
        it to the block its number falls in."""
        w = np.asarray(windows, np.int64)
        return (w % self.block == 0) | (np.asarray(short, bool) & (not self.tail))

    def encode_blocks(self, values, lens, heads) -> list[bytes]:
        """One payload per block of consecutive windows, whose ``lens`` values each (one length or one per
        window; a channel's short last window may end the last block) are ``values`` (flat, in window
        order): a block starts at each true ``heads[i]`` (``heads[0]`` must be one) and its windows'
        values are coded as one; the block's first window holds the payload, its other windows ``b""``."""
        heads = np.asarray(heads, bool)
        offs = window_offsets(lens, len(heads))
        starts = np.flatnonzero(heads).tolist()
        if not starts or starts[0] != 0 or offs[-1] != len(values):
            raise ValueError("a batch of block-coded windows must start a block and hold its windows' values")
        out = [b""] * len(heads)
        for a, b in zip(starts, starts[1:] + [len(heads)]):
            out[a] = self.encode(np.asarray(values[offs[a]:offs[b]]))
        return out

    def decode_blocks(self, buf: np.ndarray, starts: np.ndarray, ends: np.ndarray, lens, heads) -> np.ndarray:
        """Inverse of :meth:`encode_blocks` over a Parquet binary column (``buf``, ``starts``, ``ends`` as
        :meth:`decode_flat`): windows of ``lens`` values each (one length or one per window) as one flat
        int64 array.  A window inside a block with bytes, a block longer than ``block`` windows or than
        ``MAX_N`` values, or windows that do not start a block, are damage (:class:`ArchiveCorrupt`);
        nothing is inflated past the block's values."""
        starts, ends = np.asarray(starts, np.int64), np.asarray(ends, np.int64)
        heads = np.asarray(heads, bool)
        if len(heads) != len(starts):
            raise BadInput(f"{len(starts)} cells but {len(heads)} block starts; give one per cell")
        offs = window_offsets(lens, len(heads))
        first = np.flatnonzero(heads)
        count = np.diff(first, append=len(heads))
        values = np.diff(offs[np.append(first, len(heads))])      # values of each block
        if len(heads) and (not heads[0] or np.any(ends[~heads] != starts[~heads])):
            raise ArchiveCorrupt("classic-coded windows inside a block have bytes of their own, or a block "
                                 "lost its first window; the archive is damaged")
        if len(count) and (int(count.max()) > self.block or int(values.max()) > MAX_N):
            raise ArchiveCorrupt(f"a classic-coded block holds more than {self.block} windows or {MAX_N} values; "
                                 "the archive is damaged")
        view = _cells(buf, starts, ends, 0)
        out = np.empty(int(offs[-1]), np.int64)
        for i, k, n in zip(first.tolist(), count.tolist(), values.tolist()):
            out[offs[i]:offs[i + k]] = self.decode(view[starts[i]:ends[i]], n)
        return out

    def cost_bits(self, values) -> float:
        """Exact: the bytes of :meth:`encode` (the compressors have no cheaper estimate)."""
        return 8.0 * len(self.encode(values))

    def get_config(self) -> dict:
        d = {"id": self.id, "compressors": list(self.compressors), "orders": list(self.orders),
             "shuffles": list(self.shuffles)}
        if self.block > 1:
            d["block"] = self.block
        return {**d, "tail": 1} if self.tail else d

    @classmethod
    def from_config(cls, config: dict) -> "ClassicCoder":
        """The coder of ``config``; ``orders`` and ``shuffles`` are optional (every one when absent),
        ``block`` (1 when absent: every window its own payload, as archives written before blocks) and
        ``tail`` (only 1 when present; absent: a short last window is a block of its own, as archives
        written before it).  A key this version does not know is refused: its rule is unknown here."""
        expect_id(config, cls.id)
        unknown = sorted(set(config) - _CONFIG_KEYS)
        if unknown:
            raise ArchiveCorrupt(f"the classic coder's {', '.join(map(str, unknown))[:60]} is unknown to this "
                                 "tsarchive version; upgrade tsarchive to read the archive")
        tail = config.get("tail")
        if tail is not None and (type(tail) is not int or tail != 1):
            raise ArchiveCorrupt(f"the classic coder's tail is {str(tail)[:20]}, not 1; the archive is damaged")
        try:
            return cls(tuple(str(c) for c in config.get("compressors", COMPRESSORS)),
                       tuple(int(o) for o in config.get("orders", ORDERS)),
                       tuple(f if isinstance(f, bool) else str(f) for f in config.get("shuffles", SHUFFLES)),
                       config.get("block", 1), tail is not None)
        except BadInput as exc:
            raise ArchiveCorrupt(f"{exc}; the archive is damaged") from None
