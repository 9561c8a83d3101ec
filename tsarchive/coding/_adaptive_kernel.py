"""The adaptive coder's batch loops, written once in plain Python and compiled by numba.

The stream they write is specified in :mod:`tsarchive.coding.adaptive` (the
module docstring) and written a second time, for readability and as the
tests' reference, with Python integers in :mod:`tsarchive.coding.adaptive_ref`.
These functions work on arrays and integers only, so numba can compile
them; without numba the reference codes instead.
"""

from __future__ import annotations

import numpy as np

PROB_BITS = 15
PROB_ONE = 1 << PROB_BITS
TOP = 1 << 24
MAX_SHIFT = 7
COUNT_CAP = (1 << MAX_SHIFT) - 1
NC = 20                      # regular contexts: min(bit_length(2|r1| + |r2| + |r3|), NC - 1)
NE = 24                      # adaptive exponent bins per context row (bin j >= NE - 1 shares the last)
ROWS = NC + 1                # the last exponent row codes the sample that ends a zero run
NRUN = 32                    # run-mode states (JPEG-LS's RUNindex)
RUN_ENTER = 2                # zero residuals in a row that switch to run mode
ACT_CAP = 1 << 40            # |r| is capped here before it enters the context sum
Z0 = 0
E0 = Z0 + NC
S0 = E0 + ROWS * NE
M0 = S0 + 3
R0 = M0 + 64 * 3
NMODELS = R0 + NRUN
# JPEG-LS run-length order table J (ITU-T T.87 | ISO/IEC 14495-1, A.7.1.2)
RUN_J = np.array([0, 0, 0, 0, 1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3,
                  4, 4, 5, 5, 6, 6, 7, 7, 8, 9, 10, 11, 12, 13, 14, 15], dtype=np.int64)
SHIFT_OF = np.array([min(MAX_SHIFT, (n + 1).bit_length()) for n in range(COUNT_CAP + 1)], dtype=np.int64)

ERR_NONE, ERR_RANGE, ERR_EXPONENT, ERR_TRAILING = 0, 1, 2, 3


def cost_table() -> np.ndarray:
    """``cost[p]`` = -log2(p / 2**15) in units of 2**-16 bit, from the integer log2 of :mod:`tsarchive.fixedlog`."""
    from tsarchive import fixedlog
    p = np.arange(PROB_ONE, dtype=np.int64)
    p[0] = 1
    return (PROB_BITS << fixedlog.FRAC) - fixedlog.log2q(p)


# ---------------------------------------------------------------- encoder helpers (compiled by _compile)
# The interval (low, range) and the ideal cost travel as locals through return values: numba keeps
# them in registers (a state array costs a memory round trip per bit, 8x slower).  Only the byte
# output (cache, pending count, position, skip flag) lives in ``st``.

def _shift_low_py(st, out, low):
    """LZMA's ShiftLow: settle the top byte of ``low`` (and any pending 0xFF bytes); returns the new low."""
    if low < np.uint64(0xFF000000) or low >= (np.uint64(1) << np.uint64(32)):
        carry = low >> np.uint64(32)
        temp = st[0]
        while True:
            if st[3] != np.uint64(0):
                st[3] = np.uint64(0)          # the leading byte is always zero: it is not stored
            else:
                out[np.int64(st[2])] = np.uint8((temp + carry) & np.uint64(0xFF))
                st[2] += np.uint64(1)
            temp = np.uint64(0xFF)
            st[1] -= np.uint64(1)
            if st[1] == np.uint64(0):
                break
        st[0] = (low >> np.uint64(24)) & np.uint64(0xFF)
    st[1] += np.uint64(1)
    return (low & np.uint64(0x00FFFFFF)) << np.uint64(8)


def _bit_py(st, out, P, N, tally, cost, idx, bit, low, rng, acc):
    p = P[idx]
    bound = (rng >> np.uint64(PROB_BITS)) * np.uint64(p)
    n = N[idx]
    s = SHIFT_OF[n]
    if n < COUNT_CAP:
        N[idx] = n + 1
    if bit == 0:
        rng = bound
        acc += cost[p]
        P[idx] = p + ((PROB_ONE - p) >> s)
    else:
        low += bound
        rng -= bound
        acc += cost[PROB_ONE - p]
        P[idx] = p - (p >> s)
    tally[idx, bit] += 1
    while rng < np.uint64(TOP):
        rng = rng << np.uint64(8)
        low = _shift_low(st, out, low)
    return low, rng, acc


