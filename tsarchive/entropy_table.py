"""Per-channel integer frequency tables and the token mapping of int64 values.

Tokens (exponent/mantissa binning, our own layout).  ``v`` maps to
``u = zigzag(v - center)`` in wrapping 64-bit arithmetic, so every int64 is
codable.  ``u < 2**d`` is its own token; a larger ``u`` whose leading one is
bit ``e`` becomes token ``2**d + ((e - d) << m) + (the m bits after the
leading one)`` and its low ``e - m`` bits are raw bits (coded uniformly by
:mod:`tsarchive.entropy`).  The alphabet is bounded (:func:`n_tokens`), wide
distributions cost about their entropy and rare spikes need no escape path:
every token has frequency >= 1.

A :class:`FreqTable` holds integer frequencies summing to ``2**24``, the
precision of constriction's default coders.  Its model is
``Categorical(freqs - 1, perfect=False)``, whose quantiser then reproduces the
integers exactly (scale 1.0, integer cumulative sums); each table's model is
verified once by probing every interval edge, so a constriction build that
quantised differently is refused rather than silently misread.

:func:`build_table` fits a table to a channel's residuals; everything a
decoder needs is the stored integers (``to_bytes``/``from_bytes``).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from tsarchive import fixedlog
from tsarchive.errors import ArchiveCorrupt, BadInput

PRECISION = 24
TOTAL = 1 << PRECISION
MAX_DIRECT_BITS = 16
MAX_MANTISSA_BITS = 3
TABLE_VERSION = 1
_M64 = (1 << 64) - 1
_U64 = np.uint64


def n_tokens(direct_bits: int, mantissa_bits: int) -> int:
    """Alphabet size of the token scheme for these parameters."""
    return (1 << direct_bits) + ((64 - direct_bits) << mantissa_bits)


def _corrupt(what: str) -> ArchiveCorrupt:
    return ArchiveCorrupt(f"{what}; the archive is damaged, restore it from a copy")


def _put_varint(out: bytearray, x: int) -> None:
    while x >= 0x80:
        out.append((x & 0x7F) | 0x80)
        x >>= 7
    out.append(x)


def _get_varint(buf: bytes, pos: int) -> tuple[int, int]:
    x = shift = 0
    while pos < len(buf) and shift <= 28:
        b = buf[pos]
        pos += 1
        x |= (b & 0x7F) << shift
        shift += 7
        if not b & 0x80:
            return x, pos
    raise _corrupt("frequency table bytes are truncated or malformed")


@dataclass(frozen=True)
class FreqTable:
    """Per-channel integer model: ``freqs[t] / 2**24`` is the probability of token ``t``.

    ``center``: int64; ``direct_bits`` (d): 0..16; ``mantissa_bits`` (m):
    0..min(3, d); ``freqs``: exactly ``n_tokens(d, m)`` ints >= 1 summing to
    2**24.  Anything else raises ArchiveCorrupt.  Equality/hash use these ints.
    """

    center: int
    direct_bits: int
    mantissa_bits: int
    freqs: tuple[int, ...]

    def __post_init__(self) -> None:
        try:  # normalise numpy scalars / arrays to plain ints so equality and hashing work
            for name in ("center", "direct_bits", "mantissa_bits"):
                object.__setattr__(self, name, int(getattr(self, name)))
            object.__setattr__(self, "freqs", tuple(int(f) for f in self.freqs))
        except (TypeError, ValueError):
            raise _corrupt("frequency table fields are not integers") from None
        d, m = self.direct_bits, self.mantissa_bits
        if not (-(1 << 63) <= self.center < (1 << 63) and 0 <= d <= MAX_DIRECT_BITS
                and 0 <= m <= min(MAX_MANTISSA_BITS, d) and len(self.freqs) == n_tokens(d, m)
                and min(self.freqs) >= 1 and sum(self.freqs) == TOTAL):
            raise _corrupt("frequency table is inconsistent (bad parameters or frequencies)")

    @functools.cached_property
    def freq_array(self) -> np.ndarray:
        return np.asarray(self.freqs, dtype=np.int64)

    @functools.cached_property
    def token_cost(self) -> np.ndarray:
        """Ideal code length in bits of each token (raw bits excluded): ``24 - log2(freq)`` from
        :func:`fixedlog.log2q`, a multiple of 2**-16 bit, so sums of costs are exact (order-free)."""
        return fixedlog.bits((PRECISION << fixedlog.FRAC) - fixedlog.log2q(self.freq_array))

    @functools.cached_property
    def direct_values(self) -> np.ndarray:
        """int64 value of each direct token (``u < 2**direct_bits``)."""
        return _unzigzag(np.arange(1 << self.direct_bits, dtype=_U64), self.center)

    @functools.cached_property
    def model(self):
        """constriction Categorical reproducing ``freqs`` exactly (verified once)."""
        import constriction

        f = self.freq_array
        model = constriction.stream.model.Categorical((f - 1).astype(np.float64), perfect=False)
        cum = np.concatenate(([0], np.cumsum(f)))
        for i, q in enumerate(np.stack([cum[:-1], cum[1:] - 1], axis=1).ravel().tolist()):
            # an ANS state whose low 24 bits are q decodes the token whose interval holds q
            if constriction.stream.stack.AnsCoder(np.array([q, 1], np.uint32)).decode(model) != i // 2:
                raise ArchiveCorrupt("the installed constriction quantises tables differently; install constriction 0.5")
        return model

    def _trimmed(self) -> tuple[int, ...]:
        k = len(self.freqs)
        while k and self.freqs[k - 1] == 1:
            k -= 1
        return self.freqs[:k]

    def to_dict(self) -> dict:
        """JSON-safe dict; ``freqs`` omits the trailing entries equal to 1."""
        return {"center": self.center, "direct_bits": self.direct_bits,
                "mantissa_bits": self.mantissa_bits, "freqs": list(self._trimmed())}

    @classmethod
    def from_dict(cls, d: dict) -> "FreqTable":
        try:
            db, mb, center = int(d["direct_bits"]), int(d["mantissa_bits"]), int(d["center"])
            given = tuple(int(f) for f in d["freqs"])
        except (KeyError, TypeError, ValueError) as exc:
            raise _corrupt(f"frequency table entry is malformed ({exc})") from None
        return cls._padded(center, db, mb, given)

    def to_bytes(self) -> bytes:
        """u8 version, u8 d, u8 m, i64 LE center, varint K, K varint freqs (rest are 1)."""
        out = bytearray((TABLE_VERSION, self.direct_bits, self.mantissa_bits))
        out += int(self.center).to_bytes(8, "little", signed=True)
        body = self._trimmed()
        _put_varint(out, len(body))
        for f in body:
            _put_varint(out, f)
        return bytes(out)

    @classmethod
    def from_bytes(cls, buf: bytes) -> "FreqTable":
        buf = bytes(buf)
        if len(buf) < 12 or buf[0] != TABLE_VERSION:
            raise _corrupt("frequency table bytes are truncated or of an unknown version")
        k, pos = _get_varint(buf, 11)
        freqs = []
        for _ in range(min(k, len(buf))):
            f, pos = _get_varint(buf, pos)
            freqs.append(f)
        if len(freqs) != k or pos != len(buf):
            raise _corrupt("frequency table bytes are truncated or have trailing garbage")
        return cls._padded(int.from_bytes(buf[3:11], "little", signed=True), buf[1], buf[2], tuple(freqs))

    @classmethod
    def _padded(cls, center: int, db: int, mb: int, given: tuple[int, ...]) -> "FreqTable":
        if not (0 <= db <= MAX_DIRECT_BITS and 0 <= mb <= MAX_MANTISSA_BITS and len(given) <= n_tokens(db, mb)):
            raise _corrupt("frequency table has out-of-range parameters")
        return cls(center, db, mb, given + (1,) * (n_tokens(db, mb) - len(given)))


# ---------------------------------------------------------------- token mapping

def _zigzag(values: np.ndarray, center: int) -> np.ndarray:
    x = values.view(_U64) - _U64(center & _M64)
    return (x << _U64(1)) ^ (x.view(np.int64) >> 63).view(_U64)


def _unzigzag(u: np.ndarray, center: int) -> np.ndarray:
    x = (u >> _U64(1)) ^ (_U64(0) - (u & _U64(1)))
    return (x + _U64(center & _M64)).view(np.int64)


def _top_bit(u: np.ndarray) -> np.ndarray:
    """floor(log2(u)) for uint64 u >= 1, exact (float guess, then corrected)."""
    e = (np.frexp(u.astype(np.float64))[1] - 1).astype(np.int64)
    return e - ((u >> e.astype(_U64)) == 0)


def _as_int64(values) -> np.ndarray:
    a = np.asarray(values)
    if a.ndim != 1 or a.dtype.kind not in "iub" or a.dtype == np.uint64:
        raise BadInput(f"entropy coding needs a 1-D integer array, got {a.dtype} {a.shape}; convert it to int64")
    return np.ascontiguousarray(a, dtype=np.int64)


def tokenize(values, table: FreqTable) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(tokens int32, raw bits uint64, raw bit counts int64) of ``values``.

    ``raw`` and ``nbits`` list the binned entries (token >= 2**d) in order.
    """
    u = _zigzag(_as_int64(values), table.center)
    d, m = table.direct_bits, table.mantissa_bits
    big = u >= _U64(1 << d)
    if not big.any():
        return u.astype(np.int32), np.zeros(0, _U64), np.zeros(0, np.int64)
    tok = u.astype(np.int64)
    ub = u[big]
    e = _top_bit(ub)
    nb = e - m
    mant = (ub >> nb.astype(_U64)) & _U64((1 << m) - 1)
    tok[big] = (1 << d) + ((e - d) << m) + mant.astype(np.int64)
    return tok.astype(np.int32), ub & ((_U64(1) << nb.astype(_U64)) - _U64(1)), nb


