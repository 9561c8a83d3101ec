"""Range coding of token windows in compiled loops (numba), byte for byte the stream of :mod:`tsarchive.entropy`.

The archive's payload format is defined in :mod:`tsarchive.entropy`: per
window, the tokens and then the raw-bit chunks, range coded with 64-bit state,
32-bit words written big-endian, 24-bit frequencies, and the shortest
terminating byte string.  That module first coded it through constriction's
``RangeEncoder``/``RangeDecoder`` one window per Python call; this module codes
whole batches of windows in one compiled call that releases the GIL.  The
bytes are the same (tests compare the two on random tables and values, and the
golden archive, written through constriction, decodes here), and constriction
stays the fallback when numba is missing.

Encoder (per window), with ``scale = range >> 24`` for a symbol of cumulative
``c`` and frequency ``f`` (uniform chunks of ``k`` bits: ``f = 2**(24-k)``,
``c = chunk * f``)::

    lower += scale * c        (a wrap carries +1 into the words already written)
    range  = scale * f
    if range < 2**32: write the top word of lower; lower <<= 32; range <<= 32

The decoder mirrors it with ``point``: ``quantile = (point - lower) // scale``
(wrapping subtraction), the token whose interval holds the quantile, the same
state update, and the next word (or zero past the end) shifted into
``point``.  Integer arithmetic only: decoding cannot depend on the thread
count or the machine.
"""

from __future__ import annotations

from functools import cache

import numpy as np

from .compiled import compile_kernels

PRECISION = 24
LUT_BITS = 12          # quantile >> (24 - 12) indexes the first candidate token


def lookup_table(cum: np.ndarray) -> np.ndarray:
    """``lut[b]`` = the token whose interval holds quantile ``b << 12`` (decoder start point)."""
    starts = np.arange(1 << LUT_BITS, dtype=np.int64) << (PRECISION - LUT_BITS)
    return (np.searchsorted(cum[1:].astype(np.int64), starts, side="right")).astype(np.int32)


# ---------------------------------------------------------------- kernels (plain Python; compiled by _kernels)