def _bypass_py(st, out, bit, low, rng, acc):
    rng = rng >> np.uint64(1)
    if bit:
        low += rng
    while rng < np.uint64(TOP):
        rng = rng << np.uint64(8)
        low = _shift_low(st, out, low)
    return low, rng, acc + (1 << 16)


def _room_py(out, st, need):
    pos = np.int64(st[2]) + np.int64(st[1]) + need
    if pos <= out.shape[0]:
        return out
    bigger = np.empty(out.shape[0] * 2 + pos, np.uint8)
    bigger[:np.int64(st[2])] = out[:np.int64(st[2])]
    return bigger


def _nonzero_py(st, out, P, N, tally, cost, v, row, psign, low, rng, acc):
    """Sign, exponent (unary, adaptive bins), two adaptive mantissa bits, the rest bypass;
    returns (sign state, low, range, cost)."""
    neg = 1 if v < 0 else 0
    low, rng, acc = _bit(st, out, P, N, tally, cost, S0 + psign, neg, low, rng, acc)
    m = np.uint64(0) - np.uint64(v) if neg else np.uint64(v)
    e = 0
    while e < 63 and (m >> np.uint64(e + 1)) != np.uint64(0):
        e += 1
    base = E0 + row * NE
    for j in range(e):
        low, rng, acc = _bit(st, out, P, N, tally, cost, base + min(j, NE - 1), 1, low, rng, acc)
    if e < 63:
        low, rng, acc = _bit(st, out, P, N, tally, cost, base + min(e, NE - 1), 0, low, rng, acc)
    if e >= 1:
        b1 = np.int64((m >> np.uint64(e - 1)) & np.uint64(1))
        low, rng, acc = _bit(st, out, P, N, tally, cost, M0 + 3 * e, b1, low, rng, acc)
        if e >= 2:
            b2 = np.int64((m >> np.uint64(e - 2)) & np.uint64(1))
            low, rng, acc = _bit(st, out, P, N, tally, cost, M0 + 3 * e + 1 + b1, b2, low, rng, acc)
            for k in range(e - 3, -1, -1):
                low, rng, acc = _bypass(st, out, np.int64((m >> np.uint64(k)) & np.uint64(1)), low, rng, acc)
    return (2 if neg else 1), low, rng, acc


def _mag_py(v):
    a = -v if v < 0 else v
    if a < 0 or a > ACT_CAP:           # -2**63 stays negative
        return ACT_CAP
    return a


def _context_py(a1, a2, a3):
    s = 2 * a1 + a2 + a3
    c = 0
    while s != 0 and c < NC - 1:
        s >>= 1
        c += 1
    return c


def _seal_py(st, out, low, rng):
    """Pick the point of [low, low + range) with the most trailing zero bits and write it out."""
    hi = low + rng
    for k in range(32, -1, -1):
        mask = (np.uint64(1) << np.uint64(k)) - np.uint64(1)
        v = (low + mask) & ~mask
        if v < hi:
            low = v
            break
    for _ in range(5):
        low = _shift_low(st, out, low)


# ---------------------------------------------------------------- kernels

