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
NC = 20                      # regular contexts: min(bit_length(4|r1| + 2|r2| + |r3|), NC - 1)
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
L0 = R0 + NRUN                # a zero run's remainder: its top two bits per J
NMODELS = L0 + 3 * 16
# JPEG-LS run-length order table J (ITU-T T.87 | ISO/IEC 14495-1, A.7.1.2)
RUN_J = np.array([0, 0, 0, 0, 1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3,
                  4, 4, 5, 5, 6, 6, 7, 7, 8, 9, 10, 11, 12, 13, 14, 15], dtype=np.int64)
SHIFT_OF = np.array([min(MAX_SHIFT, (n + 1).bit_length()) for n in range(COUNT_CAP + 1)], dtype=np.int64)

ERR_NONE, ERR_RANGE, ERR_EXPONENT, ERR_TRAILING = 0, 1, 2, 3


# ---------------------------------------------------------------- kernels
# The binary coding steps are inner functions of each kernel: numba inlines those at compile time,
# while a call to a separately compiled function that takes arrays costs about five times the bit
# itself (the helpers below take integers only).  The interval (low, range or code, range) and the ideal cost travel as locals; the byte
# output state lives in a small array.  The output buffer ``out`` is a free variable of the inner functions, never an
# argument (measured: with it as an argument the encoder ran 2-4x slower, the same bytes).

def _mag(v):
    a = -v if v < 0 else v
    if a < 0 or a > ACT_CAP:           # -2**63 stays negative
        return ACT_CAP
    return a


def _context(a1, a2, a3):
    s = 4 * a1 + 2 * a2 + a3
    c = 0
    while s != 0 and c < NC - 1:
        s >>= 1
        c += 1
    return c


def _adapt(p, n, b):
    """A model after coding ``b``: probability of a 0 moved by ``2**-shift`` of the gap, count + 1 (capped)."""
    s = SHIFT_OF[n]
    p = p + ((PROB_ONE - p) >> s) if b == 0 else p - (p >> s)
    return p, min(n + 1, COUNT_CAP)


def _after_run(v, run, a2, ri):
    """The context history and run state after the value ``v`` that stops a run of ``run`` zeros."""
    return _mag(v), 0, (0 if run >= 1 else a2), max(ri - 1, 0)


