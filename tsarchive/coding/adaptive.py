"""Context-adaptive coding of integer residual windows ("adaptive" coder).

Each window of int64 residuals is coded on its own (every model starts again
from the coder's initial state), so any window decodes without the others.

Binarisation (per value ``v``, in order):

* a **zero flag** under one of 20 contexts ``min(bit_length(4|r1| + 2|r2| + |r3|), 19)``
  from the previous three residuals of the window (``|r|`` capped at 2**40) --
  the local-activity context of LOCO-I / JPEG-LS (Weinberger, Seroussi, Sapiro,
  IEEE Trans. Image Processing 9(8), 2000) reduced to a magnitude sum;
* for ``v != 0``: the **sign** under the previous nonzero value's sign (3 models),
  the **exponent** ``e = bit_length(|v|) - 1`` in unary (bins 0..22 adaptive per
  context, the rest share bin 23; no terminating bin at e = 63), the **two
  mantissa bits** below the leading one adaptive per exponent, the rest as
  equiprobable (bypass) bits: the Exp-Golomb-style binarisation of H.264/HEVC
  CABAC (ITU-T H.264 9.3.2.3, UEGk) with adaptive prefix bins;
* a **run mode** after two zero residuals in a row: a flag per block of
  ``2**J[k]`` zeros (1 = a whole block, or the zeros up to the window's end;
  0 = the run stops, then its remaining length in ``J[k]`` bits, the top two
  adaptive per ``J``, and the
  nonzero value that ends it under its own exponent row), with ``k`` moving
  up after each whole block and down after each stop: JPEG-LS run mode
  (ITU-T T.87, A.7) with its table J, the flags adaptive.

Every binary decision has an adaptive model: the probability of a 0 in 15
bits, updated by ``p += (2**15 - p) >> s`` or ``p -= p >> s`` with
``s = min(7, bit_length(count + 1))`` (about 1/count at first, like a frequency
count, then the exponential window of CABAC-like shift coders; Marpe, Schwarz,
Wiegand, IEEE TCSVT 13(7), 2003).
The bits are range coded with LZMA's binary range coder (Igor Pavlov, the
LZMA SDK: 32-bit range, ``bound = (range >> 15) * p``, carries held in a cache
byte and a count of pending 0xFF bytes, a byte out whenever the range drops
below 2**24).  The stream's first byte is always zero and is not stored; the
code ends on the point of the final interval with the most trailing zero
bits, and trailing zero bytes are dropped (the decoder reads zeros past the
end).  A window of n = 0 values is ``b""``.

Integer arithmetic only: the bytes are the same on every machine.  The
compiled loops (numba) live in :mod:`._adaptive_kernel`; :mod:`.adaptive_ref`
writes the same stream with Python integers (the tests' reference, and the
path without numba).

Initial state.  By default every model starts at 1/2 with a count of 0. A
coder fitted to a channel (:meth:`AdaptiveCoder.fit`) starts each model at its
frequency on the sample (8 bits per model, count 7), stored zlib-compressed in
``init`` (:attr:`AdaptiveCoder.init_bytes` is its cost, a few hundred bytes).

Decoding checks what it can: a value past 64 bits, a zero run past the
window's end, a code that never reached the payload's last byte or ends in a
zero byte raise :class:`ArchiveCorrupt`; with ``strict`` (the default) the
decoded values are coded again and must give the payload's bytes exactly.

>>> import numpy as np
>>> c = AdaptiveCoder()
>>> x = np.array([0, 0, 0, 1, -2, 0, 0, 0, 0, 5], dtype=np.int64)
>>> np.array_equal(c.decode(c.encode(x), len(x)), x)
True
>>> AdaptiveCoder.from_config(c.get_config()) == c
True
"""

from __future__ import annotations

import base64
import binascii
import zlib
from dataclasses import dataclass
from functools import cache
from typing import ClassVar, Sequence

import numpy as np

from tsarchive import fixedlog
from tsarchive.errors import ArchiveCorrupt, BadInput

from . import _adaptive_kernel as K
from . import adaptive_ref
from .classic import expect_id

MAX_N = 1 << 24           # longest window (values) the coder takes: a garbled length cannot allocate more
INIT_COUNT = 7          # a fitted initial probability weighs like 7 observations (first shift 3)
_ERRORS = {K.ERR_RANGE: "a code or a zero run is impossible",
           K.ERR_EXPONENT: "a value is beyond 64 bits",
           K.ERR_TRAILING: "bytes lie past the end of the code"}


@cache
def _kernels():
    """Compiled (encode, decode) kernels, or ``None`` without numba (then the reference codes)."""
    try:
        from numba import njit
    except ImportError:
        return None
    for on_disk in (True, False):            # without a writable cache directory: compile once per process
        try:
            return _compile(njit, on_disk)
        except RuntimeError:
            if not on_disk:
                raise


_PLAIN = {name: getattr(K, name) for name in K._HELPERS}


