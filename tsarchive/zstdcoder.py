"""zstd as a leaf coder of the codec contract (:mod:`tsarchive.codecs`, kind ``coder``, id ``zstd``).

A general-purpose baseline beside the range coder: no table to fit, so it
suits long repeats an order-0 table cannot see.

    >>> from tsarchive.zstdcoder import ZstdCoder
    >>> c = ZstdCoder(level=3)
    >>> c.decode(c.encode([5, 5, 5, -1]), 4).tolist()
    [5, 5, 5, -1]
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import ClassVar, Sequence

import numpy as np

from . import codecs
from .entropy_table import _as_int64, _corrupt, _unzigzag, _zigzag

_MAX_N = (1 << 31) - 1
_U64 = np.uint64


@functools.lru_cache(maxsize=8)
def _zstd_pair(level: int):
    import zstandard as zstd

    params = zstd.ZstdCompressionParameters.from_level(
        level, format=zstd.FORMAT_ZSTD1_MAGICLESS, write_content_size=False,
        write_checksum=False, write_dict_id=False)
    return zstd.ZstdCompressor(compression_params=params), zstd.ZstdDecompressor(format=zstd.FORMAT_ZSTD1_MAGICLESS)


@dataclass(frozen=True)
class ZstdCoder:
    """zstd (magicless frame) over zigzag values, fixed width 1/2/4/8 bytes,
    byte planes shuffled.  Payload: u8 log2(width) + frame; all-zero -> b""."""

    level: int = 19
    id: ClassVar[str] = "zstd"

    def encode(self, values) -> bytes:
        a = _as_int64(values)
        if not a.any():
            return b""
        u = _zigzag(a, 0)
        code = int(np.searchsorted([0xFF, 0xFFFF, 0xFFFFFFFF], int(u.max())))
        w = 1 << code
        planes = u.astype(f"<u{w}").view(np.uint8).reshape(-1, w).T.tobytes()
        return bytes([code]) + _zstd_pair(self.level)[0].compress(planes)

    def decode(self, payload: bytes, n: int) -> np.ndarray:
        if not 0 <= n <= _MAX_N:
            raise _corrupt(f"window length {n} is out of range")
        payload = bytes(payload)
        if not payload:
            return np.zeros(n, np.int64)
        w = 1 << payload[0] if payload[0] <= 3 else 0
        try:
            raw = _zstd_pair(self.level)[1].decompress(payload[1:], max_output_size=max(n * w, 1)) if w else b""
        except Exception as exc:  # zstandard raises its own ZstdError
            raise _corrupt(f"zstd window cannot be decoded ({exc})") from None
        if not w or len(raw) != n * w:
            raise _corrupt("zstd window has the wrong size or width code")
        u = np.frombuffer(raw, np.uint8).reshape(w, n).T.copy().view(f"<u{w}").ravel().astype(_U64)
        return _unzigzag(u, 0)

    def encode_many(self, windows) -> list[bytes]:
        return [self.encode(w) for w in windows]

    def decode_many(self, payloads: Sequence[bytes], lengths) -> list[np.ndarray]:
        lengths = np.broadcast_to(np.asarray(lengths, dtype=np.int64), (len(payloads),))
        return [self.decode(p, int(n)) for p, n in zip(payloads, lengths)]

    def cost_bits(self, values) -> float:
        return 8.0 * len(self.encode(values))

    def get_config(self) -> dict:
        return {"level": self.level}

    @classmethod
    def from_config(cls, config: dict) -> "ZstdCoder":
        try:
            return cls(int(config.get("level", 19)))
        except (AttributeError, TypeError, ValueError):
            raise _corrupt("zstd coder config is malformed") from None

    @classmethod
    def fit(cls, samples) -> "ZstdCoder":
        return cls()


codecs.register("coder", ZstdCoder.id, ZstdCoder.from_config)