def _encode_kernel(values, bounds, center, d, m, cum, freq):
    """Code windows ``values[bounds[w]:bounds[w+1]]``; returns (bytes, byte bounds per window)."""
    u64 = np.uint64
    M64 = u64(0xFFFFFFFFFFFFFFFF)
    ONE = u64(1)
    W32 = u64(1) << u64(32)
    mask32 = W32 - ONE
    nw = bounds.shape[0] - 1
    out = np.empty(max(64, values.shape[0] * 2 + 64), np.uint8)
    ob = np.zeros(nw + 1, np.int64)
    pos = 0
    cu = u64(center)
    ud = u64(d)
    um = u64(m)
    big0 = ONE << ud
    mmask = (ONE << um) - ONE
    for w in range(nw):
        a, b = bounds[w], bounds[w + 1]
        start = pos
        lower = u64(0)
        rng = M64
        tok = u64(0)
        nb = u64(0)
        # two passes over the window: tokens first, then the raw-bit chunks of the binned values
        for phase in range(2):
            for i in range(a, b):
                x = u64(values[i]) - cu
                zz = (x << ONE) ^ u64(np.int64(x) >> 63)
                if zz < big0:
                    if phase == 1:
                        continue
                    nsym = 1
                    tok = zz
                    nb = u64(0)
                else:
                    e = u64(0)                   # floor(log2(zz)) by halving
                    y = zz
                    for half in (32, 16, 8, 4, 2, 1):
                        if (y >> u64(half)) != u64(0):
                            y = y >> u64(half)
                            e += u64(half)
                    nb = e - um
                    if phase == 0:
                        nsym = 1
                        tok = big0 + ((e - ud) << um) + ((zz >> nb) & mmask)
                    else:
                        nsym = int((nb + u64(15)) // u64(16))
                for s in range(nsym):
                    if phase == 0:
                        c = cum[tok]
                        f = freq[tok]
                    else:
                        sh = u64(16 * s)
                        k = nb - sh
                        if k > u64(16):
                            k = u64(16)
                        f = ONE << (u64(PRECISION) - k)
                        c = ((zz >> sh) & ((ONE << k) - ONE)) * f
                    scale = rng >> u64(PRECISION)
                    new_lower = lower + scale * c
                    if new_lower < lower:            # carry into the words already written
                        _carry(out, start, pos)
                    lower = new_lower
                    rng = scale * f
                    if rng < W32:
                        out = _room(out, pos, 4)
                        _put_word(out, pos, lower >> u64(32))
                        pos += 4
                        lower = lower << u64(32)
                        rng = rng << u64(32)
        out = _room(out, pos, 16)
        if b > a:
            # termination: the shortest bytes selecting a point of [lower, lower + range)
            if lower > M64 - mask32:
                # the interval reaches past 2**64: the sealing point carries (constriction's own seal words)
                _carry(out, start, pos)
                pw = (lower + mask32) >> u64(32)
                _put_word(out, pos, pw)
                pos += 4
                if ((lower + rng) >> u64(32)) == pw:
                    _put_word(out, pos, u64(0))
                    pos += 4
            else:
                if rng - ONE > M64 - lower:
                    hi = M64
                else:
                    hi = lower + rng - ONE
                # k bytes hold lower rounded up to a multiple of 2**(64-8k), if that is <= hi (k = 8: lower)
                kk = 0 if lower == u64(0) else 8
                qv = lower
                for k in range(1, 8 if kk else 0):
                    s = u64(64 - 8 * k)
                    cnum = lower >> s
                    if (lower & ((ONE << s) - ONE)) != u64(0):
                        cnum += ONE
                    if cnum < (ONE << u64(8 * k)) and (cnum << s) <= hi:
                        kk, qv = k, cnum
                        break
                for t in range(kk):
                    out[pos + t] = np.uint8((qv >> u64(8 * (kk - 1 - t))) & u64(0xFF))
                pos += kk
            while pos > start and out[pos - 1] == 0:
                pos -= 1
        ob[w + 1] = pos
    return out[:pos].copy(), ob


def _carry_py(out, start, pos):
    """Add 1 to the big-endian number in ``out[start:pos]`` (a carry into the words already written)."""
    j = pos - 1
    while j >= start:
        out[j] = np.uint8((np.int64(out[j]) + 1) & 0xFF)
        if out[j] != 0:
            break
        j -= 1


def _put_word_py(out, pos, word):
    """Write the 32-bit ``word`` big-endian at ``out[pos:pos+4]``."""
    for t in range(4):
        out[pos + t] = np.uint8((word >> np.uint64(24 - 8 * t)) & np.uint64(0xFF))


def _room_py(out, pos, need):
    """``out`` with room for ``need`` more bytes after ``pos`` (a doubled copy when short)."""
    if pos + need <= out.shape[0]:
        return out
    bigger = np.empty(out.shape[0] * 2 + need, np.uint8)
    bigger[:pos] = out[:pos]
    return bigger


def _word_py(buf, p, end, idx):
    """Big-endian 32-bit word ``idx`` of ``buf[p:end]``; bytes past ``end`` read as zero."""
    v = np.uint64(0)
    q = p + 4 * idx
    for t in range(4):
        v = v << np.uint64(8)
        if q + t < end:
            v = v | np.uint64(buf[q + t])
    return v


# the kernels' helpers, compiled and rebound by _kernels()
_carry, _put_word, _room, _word = _carry_py, _put_word_py, _room_py, _word_py
_HELPERS = ("_carry", "_put_word", "_room", "_word")


def _decode_kernel(buf, starts, ends, bounds, center, d, m, cum, freq, lut, values):
    """Decode window ``w`` (bytes ``buf[starts[w]:ends[w]]``) into ``values[bounds[w]:bounds[w+1]]``;
    returns the first undecodable window or -1."""
    u64 = np.uint64
    M64 = u64(0xFFFFFFFFFFFFFFFF)
    ONE = u64(1)
    W32 = u64(1) << u64(32)
    TOP = ONE << u64(PRECISION)
    ud = u64(d)
    um = u64(m)
    cu = u64(center)
    big0 = ONE << ud
    nw = bounds.shape[0] - 1
    for w in range(nw):
        p, end = starts[w], ends[w]
        a, b = bounds[w], bounds[w + 1]
        point = (_word(buf, p, end, 0) << u64(32)) | _word(buf, p, end, 1)
        widx = 2
        lower = u64(0)
        rng = M64
        for i in range(a, b):                     # tokens
            scale = rng >> u64(PRECISION)
            q = (point - lower) // scale
            if q >= TOP:
                return w
            t = lut[np.int64(q >> u64(PRECISION - LUT_BITS))]
            while cum[t + 1] <= q:
                t += 1
            lower = lower + scale * cum[t]
            rng = scale * freq[t]
            if rng < W32:
                lower = lower << u64(32)
                rng = rng << u64(32)
                point = (point << u64(32)) | _word(buf, p, end, widx)
                widx += 1
            values[i] = np.int64(t)
        for i in range(a, b):                     # raw-bit chunks of the binned tokens, in order
            t = u64(values[i])
            if t < big0:
                zz = t
            else:
                tt = t - big0
                e = (tt >> um) + ud
                nb = e - um
                raw = u64(0)
                sh = u64(0)
                while sh < nb:
                    k = nb - sh
                    if k > u64(16):
                        k = u64(16)
                    f = ONE << (u64(PRECISION) - k)
                    scale = rng >> u64(PRECISION)
                    q = (point - lower) // scale
                    if q >= TOP:
                        return w
                    sym = q // f
                    lower = lower + scale * (sym * f)
                    rng = scale * f
                    if rng < W32:
                        lower = lower << u64(32)
                        rng = rng << u64(32)
                        point = (point << u64(32)) | _word(buf, p, end, widx)
                        widx += 1
                    raw = raw | (sym << sh)
                    sh += u64(16)
                zz = (ONE << e) | ((tt & ((ONE << um) - ONE)) << nb) | raw
            values[i] = np.int64(((zz >> ONE) ^ (u64(0) - (zz & ONE))) + cu)
    return -1


@cache
def _kernels():
    """Compiled (encode, decode) kernels, or ``None`` without numba (then constriction codes); the
    kernels call the ``_HELPERS`` globals, compiled first (:func:`tsarchive.compiled.compile_kernels`)."""
    return compile_kernels((_encode_kernel, _decode_kernel), globals(), _HELPERS)


def available() -> bool:
    return _kernels() is not None


def encode(values: np.ndarray, bounds: np.ndarray, center: int, d: int, m: int,
           cum: np.ndarray, freq: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(payload bytes uint8, byte bounds) of every window, or raise if numba is missing."""
    enc = _kernels()[0]
    return enc(values, bounds, np.int64(center), d, m, cum, freq)


def decode(buf: np.ndarray, starts: np.ndarray, ends: np.ndarray, bounds: np.ndarray, center: int, d: int, m: int,
           cum: np.ndarray, freq: np.ndarray, lut: np.ndarray) -> tuple[np.ndarray, int]:
    """(values int64, first bad window or -1); window ``w`` is ``buf[starts[w]:ends[w]]``."""
    values = np.empty(int(bounds[-1]), np.int64)
    bad = _kernels()[1](buf, starts, ends, bounds, np.int64(center), d, m, cum, freq, lut, values)
    return values, int(bad)