def _compile(njit, cache: bool):
    for name, fn in _PLAIN.items():          # the kernels call these globals: compiled ones first
        setattr(K, name, njit(cache=cache, nogil=True)(fn))
    return njit(cache=cache, nogil=True)(K._encode_kernel), njit(cache=cache, nogil=True)(K._decode_kernel)


@cache
def _cost() -> np.ndarray:
    """``cost[p]`` = -log2(p / 2**15) in units of 2**-16 bit, from the integer log2 of :mod:`tsarchive.fixedlog`."""
    p = np.arange(K.PROB_ONE, dtype=np.int64)
    p[0] = 1
    return (K.PROB_BITS << fixedlog.FRAC) - fixedlog.log2q(p)


def _as_windows(windows) -> tuple[np.ndarray, np.ndarray]:
    """Windows (a 2-D array or a sequence of 1-D arrays) -> (flat int64 values, bounds)."""
    if isinstance(windows, np.ndarray) and windows.ndim == 2 and windows.shape[1] <= MAX_N:
        n = windows.shape[1]
        return np.ascontiguousarray(windows, np.int64).ravel(), np.arange(len(windows) + 1, dtype=np.int64) * n
    parts = [np.asarray(w) for w in windows]
    for p in parts:
        if p.ndim != 1 or not (np.issubdtype(p.dtype, np.integer) or p.size == 0):
            raise BadInput("the adaptive coder codes 1-D integer windows; convert the values to int64 first")
        if p.dtype == np.uint64 and p.size and int(p.max()) > np.iinfo(np.int64).max:
            raise BadInput("the adaptive coder codes int64 values; a uint64 value exceeds 2**63 - 1")
    if any(len(p) > MAX_N for p in parts):
        raise BadInput(f"the adaptive coder takes windows of at most {MAX_N} values; split longer ones")
    bounds = np.zeros(len(parts) + 1, np.int64)
    bounds[1:] = np.cumsum([len(p) for p in parts])
    flat = np.concatenate([p.astype(np.int64) for p in parts]) if parts else np.zeros(0, np.int64)
    return flat, bounds


