"""What a user would otherwise choose: classic codecs measured beside tsarchive.

Every baseline is a :class:`Baseline` with ``encode(data, eps, resolution=None)
-> bytes`` and ``decode(blob) -> float64 array``.  ``data`` is a
``(n_samples, n_channels)`` array (a 1-D array is taken as one channel);
``eps`` is the per-channel L-inf budget (a scalar or one value per channel;
ignored by the lossless ones).  ``resolution`` (optional, per channel, 0 or
NaN for none) is the logging grid of a channel known to be on one (1 for
integer counts, 0.01 for two decimals): a user who knows it quantizes with
the largest multiple ``m r <= 2 eps`` of it (``m >= 1``), which on on-grid
data has max error ``floor(m/2) r <= eps`` and is exact when ``2 eps < r``.
The byte count of a baseline is ``len(encode(...))`` -- every header needed to
decode is inside the blob, so the counts are honest and comparable.

The baselines (ids as printed in the bench tables):

``zstd``     zstd level 19 on the raw little-endian sample bytes of each
             channel in its source dtype (float32 stays float32, int32 stays
             int32; unsigned integers go as int64). Lossless.
``parquet``  one Parquet file, one column per channel in its source dtype,
             BYTE_STREAM_SPLIT encoding, ``use_dictionary=False``, zstd
             (level 19 by default). Lossless.
``quant``    uniform quantization ``q = round(x / step)`` with
             ``step = 2 eps (1 - 1e-7)``; the integers are stored in the
             narrowest of int8/16/32/64 that holds them, then zstd-19.
``prev``     the same integers through the previous-sample (first-order
             Lorenzo) predictor ``r[n] = q[n] - q[n-1]`` (``q[-1] = 0``), then
             narrowest integer width + zstd-19.
``prev2``    second-order predictor ``r[n] = q[n] - (2 q[n-1] - q[n-2])``
             (``q[-1] = q[-2] = 0``), then narrowest width + zstd-19.

Each of those three comes in six forms, ``ORDER[.COMPRESSOR][+shuf]``: the
general-purpose compressor is zstd level 19 (no suffix), ``.xz`` (LZMA2 in the
xz container, ``lzma.compress`` with preset ``9 | PRESET_EXTREME``, i.e.
``xz -9e``) or ``.bz2`` (``bz2.compress`` level 9, i.e. ``bzip2 -9``: the
Burrows-Wheeler transform); ``+shuf`` stores the integers byte-shuffled (byte
plane k = byte k of every integer, little endian, as Blosc's shuffle filter
does) before compressing.  The *best classic* size of a case is the smallest
of all baselines.

A uniform quantizer with step Delta has max error Delta/2 (textbook), so the
lossy baselines meet ``|x_hat - x| <= eps``; the factor ``1 - 1e-7`` keeps
float64 rounding of ``q * step`` from pushing an error past ``eps`` and costs
under 1e-6 bit per sample.  Reconstructions are returned in float64.
"""

from __future__ import annotations

import bz2
import lzma
import math
import struct
from dataclasses import dataclass
from typing import Callable

import numpy as np

from tsarchive.errors import BadInput

ZSTD_LEVEL = 19
XZ_PRESET = 9 | lzma.PRESET_EXTREME
BZ2_LEVEL = 9
STEP_SHRINK = 1.0 - 1e-7
_MAGIC = b"TSBL"
_INT_WIDTHS = (np.int8, np.int16, np.int32, np.int64)
_DTYPES = {0: np.float32, 1: np.float64, 2: np.int8, 3: np.int16, 4: np.int32, 5: np.int64}


@dataclass(frozen=True)
class Baseline:
    """One classic codec: ``encode(data, eps, resolution=None) -> bytes``, ``decode(bytes) -> ndarray``."""

    id: str
    lossless: bool
    describe: str
    encode: Callable[..., bytes]
    decode: Callable[[bytes], np.ndarray]


@dataclass(frozen=True)
class BaselineResult:
    """Size and checked error of one baseline on one case."""

    id: str
    nbytes: int
    max_errors: tuple[float, ...]
    worst_ratio: float
    lossless: bool

    def to_dict(self) -> dict:
        return {"id": self.id, "nbytes": self.nbytes, "max_errors": list(self.max_errors),
                "worst_ratio": self.worst_ratio, "lossless": self.lossless}