def _encode_kernel(values, bounds, P0, N0, cost, tally):
    """Code windows ``values[bounds[w]:bounds[w+1]]``; returns (bytes, byte bounds, cost units per window).

    ``st`` (uint64[4]): cache byte, pending bytes, write position, "skip the next byte" flag."""
    nw = bounds.shape[0] - 1
    out = np.empty(max(1024, values.shape[0] // 2 + 1024), np.uint8)
    ob = np.zeros(nw + 1, np.int64)
    costs = np.zeros(nw, np.int64)
    st = np.zeros(4, np.uint64)
    P = P0.copy()
    N = N0.copy()

    def shift_low(low):           # LZMA's ShiftLow: settle the top byte of low and any pending 0xFF bytes
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

    def bit(idx, b, low, rng, acc):
        p = P[idx]
        bound = (rng >> np.uint64(PROB_BITS)) * np.uint64(p)
        if b == 0:
            rng = bound
            acc += cost[p]
        else:
            low += bound
            rng -= bound
            acc += cost[PROB_ONE - p]
        P[idx], N[idx] = _adapt(p, N[idx], b)
        tally[idx, b] += 1
        while rng < np.uint64(TOP):
            rng = rng << np.uint64(8)
            low = shift_low(low)
        return low, rng, acc

    def bypass(b, low, rng, acc):
        rng = rng >> np.uint64(1)
        if b:
            low += rng
        while rng < np.uint64(TOP):
            rng = rng << np.uint64(8)
            low = shift_low(low)
        return low, rng, acc + (1 << 16)

    def nonzero(v, row, psign, low, rng, acc):
        """Sign, exponent (unary, adaptive bins), two adaptive mantissa bits, the rest bypass."""
        neg = 1 if v < 0 else 0
        low, rng, acc = bit(S0 + psign, neg, low, rng, acc)
        m = np.uint64(0) - np.uint64(v) if neg else np.uint64(v)
        e = 0
        while e < 63 and (m >> np.uint64(e + 1)) != np.uint64(0):
            e += 1
        base = E0 + row * NE
        for j in range(e):
            low, rng, acc = bit(base + min(j, NE - 1), 1, low, rng, acc)
        if e < 63:
            low, rng, acc = bit(base + min(e, NE - 1), 0, low, rng, acc)
        if e >= 1:
            b1 = np.int64((m >> np.uint64(e - 1)) & np.uint64(1))
            low, rng, acc = bit(M0 + 3 * e, b1, low, rng, acc)
            if e >= 2:
                b2 = np.int64((m >> np.uint64(e - 2)) & np.uint64(1))
                low, rng, acc = bit(M0 + 3 * e + 1 + b1, b2, low, rng, acc)
                for k in range(e - 3, -1, -1):
                    low, rng, acc = bypass(np.int64((m >> np.uint64(k)) & np.uint64(1)), low, rng, acc)
        return (2 if neg else 1), low, rng, acc

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
            a1 = a2 = a3 = psign = zr = ri = 0          # context history, sign state, zeros in a row, run state
            i = a
            while i < b:
                if np.int64(st[2] + st[1]) + 512 > out.shape[0]:        # room for the value's bytes
                    out = np.concatenate((out, np.empty(out.shape[0] + 512, np.uint8)))
                if zr >= RUN_ENTER:                                  # run mode
                    run = 0
                    while i + run < b and values[i + run] == 0:
                        run += 1
                    while True:
                        if np.int64(st[2] + st[1]) + 512 > out.shape[0]:        # room for the value's bytes
                            out = np.concatenate((out, np.empty(out.shape[0] + 512, np.uint8)))
                        blk = np.int64(1) << RUN_J[ri]
                        if run >= blk:
                            low, rng, acc = bit(R0 + ri, 1, low, rng, acc)
                            i += blk
                            run -= blk
                            ri = min(ri + 1, NRUN - 1)
                            if i == b:
                                break
                        elif i + run == b:
                            low, rng, acc = bit(R0 + ri, 1, low, rng, acc)
                            i = b
                            break
                        else:
                            low, rng, acc = bit(R0 + ri, 0, low, rng, acc)
                            J = RUN_J[ri]
                            top = 0
                            for k in range(J - 1, -1, -1):               # the remainder, top bits adaptive
                                bk = (run >> k) & 1
                                if k == J - 1:
                                    low, rng, acc = bit(L0 + 3 * J, bk, low, rng, acc)
                                    top = bk
                                elif k == J - 2:
                                    low, rng, acc = bit(L0 + 3 * J + 1 + top, bk, low, rng, acc)
                                else:
                                    low, rng, acc = bypass(bk, low, rng, acc)
                            i += run
                            v = values[i]
                            psign, low, rng, acc = nonzero(v, ROWS - 1, psign, low, rng, acc)
                            a1, a2, a3, ri = _after_run(v, run, a2, ri)
                            zr = 0
                            i += 1
                            break
                    continue
                v = values[i]
                c = _context(a1, a2, a3)
                if v == 0:
                    low, rng, acc = bit(Z0 + c, 0, low, rng, acc)
                    zr += 1
                else:
                    low, rng, acc = bit(Z0 + c, 1, low, rng, acc)
                    psign, low, rng, acc = nonzero(v, c, psign, low, rng, acc)
                    zr = 0
                a3 = a2
                a2 = a1
                a1 = _mag(v)
                i += 1
            costs[w] = acc
            if np.int64(st[2] + st[1]) + 16 > out.shape[0]:        # room for the value's bytes
                out = np.concatenate((out, np.empty(out.shape[0] + 16, np.uint8)))
            hi = low + rng                   # the point of [low, low + range) with the most trailing zero bits
            for k in range(32, -1, -1):
                mask = (np.uint64(1) << np.uint64(k)) - np.uint64(1)
                pt = (low + mask) & ~mask
                if pt < hi:
                    low = pt
                    break
            for _ in range(5):
                low = shift_low(low)
            pos = np.int64(st[2])
            while pos > start and out[pos - 1] == 0:
                pos -= 1
            st[2] = np.uint64(pos)
        ob[w + 1] = np.int64(st[2])
    return out[:np.int64(st[2])].copy(), ob, costs


def _decode_kernel(buf, starts, ends, bounds, P0, N0, values):
    """Decode window ``w`` (bytes ``buf[starts[w]:ends[w]]``) into ``values[bounds[w]:bounds[w+1]]``;
    returns (first bad window or -1, error code).

    ``ds`` (int64[3]): bytes read (counting the implicit leading zero byte), payload start, payload end."""
    nw = bounds.shape[0] - 1
    ds = np.zeros(3, np.int64)
    P = P0.copy()
    N = N0.copy()

    def next_byte():
        q = ds[1] + ds[0] - 1      # byte 0 is the implicit leading zero
        ds[0] += 1
        if q < ds[2]:
            return np.uint64(buf[q])
        return np.uint64(0)

    def bit(idx, code, rng):
        p = P[idx]
        n = N[idx]
        bound = (rng >> np.uint64(PROB_BITS)) * np.uint64(p)
        b = np.int64(code >= bound)
        m = np.uint64(0) - np.uint64(b)                  # all ones after a 1: no branch on the bit here
        code -= bound & m
        rng = bound + ((rng - bound - bound) & m)         # a 1 keeps range - bound, a 0 bound (mod 2**64)
        s = SHIFT_OF[n]
        up = p + ((PROB_ONE - p) >> s)                    # _adapt's two outcomes, picked by mask
        P[idx] = up + (((p - (p >> s)) - up) & -b)
        N[idx] = min(n + 1, COUNT_CAP)
        while rng < np.uint64(TOP):
            rng = rng << np.uint64(8)
            code = ((code << np.uint64(8)) | next_byte()) & np.uint64(0xFFFFFFFF)
        return b, code, rng

    def bypass(code, rng):
        rng = rng >> np.uint64(1)
        b = 0
        if code >= rng:
            code -= rng
            b = 1
        while rng < np.uint64(TOP):
            rng = rng << np.uint64(8)
            code = ((code << np.uint64(8)) | next_byte()) & np.uint64(0xFFFFFFFF)
        return b, code, rng

    def nonzero(row, psign, code, rng):
        """(value, sign state or -1 on an impossible value, code, range)."""
        neg, code, rng = bit(S0 + psign, code, rng)
        base = E0 + row * NE
        e = 0
        while e < 63:
            more, code, rng = bit(base + min(e, NE - 1), code, rng)
            if more == 0:
                break
            e += 1
        m = np.uint64(1) << np.uint64(e)
        if e >= 1:
            b1, code, rng = bit(M0 + 3 * e, code, rng)
            m |= np.uint64(b1) << np.uint64(e - 1)
            if e >= 2:
                b2, code, rng = bit(M0 + 3 * e + 1 + b1, code, rng)
                m |= np.uint64(b2) << np.uint64(e - 2)
                for k in range(e - 3, -1, -1):
                    bb, code, rng = bypass(code, rng)
                    m |= np.uint64(bb) << np.uint64(k)
        if e == 63 and (neg == 0 or m != (np.uint64(1) << np.uint64(63))):
            return np.int64(0), -1, code, rng
        v = np.int64(np.uint64(0) - m) if neg else np.int64(m)
        return v, (2 if neg else 1), code, rng

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
            code = (code << np.uint64(8)) | next_byte()
        if code >= rng:
            return w, ERR_RANGE
        a1 = a2 = a3 = psign = zr = ri = 0          # context history, sign state, zeros in a row, run state
        i = a
        while i < b:
            if zr >= RUN_ENTER:                                      # run mode
                while True:
                    blk = np.int64(1) << RUN_J[ri]
                    whole, code, rng = bit(R0 + ri, code, rng)
                    if whole == 1:
                        take = min(blk, b - i)
                        values[i:i + take] = 0
                        i += take
                        if take == blk:
                            ri = min(ri + 1, NRUN - 1)
                        if i == b:
                            break
                    else:
                        J = RUN_J[ri]
                        run = 0
                        top = 0
                        for k in range(J - 1, -1, -1):
                            if k == J - 1:
                                bb, code, rng = bit(L0 + 3 * J, code, rng)
                                top = bb
                            elif k == J - 2:
                                bb, code, rng = bit(L0 + 3 * J + 1 + top, code, rng)
                            else:
                                bb, code, rng = bypass(code, rng)
                            run = (run << 1) | bb
                        if i + run >= b:
                            return w, ERR_RANGE
                        values[i:i + run] = 0
                        i += run
                        v, psign, code, rng = nonzero(ROWS - 1, psign, code, rng)
                        if psign < 0:
                            return w, ERR_EXPONENT
                        values[i] = v
                        a1, a2, a3, ri = _after_run(v, run, a2, ri)
                        zr = 0
                        i += 1
                        break
                continue
            c = _context(a1, a2, a3)
            nz, code, rng = bit(Z0 + c, code, rng)
            if nz == 0:
                v = np.int64(0)
                zr += 1
            else:
                v, psign, code, rng = nonzero(c, psign, code, rng)
                if psign < 0:
                    return w, ERR_EXPONENT
                zr = 0
            values[i] = v
            a3 = a2
            a2 = a1
            a1 = _mag(v)
            i += 1
        # as adaptive_ref: a code reads past its stored end (its final point's low bytes are zeros, dropped);
        # one that stops on its last stored byte or before is not what the encoder writes
        if ds[0] - 1 <= ends[w] - starts[w]:
            return w, ERR_TRAILING
    return -1, ERR_NONE


_HELPERS = ("_mag", "_context", "_adapt", "_after_run")     # compiled and rebound by adaptive._compile() before the kernels