def order0_entropy_bits(values) -> float:
    """Empirical order-0 entropy of ``values`` in total bits: -sum c*log2(c/N)."""
    a = _as_int64(values)
    if not a.size:
        return 0.0
    c = np.unique(a, return_counts=True)[1].astype(np.float64)
    return float(-(c * np.log2(c / a.size)).sum())


# ---------------------------------------------------------------- table building

def _quantize(counts: np.ndarray) -> tuple[int, ...]:
    """Integer frequencies summing to 2**24, each >= 1, by largest remainder."""
    counts = counts.astype(np.int64)
    if counts.sum() == 0:
        counts[0] = 1
    while counts.sum() > (1 << 38):  # keep counts * 2**24 inside int64
        counts = np.where(counts > 0, np.maximum(counts >> 1, 1), 0)
    n, free = int(counts.sum()), TOTAL - len(counts)
    scaled = counts * free
    base = scaled // n
    order = np.lexsort((np.arange(len(counts)), -(scaled - base * n)))
    base[order[: free - int(base.sum())]] += 1
    return tuple((base + 1).tolist())


def _candidate(hs, hb, ev, d, m):
    """Token counts and total raw bits for parameters (d, m) from histograms (int64, exact)."""
    D, T = 1 << d, n_tokens(d, m)
    vs = np.arange(D, len(hs), dtype=np.int64)
    evs = ev[D:]
    tok = D + ((evs - d) << m) + ((vs >> (evs - m)) & ((1 << m) - 1))
    # bincount adds float64 weights; integer counts below 2**53 add exactly in any order
    counts = np.rint(np.bincount(tok, weights=hs[D:], minlength=T)).astype(np.int64)
    counts[:min(D, len(hs))] += hs[:D]
    e = np.arange(64)[:, None]
    tb = D + ((e - d) << m) + (np.arange(8)[None, :] >> (MAX_MANTISSA_BITS - m))
    nz = hb > 0
    counts += np.rint(np.bincount(tb[nz], weights=hb[nz], minlength=T)).astype(np.int64)
    raw = int((hs[D:] * (evs - m)).sum() + (hb * (e - m)).sum())
    return counts, raw