def _as_2d(data: np.ndarray) -> np.ndarray:
    arr = np.asarray(data)
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2 or arr.shape[0] == 0:
        raise BadInput(f"baseline input must be a non-empty 1-D or 2-D array, got shape {arr.shape}; pass samples x channels")
    if not np.all(np.isfinite(arr)):
        raise BadInput("baseline input holds NaN or inf; fill or drop those samples first")
    return arr


def _eps_vector(eps: "np.ndarray | float", n_channels: int) -> np.ndarray:
    e = np.broadcast_to(np.asarray(eps, dtype=np.float64), (n_channels,)).copy()
    if np.any(~np.isfinite(e)) or np.any(e <= 0):
        raise BadInput(f"lossy baselines need a positive finite eps per channel, got {e.tolist()}")
    return e


def _resolution_vector(resolution, n_channels: int) -> np.ndarray:
    if resolution is None:
        return np.full(n_channels, np.nan)
    return np.broadcast_to(np.asarray(resolution, dtype=np.float64), (n_channels,)).copy()


def _dtype_code(dtype: np.dtype) -> int:
    """Stored dtype: float32 as is, signed integers in their own width, anything else as float64/int64."""
    if dtype == np.float32:
        return 0
    if np.issubdtype(dtype, np.signedinteger):
        return 2 + (0, 1, None, 2, None, None, None, 3)[dtype.itemsize - 1]
    if np.issubdtype(dtype, np.integer):
        return 5
    return 1


def _zstd(raw: bytes) -> bytes:
    import zstandard

    return zstandard.ZstdCompressor(level=ZSTD_LEVEL).compress(raw)


def _unzstd(blob: bytes) -> bytes:
    import zstandard

    return zstandard.ZstdDecompressor().decompress(blob)


# General-purpose compressors a user would reach for: id -> (compress, decompress).
COMPRESSORS: dict[str, tuple[Callable[[bytes], bytes], Callable[[bytes], bytes]]] = {
    "zstd": (_zstd, _unzstd),
    "xz": (lambda raw: lzma.compress(raw, format=lzma.FORMAT_XZ, preset=XZ_PRESET), lzma.decompress),
    "bz2": (lambda raw: bz2.compress(raw, BZ2_LEVEL), bz2.decompress),
}


def shuffle_bytes(ints: np.ndarray) -> bytes:
    """Byte planes of little-endian integers: all first bytes, then all second bytes, ..."""
    le = np.ascontiguousarray(ints, dtype=ints.dtype.newbyteorder("<"))
    return np.ascontiguousarray(le.view(np.uint8).reshape(le.size, le.itemsize).T).tobytes()


def unshuffle_bytes(raw: bytes, dtype: np.dtype, n: int) -> np.ndarray:
    """Inverse of :func:`shuffle_bytes` for ``n`` integers of ``dtype``."""
    dt = np.dtype(dtype).newbyteorder("<")
    planes = np.frombuffer(raw, dtype=np.uint8).reshape(dt.itemsize, n)
    return np.ascontiguousarray(planes.T).view(dt).reshape(n)


# Blob layout (little endian): magic, u32 channels, u64 samples, then per channel
# (f64 step, u8 dtype-or-width code, u64 frame length), then the compressed frames.
_HEAD = struct.Struct("<4sIQ")
_CHAN = struct.Struct("<dBQ")


def _frames_blob(n: int, metas: list[tuple[float, int]], frames: list[bytes]) -> bytes:
    parts = [_HEAD.pack(_MAGIC, len(frames), n)]
    parts += [_CHAN.pack(step, code, len(f)) for (step, code), f in zip(metas, frames)]
    return b"".join(parts + frames)