@dataclass(frozen=True)
class AdaptiveCoder:
    """Context-adaptive binary range coding of int64 windows (see the module docstring)."""

    init: bytes = b""                        # zlib-compressed 8-bit initial probabilities, or b"" (all 1/2)
    id: ClassVar[str] = "adaptive"

    def __post_init__(self) -> None:
        self._state()                        # a malformed initial state fails here, not at first use

    @property
    def init_bytes(self) -> int:
        """Bytes the initial state adds to the channel's stored config (0 without one)."""
        return len(self.init)

    def _state(self) -> tuple[np.ndarray, np.ndarray]:
        return _initial_state(self.init)

    # -- coding ------------------------------------------------------------------
    def encode_flat(self, values: np.ndarray, bounds: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(bytes uint8, byte bounds, ideal cost per window in 2**-16 bit) of ``values[bounds[w]:bounds[w+1]]``."""
        p0, n0 = self._state()
        kern = _kernels()
        if kern is None:
            parts = [adaptive_ref.encode(values[a:b], p0, n0) for a, b in zip(bounds[:-1], bounds[1:])]
            ob = np.concatenate([[0], np.cumsum([len(p) for p in parts])]).astype(np.int64)
            costs = np.array([8 * len(p) << 16 for p in parts], np.int64)
            return np.frombuffer(b"".join(parts), np.uint8), ob, costs
        tally = np.zeros((K.NMODELS, 2), np.int64)
        buf, ob, costs = kern[0](values, bounds, p0, n0, _cost(), tally)
        return buf, ob, costs

    def encode_many(self, windows) -> list[bytes]:
        flat, bounds = _as_windows(windows)
        buf, ob, _ = self.encode_flat(flat, bounds)
        raw = buf.tobytes()
        return [raw[a:b] for a, b in zip(ob[:-1].tolist(), ob[1:].tolist())]

    def encode(self, values) -> bytes:
        return self.encode_many([np.asarray(values)])[0]

    def cost_bits(self, values) -> float:
        """Ideal code length of the window ``values`` under the adapting models (sum of -log2 p; the
        stored bytes add at most a few bits of termination)."""
        flat, bounds = _as_windows([np.asarray(values)])
        return float(self.encode_flat(flat, bounds)[2].sum()) / (1 << 16)

    def decode_flat(self, buf: np.ndarray, starts: np.ndarray, ends: np.ndarray, n: int,
                    strict: bool = True) -> np.ndarray:
        """Windows of ``n`` values each from ``buf[starts[w]:ends[w]]`` (a Parquet binary column's data
        buffer and offsets, no copies), as one flat int64 array."""
        starts = np.asarray(starts, np.int64)
        ends = np.asarray(ends, np.int64)
        if not 0 <= n <= MAX_N:
            raise ArchiveCorrupt(f"a window length is outside 0..{MAX_N}; the archive is damaged")
        if len(starts) != len(ends) or (len(starts) and (np.any(ends < starts) or starts.min() < 0
                                                         or ends.max() > len(buf))):
            raise ArchiveCorrupt("adaptive-coded windows point outside their column; the archive is damaged")
        p0, n0 = self._state()
        bounds = np.arange(len(starts) + 1, dtype=np.int64) * n
        kern = _kernels()
        if kern is None:
            values = np.array([v for a, b in zip(starts.tolist(), ends.tolist())
                               for v in adaptive_ref.decode(bytes(buf[a:b]), n, p0, n0)], dtype=np.int64)
        else:
            values = np.empty(int(bounds[-1]), np.int64)
            bad, err = kern[1](np.asarray(buf, np.uint8), starts, ends, bounds, p0, n0, values)
            if bad >= 0:
                raise ArchiveCorrupt(f"adaptive-coded window {bad}: {_ERRORS[err]}; the archive is damaged")
        if strict:
            buf_again, ob, _ = self.encode_flat(values, bounds)
            for w, (a, b) in enumerate(zip(starts.tolist(), ends.tolist())):
                if not np.array_equal(buf[a:b], buf_again[ob[w]:ob[w + 1]]):
                    raise ArchiveCorrupt(f"adaptive-coded window {w} is not the code of what it decodes to; "
                                         "the archive is damaged")
        return values

    def decode_many(self, payloads: Sequence[bytes], lengths, strict: bool = True) -> list[np.ndarray]:
        lens = np.asarray(lengths, dtype=np.int64).reshape(-1)
        if len(lens) != len(payloads):
            raise BadInput(f"{len(payloads)} payloads but {len(lens)} lengths; give one length per payload")
        out = []
        for n in np.unique(lens).tolist():               # one flat call per window length
            sel = np.flatnonzero(lens == n)
            parts = [bytes(payloads[i]) for i in sel]
            ends = np.cumsum([len(p) for p in parts]).astype(np.int64)
            starts = ends - np.array([len(p) for p in parts], np.int64)
            flat = self.decode_flat(np.frombuffer(b"".join(parts), np.uint8), starts, ends, int(n), strict)
            out += list(zip(sel.tolist(), flat.reshape(len(sel), int(n)) if n else [flat[:0]] * len(sel)))
        return [v for _, v in sorted(out, key=lambda t: t[0])]

    def decode(self, payload: bytes, n: int, strict: bool = True) -> np.ndarray:
        return self.decode_many([payload], [n], strict)[0]

    # -- config ------------------------------------------------------------------
    def get_config(self) -> dict:
        return {"id": self.id, "init": base64.b64encode(self.init).decode("ascii")}

    @classmethod
    def from_config(cls, config: dict) -> "AdaptiveCoder":
        expect_id(config, cls.id)
        try:
            init = base64.b64decode(str(config.get("init", "")), validate=True)
        except (ValueError, binascii.Error):
            raise ArchiveCorrupt("the adaptive coder's initial state is not base64; the archive is damaged") from None
        return cls(init)

    @classmethod
    def fit(cls, samples: Sequence[np.ndarray]) -> "AdaptiveCoder":
        """A coder whose models start at their frequencies when coding the windows ``samples``."""
        return cls.fit_sized(samples)[0]

    @classmethod
    def fit_sized(cls, samples) -> tuple["AdaptiveCoder", np.ndarray | None]:
        """:meth:`fit`, and the byte length of each window of ``samples`` coded from rest (by ``AdaptiveCoder()``),
        which the fitting pass codes anyway (None without numba)."""
        flat, bounds = _as_windows(samples)
        kern = _kernels()
        if kern is None or not len(flat):
            return cls(), None
        p0, n0 = _initial_state(b"")
        tally = np.zeros((K.NMODELS, 2), np.int64)
        ob = kern[0](flat, bounds, p0, n0, _cost(), tally)[1]
        p = (2 * tally[:, 0] + 1) * 256 // (2 * tally.sum(axis=1) + 2)        # KT estimate of P(0), 8 bits
        return cls(zlib.compress(np.clip(p, 0, 255).astype(np.uint8).tobytes(), 9)), np.diff(ob)


@cache
def _initial_state(init: bytes) -> tuple[np.ndarray, np.ndarray]:
    """(probabilities, counts) every window starts from; read-only arrays."""
    if not init:
        p = np.full(K.NMODELS, K.PROB_ONE // 2, np.int64)
        n = np.zeros(K.NMODELS, np.int64)
    else:
        try:
            raw = zlib.decompressobj().decompress(init, K.NMODELS + 1)
        except zlib.error:
            raw = b""
        if len(raw) != K.NMODELS:
            raise ArchiveCorrupt("the adaptive coder's initial state is malformed; the archive is damaged")
        p = (np.frombuffer(raw, np.uint8).astype(np.int64) << 7) + 64
        n = np.full(K.NMODELS, INIT_COUNT, np.int64)
    p.flags.writeable = False
    n.flags.writeable = False
    return p, n