def _entropy_units(c: np.ndarray, n: int) -> int:
    """``-sum c log2(c / n)`` = ``n log2 n - sum c log2 c`` in units of 2**-16 bit, exactly in integers
    (Python integers: ``c log2 c`` may pass int64 for large channels)."""
    lc = fixedlog.log2q(c)
    if n < (1 << 31):                                  # c * log2q(c) <= 2**31 * 2**21, sum < 2**63
        part = int((c * lc).sum())
    else:
        part = sum(int(a) * int(b) for a, b in zip(c.tolist(), lc.tolist()))
    return n * fixedlog.log2q_int(n) - part


def build_table(samples, max_symbols: int = 4096) -> FreqTable:
    """Fit a table to ``samples`` (all windows of one channel, concatenated).

    Chooses ``center`` (median) and the binning parameters with at most
    ``max_symbols`` tokens that minimise the estimated size: entropy of the
    tokens + raw bits + table bytes.  Every token gets frequency >= 1, so any
    int64 stays codable.  The estimate is an integer (units of 2**-16 bit,
    :mod:`tsarchive.fixedlog`), so the choice is the same on every machine;
    decoding depends only on the stored integers.
    """
    a = _as_int64(np.ravel(np.asarray(samples)))
    if max_symbols < n_tokens(0, 0):
        raise BadInput(f"max_symbols={max_symbols} is too small; use at least {n_tokens(0, 0)}")
    sub = np.sort(a[:: max(1, a.size >> 20)])  # median of <= ~2M evenly spaced samples
    center = int(sub[sub.size // 2]) if a.size else 0
    hs = np.zeros(1 << MAX_DIRECT_BITS, np.int64)  # counts of u < 2**16
    hb = np.zeros(64 * 8, np.int64)  # counts of (leading-one bit, next 3 bits) of larger u
    for k in range(0, a.size, 1 << 20):
        u = _zigzag(a[k:k + (1 << 20)], center)
        small = u < _U64(1 << MAX_DIRECT_BITS)
        hs += np.bincount(u[small].astype(np.int64), minlength=1 << MAX_DIRECT_BITS)
        ub = u[~small]
        eb = _top_bit(ub)
        hb += np.bincount(eb * 8 + ((ub >> (eb - 3).astype(_U64)) & _U64(7)).astype(np.int64), minlength=64 * 8)
    used_hs = np.flatnonzero(hs)
    hs = hs[:used_hs[-1] + 1 if used_hs.size else 1]     # trailing empty bins change no candidate's counts
    hb = hb.reshape(64, 8)
    ev = _top_bit(np.maximum(np.arange(len(hs), dtype=_U64), _U64(1)))
    n = max(a.size, 1)
    best = None
    for d in range(MAX_DIRECT_BITS + 1):
        for m in range(min(MAX_MANTISSA_BITS, d) + 1):
            if n_tokens(d, m) > max_symbols:
                continue
            counts, raw = _candidate(hs, hb, ev, d, m)
            used = np.flatnonzero(counts)
            span = int(used[-1]) + 1 if used.size else 0
            table_bits = 8 * (12 + 3 * used.size + (span - used.size))
            # mass given to unused tokens: n T / 2**24 / ln 2 bits, with 1/ln 2 = 1.4426950408889634 as
            # the integer 94548 / 2**16 (rounded once, a constant)
            floor_units = n * n_tokens(d, m) * _INV_LN2_UNITS >> PRECISION
            cost = _entropy_units(counts[used], n) + ((raw + table_bits) << fixedlog.FRAC) + floor_units
            if best is None or cost < best[0]:
                best = (cost, d, m, counts)
    _, d, m, counts = best
    return FreqTable(center, d, m, _quantize(counts))


_INV_LN2_UNITS = 94548        # round(2**16 / ln 2)