def _frames_read(blob: bytes) -> tuple[int, list[tuple[float, int]], list[bytes]]:
    magic, n_ch, n = _HEAD.unpack_from(blob, 0)
    if magic != _MAGIC:
        raise BadInput("not a bench baseline blob; decode it with the baseline that encoded it")
    pos, metas, lengths = _HEAD.size, [], []
    for _ in range(n_ch):
        step, code, length = _CHAN.unpack_from(blob, pos)
        pos += _CHAN.size
        metas.append((step, code))
        lengths.append(length)
    frames = []
    for length in lengths:
        frames.append(blob[pos:pos + length])
        pos += length
    return n, metas, frames


def _narrowest(ints: np.ndarray) -> tuple[np.ndarray, int]:
    lo, hi = int(ints.min()), int(ints.max())
    for code, t in enumerate(_INT_WIDTHS):
        info = np.iinfo(t)
        if info.min <= lo and hi <= info.max:
            return ints.astype(t), code
    raise BadInput("quantized values exceed int64; use a larger eps")


def quantize(x: np.ndarray, eps: float, resolution: float | None = None) -> tuple[np.ndarray, float]:
    """Uniform quantizer: ``(q, step)`` with ``q = round(x / step)`` (int64).

    ``step = 2 eps (1 - 1e-7)``, or ``m r`` with ``m = max(1, floor(2 eps / r))``
    for a channel on the grid ``r = resolution``.
    """
    if resolution is not None and math.isfinite(resolution) and resolution > 0:
        step = max(1, math.floor(2.0 * float(eps) / resolution)) * float(resolution)
    else:
        step = 2.0 * float(eps) * STEP_SHRINK
    scaled = np.rint(np.asarray(x, dtype=np.float64) / step)
    if np.any(np.abs(scaled) >= 2.0 ** 62):
        raise BadInput(f"eps={eps:g} is too small for values up to {np.max(np.abs(x)):g}; use a larger budget")
    return scaled.astype(np.int64), step


def _residual(q: np.ndarray, order: int) -> np.ndarray:
    r = q
    for _ in range(order):
        r = np.diff(r, prepend=np.int64(0))
    return r


def _integrate(r: np.ndarray, order: int) -> np.ndarray:
    q = r.astype(np.int64)
    for _ in range(order):
        q = np.cumsum(q, dtype=np.int64)
    return q


def _quant_codec(order: int, compressor: str = "zstd", shuffle: bool = False) -> tuple[Callable, Callable]:
    pack, unpack = COMPRESSORS[compressor]

    def encode(data: np.ndarray, eps: "np.ndarray | float", resolution=None) -> bytes:
        arr = _as_2d(data)
        e = _eps_vector(eps, arr.shape[1])
        res = _resolution_vector(resolution, arr.shape[1])
        metas, frames = [], []
        for j in range(arr.shape[1]):
            q, step = quantize(arr[:, j], e[j], res[j])
            ints, code = _narrowest(_residual(q, order))
            metas.append((step, code))
            raw = shuffle_bytes(ints) if shuffle else np.ascontiguousarray(ints, ints.dtype.newbyteorder("<")).tobytes()
            frames.append(pack(raw))
        return _frames_blob(arr.shape[0], metas, frames)

    def decode(blob: bytes) -> np.ndarray:
        n, metas, frames = _frames_read(blob)
        out = np.empty((n, len(frames)), dtype=np.float64)
        for j, ((step, code), frame) in enumerate(zip(metas, frames)):
            dt = np.dtype(_INT_WIDTHS[code]).newbyteorder("<")
            raw = unpack(frame)
            r = unshuffle_bytes(raw, dt, n) if shuffle else np.frombuffer(raw, dtype=dt)
            out[:, j] = _integrate(r, order).astype(np.float64) * step
        return out

    return encode, decode


def _zstd_encode(data: np.ndarray, eps: "np.ndarray | float" = 0.0, resolution=None) -> bytes:
    arr = _as_2d(data)
    metas, frames = [], []
    for j in range(arr.shape[1]):
        col = np.ascontiguousarray(arr[:, j])
        code = _dtype_code(col.dtype)
        col = col.astype(np.dtype(_DTYPES[code]).newbyteorder("<"))
        metas.append((0.0, code))
        frames.append(_zstd(col.tobytes()))
    return _frames_blob(arr.shape[0], metas, frames)


