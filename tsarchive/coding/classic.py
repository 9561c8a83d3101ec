"""The classic fallback: integers -> difference -> the best general-purpose compressor ("classic" coder).

What a technician would do by hand, as a coder: the int64 values (samples on
the grid, or residuals) are differenced ``order`` times (0, 1 or 2; ``r[t] =
q[t] - q[t-1]`` with ``q[-1] = 0``, applied again for 2: wrap-around int64,
so the running sums undo it exactly modulo 2**64), stored in the narrowest of
1, 2, 4 or 8 bytes little-endian that holds them, optionally byte-shuffled
(byte plane k = byte k of every value, as Blosc's shuffle filter), and
compressed by zstd level 19, xz (LZMA2, ``preset 9 | PRESET_EXTREME``) or
bzip2 level 9.  :meth:`ClassicCoder.encode` tries every combination and keeps
the smallest, so on any input it is at most the best of them plus its header.

Payload: one header byte ``order | compressor << 2 | shuffle << 4 | log2(width) << 5``
(compressor 0 zstd, 1 xz, 2 bzip2; a zero-length window is ``b""``), then the
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
ORDERS = (0, 1, 2)
_WIDTHS = {1: np.int8, 2: np.int16, 4: np.int32, 8: np.int64}
_XZ_PRESET = 9 | lzma.PRESET_EXTREME


def difference(q: np.ndarray, order: int) -> np.ndarray:
    """``order`` first differences with ``q[-1] = 0`` (wrap-around int64)."""
    r = np.asarray(q, dtype=np.int64)
    with np.errstate(over="ignore"):
        for _ in range(order):
            r = np.diff(r, prepend=np.int64(0))
    return r


def integrate(r: np.ndarray, order: int) -> np.ndarray:
    """Inverse of :func:`difference` (running sums, wrap-around int64)."""
    q = np.asarray(r, dtype=np.int64)
    with np.errstate(over="ignore"):
        for _ in range(order):
            q = np.cumsum(q, dtype=np.int64)
    return q


def _narrowest(r: np.ndarray) -> int:
    if not len(r):
        return 1
    lo, hi = int(r.min()), int(r.max())
    return next(w for w, t in _WIDTHS.items() if np.iinfo(t).min <= lo and hi <= np.iinfo(t).max)


def _shuffle(raw: bytes, width: int) -> bytes:
    return np.frombuffer(raw, np.uint8).reshape(-1, width).T.tobytes()


def _unshuffle(raw: bytes, width: int) -> bytes:
    return np.frombuffer(raw, np.uint8).reshape(width, -1).T.tobytes()


def _compress(raw: bytes, kind: int) -> bytes:
    if kind == 0:
        return zstandard.ZstdCompressor(level=19).compress(raw)
    if kind == 1:
        return lzma.compress(raw, preset=_XZ_PRESET)
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


def expect_id(config: dict, coder_id: str) -> None:
    """Raise :class:`ArchiveCorrupt` unless ``config`` is a config of the coder ``coder_id``."""
    if config.get("id") != coder_id:
        raise ArchiveCorrupt(f"coder config {str(config.get('id'))[:40]!r} is not {coder_id!r}; "
                             "the archive is damaged")


@dataclass(frozen=True)
class ClassicCoder:
    """Difference + byte width + shuffle + the smallest of zstd -19 / xz -9e / bzip2 -9 (module docstring)."""

    compressors: tuple[str, ...] = COMPRESSORS
    id: ClassVar[str] = "classic"

    def __post_init__(self) -> None:
        if not self.compressors or any(c not in COMPRESSORS for c in self.compressors):
            raise BadInput(f"classic coder compressors must be among {', '.join(COMPRESSORS)}; "
                           f"got {', '.join(map(str, self.compressors)) or 'none'}")

    def encode(self, values) -> bytes:
        x = np.asarray(values)
        if x.ndim != 1 or not (np.issubdtype(x.dtype, np.integer) or x.size == 0):
            raise BadInput("the classic coder codes 1-D integer windows; convert the values to int64 first")
        if not len(x):
            return b""
        best = None
        for order in ORDERS:
            r = difference(x, order)
            width = _narrowest(r)
            raw = r.astype(_WIDTHS[width]).astype(f"<i{width}").tobytes()
            for shuf in ((False, True) if width > 1 else (False,)):
                data = _shuffle(raw, width) if shuf else raw
                for name in self.compressors:
                    kind = COMPRESSORS.index(name)
                    head = order | kind << 2 | int(shuf) << 4 | (width.bit_length() - 1) << 5
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
        if order > 2 or kind > 2 or width > 8:
            raise ArchiveCorrupt("a classic-coded window's header is unknown; the archive is damaged")
        raw = _decompress(bytes(payload[1:]), kind, n * width)
        if len(raw) != n * width:
            raise ArchiveCorrupt(f"a classic-coded window does not hold exactly {n} values; "
                                 "the archive is damaged")
        if shuf:
            raw = _unshuffle(raw, width)
        return integrate(np.frombuffer(raw, f"<i{width}").astype(np.int64), order)

    def encode_many(self, windows) -> list[bytes]:
        return [self.encode(w) for w in windows]

    def decode_many(self, payloads: Sequence[bytes], lengths) -> list[np.ndarray]:
        lens = [int(n) for n in np.asarray(lengths).reshape(-1)]
        if len(lens) != len(payloads):
            raise BadInput(f"{len(payloads)} payloads but {len(lens)} lengths; give one length per payload")
        return [self.decode(p, n) for p, n in zip(payloads, lens)]

    def cost_bits(self, values) -> float:
        """Exact: the bytes of :meth:`encode` (the compressors have no cheaper estimate)."""
        return 8.0 * len(self.encode(values))

    def get_config(self) -> dict:
        return {"id": self.id, "compressors": list(self.compressors)}

    @classmethod
    def from_config(cls, config: dict) -> "ClassicCoder":
        expect_id(config, cls.id)
        try:
            return cls(tuple(str(c) for c in config.get("compressors", COMPRESSORS)))
        except BadInput as exc:
            raise ArchiveCorrupt(f"{exc}; the archive is damaged") from None