def _encode_kernel(values, bounds, P0, N0, cost, tally):
    """Code windows ``values[bounds[w]:bounds[w+1]]``; returns (bytes, byte bounds, cost units per window).

    ``st`` (uint64[4]): cache byte, cache size, write position, "skip the next byte" flag."""
    nw = bounds.shape[0] - 1
    out = np.empty(max(1024, values.shape[0] // 2 + 1024), np.uint8)
    ob = np.zeros(nw + 1, np.int64)
    costs = np.zeros(nw, np.int64)
    st = np.zeros(4, np.uint64)
    P = P0.copy()
    N = N0.copy()
    for w in range(nw):
        a, b = bounds[w], bounds[w + 1]
        start = np.int64(st[2])
        if b > a:
            P[:] = P0
            N[:] = N0
            low = np.uint64(0)
            rng = np.uint64(0xFFFFFFFF)
            acc = np.int64(0)
            st[0] = np.uint64(0)
            st[1] = np.uint64(1)
            st[3] = np.uint64(1)
            a1 = a2 = a3 = 0
            psign = 0
            zr = 0
            ri = 0
            i = a
            while i < b:
                out = _room(out, st, 512)
                if zr >= RUN_ENTER:
                    run = 0
                    while i + run < b and values[i + run] == 0:
                        run += 1
                    while True:
                        out = _room(out, st, 512)
                        blk = np.int64(1) << RUN_J[ri]
                        if run >= blk:
                            low, rng, acc = _bit(st, out, P, N, tally, cost, R0 + ri, 1, low, rng, acc)
                            i += blk
                            run -= blk
                            ri = min(ri + 1, NRUN - 1)
                            if i == b:
                                break
                        elif i + run == b:
                            low, rng, acc = _bit(st, out, P, N, tally, cost, R0 + ri, 1, low, rng, acc)
                            i = b
                            break
                        else:
                            low, rng, acc = _bit(st, out, P, N, tally, cost, R0 + ri, 0, low, rng, acc)
                            for k in range(RUN_J[ri] - 1, -1, -1):
                                low, rng, acc = _bypass(st, out, (run >> k) & 1, low, rng, acc)
                            i += run
                            v = values[i]
                            psign, low, rng, acc = _nonzero(st, out, P, N, tally, cost, v, ROWS - 1, psign,
                                                            low, rng, acc)
                            a3 = 0 if run >= 1 else a2
                            a2 = 0
                            a1 = _mag(v)
                            ri = max(ri - 1, 0)
                            zr = 0
                            i += 1
                            break
                    continue
                v = values[i]
                c = _context(a1, a2, a3)
                if v == 0:
                    low, rng, acc = _bit(st, out, P, N, tally, cost, Z0 + c, 0, low, rng, acc)
                    zr += 1
                else:
                    low, rng, acc = _bit(st, out, P, N, tally, cost, Z0 + c, 1, low, rng, acc)
                    psign, low, rng, acc = _nonzero(st, out, P, N, tally, cost, v, c, psign, low, rng, acc)
                    zr = 0
                a3 = a2
                a2 = a1
                a1 = _mag(v)
                i += 1
            costs[w] = acc
            out = _room(out, st, 16)
            _seal(st, out, low, rng)
            pos = np.int64(st[2])
            while pos > start and out[pos - 1] == 0:
                pos -= 1
            st[2] = np.uint64(pos)
        ob[w + 1] = np.int64(st[2])
    return out[:np.int64(st[2])].copy(), ob, costs


# ---------------------------------------------------------------- decoder helpers
# ``ds`` (int64[3]): bytes read (counting the implicit leading zero byte), payload start, payload end.

def _next_byte_py(ds, buf):
    q = ds[1] + ds[0] - 1      # byte 0 is the implicit leading zero
    ds[0] += 1
    if q < ds[2]:
        return np.uint64(buf[q])
    return np.uint64(0)


def _dbit_py(ds, buf, P, N, idx, code, rng):
    p = P[idx]
    bound = (rng >> np.uint64(PROB_BITS)) * np.uint64(p)
    n = N[idx]
    s = SHIFT_OF[n]
    if n < COUNT_CAP:
        N[idx] = n + 1
    if code < bound:
        rng = bound
        P[idx] = p + ((PROB_ONE - p) >> s)
        bit = 0
    else:
        code -= bound
        rng -= bound
        P[idx] = p - (p >> s)
        bit = 1
    while rng < np.uint64(TOP):
        rng = rng << np.uint64(8)
        code = ((code << np.uint64(8)) | _next_byte(ds, buf)) & np.uint64(0xFFFFFFFF)
    return bit, code, rng


def _dbypass_py(ds, buf, code, rng):
    rng = rng >> np.uint64(1)
    bit = 0
    if code >= rng:
        code -= rng
        bit = 1
    while rng < np.uint64(TOP):
        rng = rng << np.uint64(8)
        code = ((code << np.uint64(8)) | _next_byte(ds, buf)) & np.uint64(0xFFFFFFFF)
    return bit, code, rng


def _dnonzero_py(ds, buf, P, N, row, psign, code, rng):
    """Inverse of ``_nonzero``: (value, sign state or -1 on an impossible value, code, range)."""
    neg, code, rng = _dbit(ds, buf, P, N, S0 + psign, code, rng)
    base = E0 + row * NE
    e = 0
    while e < 63:
        more, code, rng = _dbit(ds, buf, P, N, base + min(e, NE - 1), code, rng)
        if more == 0:
            break
        e += 1
    m = np.uint64(1) << np.uint64(e)
    if e >= 1:
        b1, code, rng = _dbit(ds, buf, P, N, M0 + 3 * e, code, rng)
        m |= np.uint64(b1) << np.uint64(e - 1)
        if e >= 2:
            b2, code, rng = _dbit(ds, buf, P, N, M0 + 3 * e + 1 + b1, code, rng)
            m |= np.uint64(b2) << np.uint64(e - 2)
            for k in range(e - 3, -1, -1):
                bb, code, rng = _dbypass(ds, buf, code, rng)
                m |= np.uint64(bb) << np.uint64(k)
    if e == 63 and (neg == 0 or m != (np.uint64(1) << np.uint64(63))):
        return np.int64(0), -1, code, rng
    v = np.int64(np.uint64(0) - m) if neg else np.int64(m)
    return v, (2 if neg else 1), code, rng


def _decode_kernel(buf, starts, ends, bounds, P0, N0, values):
    """Decode window ``w`` (bytes ``buf[starts[w]:ends[w]]``) into ``values[bounds[w]:bounds[w+1]]``;
    returns (first bad window or -1, error code)."""
    nw = bounds.shape[0] - 1
    ds = np.zeros(3, np.int64)
    P = P0.copy()
    N = N0.copy()
    for w in range(nw):
        a, b = bounds[w], bounds[w + 1]
        if b == a:
            if ends[w] != starts[w]:
                return w, ERR_TRAILING
            continue
        if ends[w] > starts[w] and buf[ends[w] - 1] == 0:
            return w, ERR_TRAILING
        P[:] = P0
        N[:] = N0
        rng = np.uint64(0xFFFFFFFF)
        ds[0] = 1
        ds[1] = starts[w]
        ds[2] = ends[w]
        code = np.uint64(0)
        for _ in range(4):
            code = (code << np.uint64(8)) | _next_byte(ds, buf)
        if code >= rng:
            return w, ERR_RANGE
        a1 = a2 = a3 = 0
        psign = 0
        zr = 0
        ri = 0
        i = a
        while i < b:
            if zr >= RUN_ENTER:
                while True:
                    blk = np.int64(1) << RUN_J[ri]
                    whole, code, rng = _dbit(ds, buf, P, N, R0 + ri, code, rng)
                    if whole == 1:
                        take = min(blk, b - i)
                        values[i:i + take] = 0
                        i += take
                        if take == blk:
                            ri = min(ri + 1, NRUN - 1)
                        if i == b:
                            break
                    else:
                        run = 0
                        for k in range(RUN_J[ri]):
                            bb, code, rng = _dbypass(ds, buf, code, rng)
                            run = (run << 1) | bb
                        if i + run >= b:
                            return w, ERR_RANGE
                        values[i:i + run] = 0
                        i += run
                        v, psign, code, rng = _dnonzero(ds, buf, P, N, ROWS - 1, psign, code, rng)
                        if psign < 0:
                            return w, ERR_EXPONENT
                        values[i] = v
                        a3 = 0 if run >= 1 else a2
                        a2 = 0
                        a1 = _mag(v)
                        ri = max(ri - 1, 0)
                        zr = 0
                        i += 1
                        break
                continue
            c = _context(a1, a2, a3)
            nz, code, rng = _dbit(ds, buf, P, N, Z0 + c, code, rng)
            if nz == 0:
                v = np.int64(0)
                zr += 1
            else:
                v, psign, code, rng = _dnonzero(ds, buf, P, N, c, psign, code, rng)
                if psign < 0:
                    return w, ERR_EXPONENT
                zr = 0
            values[i] = v
            a3 = a2
            a2 = a1
            a1 = _mag(v)
            i += 1
        if ds[0] - 1 < ends[w] - starts[w]:   # bytes the code never reached
            return w, ERR_TRAILING
    return -1, ERR_NONE


# the kernels' helpers, compiled and rebound by adaptive._compile()
_shift_low, _bit, _bypass, _room, _nonzero, _seal = _shift_low_py, _bit_py, _bypass_py, _room_py, _nonzero_py, _seal_py
_next_byte, _dbit, _dbypass, _dnonzero = _next_byte_py, _dbit_py, _dbypass_py, _dnonzero_py
_mag, _context = _mag_py, _context_py
_HELPERS = ("_mag", "_context", "_shift_low", "_bit", "_bypass", "_room", "_nonzero", "_seal",
            "_next_byte", "_dbit", "_dbypass", "_dnonzero")