def _zstd_decode(blob: bytes) -> np.ndarray:
    n, metas, frames = _frames_read(blob)
    out = np.empty((n, len(frames)), dtype=np.float64)
    for j, ((_, code), frame) in enumerate(zip(metas, frames)):
        out[:, j] = np.frombuffer(_unzstd(frame), dtype=np.dtype(_DTYPES[code]).newbyteorder("<"))
    return out


def parquet_bytes(data: np.ndarray, level: int | None = ZSTD_LEVEL) -> bytes:
    """Lossless Parquet: one column per channel, BYTE_STREAM_SPLIT, no dictionary, zstd at ``level``."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    arr = _as_2d(data)
    names = [f"c{j}" for j in range(arr.shape[1])]
    cols = [np.ascontiguousarray(arr[:, j]) for j in range(arr.shape[1])]
    cols = [c if c.dtype in (np.float32, np.float64) else c.astype(np.float64) for c in cols]
    table = pa.table(dict(zip(names, cols)))
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink, compression="zstd", compression_level=level, use_dictionary=False,
                   column_encoding={n: "BYTE_STREAM_SPLIT" for n in names})
    return sink.getvalue().to_pybytes()


def _parquet_decode(blob: bytes) -> np.ndarray:
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pq.read_table(pa.BufferReader(blob))
    return np.column_stack([table.column(i).to_numpy().astype(np.float64) for i in range(table.num_columns)])


ORDERS = (("quant", 0, "quantize step 2eps (or on the logging grid)"),
          ("prev", 1, "quantize + previous-sample predictor"),
          ("prev2", 2, "quantize + 2nd-order predictor"))
_COMPRESSOR_NAMES = {"zstd": "zstd-19", "xz": "xz -9e", "bz2": "bzip2 -9"}


def _classic_lossy() -> tuple[Baseline, ...]:
    out = []
    for compressor in COMPRESSORS:
        for shuffle in (False, True):
            for name, order, describe in ORDERS:
                bid = name + ("" if compressor == "zstd" else f".{compressor}") + ("+shuf" if shuffle else "")
                text = f"{describe} + {'byte shuffle + ' if shuffle else ''}{_COMPRESSOR_NAMES[compressor]}"
                out.append(Baseline(bid, False, text, *_quant_codec(order, compressor, shuffle)))
    return tuple(out)


BASELINES: tuple[Baseline, ...] = (
    Baseline("zstd", True, "zstd-19 on raw sample bytes", _zstd_encode, _zstd_decode),
    Baseline("parquet", True, "Parquet BYTE_STREAM_SPLIT + zstd-19",
             lambda d, e=0.0, r=None: parquet_bytes(d), _parquet_decode),
) + _classic_lossy()
CLASSIC_LOSSY = tuple(b.id for b in BASELINES if not b.lossless)
# The first three (quant, prev, prev2 through zstd-19, unshuffled): the classic coders of earlier rounds.
ZSTD_PLAIN = CLASSIC_LOSSY[:3]


def get(baseline_id: str) -> Baseline:
    """The baseline with this id; raises BadInput naming the known ids."""
    for b in BASELINES:
        if b.id == baseline_id:
            return b
    raise BadInput(f"unknown baseline {baseline_id!r}; choose one of {', '.join(b.id for b in BASELINES)}")


def run(baseline: Baseline, data: np.ndarray, eps: "np.ndarray | float", resolution=None) -> BaselineResult:
    """Encode, decode and check one baseline on ``data`` at budget ``eps`` (per channel).

    ``max_errors`` holds max |x_hat - x| per channel; ``worst_ratio`` is the
    largest ``max_error / eps`` (for a lossless baseline: 0 when exact, inf
    otherwise).
    """
    arr = _as_2d(data)
    blob = baseline.encode(arr, eps, resolution)
    back = baseline.decode(blob)
    errs = np.max(np.abs(back - arr.astype(np.float64)), axis=0)
    if baseline.lossless:
        worst = 0.0 if not np.any(errs) else float("inf")
    else:
        worst = float(np.max(errs / _eps_vector(eps, arr.shape[1])))
    return BaselineResult(baseline.id, len(blob), tuple(float(e) for e in errs), worst, baseline.lossless)
