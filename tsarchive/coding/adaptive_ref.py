"""The adaptive coder's stream written plainly, with Python integers: the reference for the compiled loops.

Slow (a few hundred thousand values per second), but short and readable;
:mod:`tsarchive.coding.adaptive` uses it when numba is missing, and the tests
compare the compiled kernels with it byte for byte.  The stream itself is
specified in the docstring of :mod:`tsarchive.coding.adaptive`.
"""

from __future__ import annotations

from tsarchive.errors import ArchiveCorrupt

from ._adaptive_kernel import (ACT_CAP, COUNT_CAP, E0, L0, M0, NC, NE, NRUN, PROB_BITS, PROB_ONE, R0, ROWS,
                               RUN_ENTER, RUN_J, S0, SHIFT_OF, TOP, Z0)

_M32 = 0xFFFFFFFF


class _Models:
    """Adaptive binary models: probability of a 0 in 15 bits and an observation count (sets the rate)."""

    def __init__(self, p0, n0):
        self.p = [int(v) for v in p0]
        self.n = [int(v) for v in n0]

    def update(self, idx: int, bit: int) -> None:
        p, n = self.p[idx], self.n[idx]
        s = int(SHIFT_OF[n])
        self.n[idx] = min(n + 1, COUNT_CAP)
        self.p[idx] = p + ((PROB_ONE - p) >> s) if bit == 0 else p - (p >> s)


class _Encoder:
    """LZMA-style binary range encoder (carry kept in a cache byte and a count of pending 0xFF bytes)."""

    def __init__(self, models: _Models):
        self.m = models
        self.low, self.range, self.cache, self.pending = 0, _M32, 0, 1
        self.out = bytearray()
        self.first = True

    def _shift_low(self) -> None:
        if self.low < 0xFF000000 or self.low >= 1 << 32:
            carry = self.low >> 32
            byte = self.cache
            while self.pending:
                self._emit((byte + carry) & 0xFF)
                byte = 0xFF
                self.pending -= 1
            self.cache = (self.low >> 24) & 0xFF
        self.pending += 1
        self.low = (self.low & 0x00FFFFFF) << 8

    def _emit(self, byte: int) -> None:
        if self.first:
            assert byte == 0, "the leading byte of the code is always zero"
            self.first = False
        else:
            self.out.append(byte)

    def _normalize(self) -> None:
        while self.range < TOP:
            self.range <<= 8
            self._shift_low()

    def bit(self, idx: int, bit: int) -> None:
        bound = (self.range >> PROB_BITS) * self.m.p[idx]
        if bit == 0:
            self.range = bound
        else:
            self.low += bound
            self.range -= bound
        self.m.update(idx, bit)
        self._normalize()

    def bypass(self, bit: int) -> None:
        self.range >>= 1
        if bit:
            self.low += self.range
        self._normalize()

    def finish(self) -> bytes:
        hi = self.low + self.range
        for k in range(32, -1, -1):
            v = (self.low + (1 << k) - 1) & ~((1 << k) - 1)
            if v < hi:
                self.low = v
                break
        for _ in range(5):
            self._shift_low()
        return bytes(self.out).rstrip(b"\0")


class _Decoder:
    def __init__(self, payload: bytes, models: _Models):
        self.m = models
        self.buf = payload
        self.read = 0
        self.range = _M32
        self.code = 0
        for _ in range(4):
            self.code = (self.code << 8) | self._next()
        if self.code >= self.range:
            raise ArchiveCorrupt("an adaptive-coded window does not start like a code; the archive is damaged")

    def _next(self) -> int:
        b = self.buf[self.read] if self.read < len(self.buf) else 0
        self.read += 1
        return b

    def _normalize(self) -> None:
        while self.range < TOP:
            self.range <<= 8
            self.code = ((self.code << 8) | self._next()) & _M32

    def bit(self, idx: int) -> int:
        bound = (self.range >> PROB_BITS) * self.m.p[idx]
        if self.code < bound:
            self.range, bit = bound, 0
        else:
            self.code -= bound
            self.range -= bound
            bit = 1
        self.m.update(idx, bit)
        self._normalize()
        return bit

    def bypass(self) -> int:
        self.range >>= 1
        bit = int(self.code >= self.range)
        if bit:
            self.code -= self.range
        self._normalize()
        return bit


def _context(hist: list[int]) -> int:
    return min((4 * hist[0] + 2 * hist[1] + hist[2]).bit_length(), NC - 1)


def _push(hist: list[int], v: int) -> None:
    hist[:] = [min(abs(v), ACT_CAP), hist[0], hist[1]]


def _code_nonzero(enc: _Encoder, v: int, row: int, psign: int) -> int:
    enc.bit(S0 + psign, int(v < 0))
    m = abs(v)
    e = m.bit_length() - 1
    base = E0 + row * NE
    for j in range(e):
        enc.bit(base + min(j, NE - 1), 1)
    if e < 63:
        enc.bit(base + min(e, NE - 1), 0)
    if e >= 1:
        b1 = (m >> (e - 1)) & 1
        enc.bit(M0 + 3 * e, b1)
        if e >= 2:
            enc.bit(M0 + 3 * e + 1 + b1, (m >> (e - 2)) & 1)
            for k in range(e - 3, -1, -1):
                enc.bypass((m >> k) & 1)
    return 2 if v < 0 else 1


def _code_run_length(enc: _Encoder, run: int, J: int) -> None:
    """The ``J`` bits of a stopped run's remainder, high first: two adaptive bits (per J), the rest bypass."""
    for k in range(J - 1, -1, -1):
        b = (run >> k) & 1
        if k == J - 1:
            enc.bit(L0 + 3 * J, b)
        elif k == J - 2:
            enc.bit(L0 + 3 * J + 1 + ((run >> (J - 1)) & 1), b)
        else:
            enc.bypass(b)


def _decode_run_length(dec: _Decoder, J: int) -> int:
    run = 0
    for k in range(J - 1, -1, -1):
        if k == J - 1:
            b = dec.bit(L0 + 3 * J)
        elif k == J - 2:
            b = dec.bit(L0 + 3 * J + 1 + run)
        else:
            b = dec.bypass()
        run = (run << 1) | b
    return run


def encode(values, p0, n0) -> bytes:
    """One window (a sequence of ints in the int64 range) -> bytes."""
    vals = [int(v) for v in values]
    if not vals:
        return b""
    enc = _Encoder(_Models(p0, n0))
    hist, psign, zeros, ri, i, n = [0, 0, 0], 0, 0, 0, 0, len(vals)
    while i < n:
        if zeros >= RUN_ENTER:                      # run mode (JPEG-LS style, adaptive flags)
            run = 0
            while i + run < n and vals[i + run] == 0:
                run += 1
            while True:
                blk = 1 << int(RUN_J[ri])
                if run >= blk:
                    enc.bit(R0 + ri, 1)
                    i, run, ri = i + blk, run - blk, min(ri + 1, NRUN - 1)
                    if i == n:
                        break
                elif i + run == n:
                    enc.bit(R0 + ri, 1)
                    i = n
                    break
                else:
                    enc.bit(R0 + ri, 0)
                    _code_run_length(enc, run, int(RUN_J[ri]))
                    i += run
                    psign = _code_nonzero(enc, vals[i], ROWS - 1, psign)
                    hist[:] = [min(abs(vals[i]), ACT_CAP), 0, 0 if run else hist[1]]
                    ri, zeros, i = max(ri - 1, 0), 0, i + 1
                    break
            continue
        v = vals[i]
        c = _context(hist)
        enc.bit(Z0 + c, int(v != 0))
        if v:
            psign = _code_nonzero(enc, v, c, psign)
            zeros = 0
        else:
            zeros += 1
        _push(hist, v)
        i += 1
    return enc.finish()


def _decode_nonzero(dec: _Decoder, row: int, psign: int) -> tuple[int, int]:
    neg = dec.bit(S0 + psign)
    base = E0 + row * NE
    e = 0
    while e < 63 and dec.bit(base + min(e, NE - 1)):
        e += 1
    m = 1 << e
    if e >= 1:
        b1 = dec.bit(M0 + 3 * e)
        m |= b1 << (e - 1)
        if e >= 2:
            m |= dec.bit(M0 + 3 * e + 1 + b1) << (e - 2)
            for k in range(e - 3, -1, -1):
                m |= dec.bypass() << k
    if e == 63 and not (neg and m == 1 << 63):
        raise ArchiveCorrupt("an adaptive-coded window holds a value beyond 64 bits; the archive is damaged")
    return (-m if neg else m), (2 if neg else 1)


def decode(payload: bytes, n: int, p0, n0) -> list[int]:
    """Inverse of :func:`encode` for a window of ``n`` values; ArchiveCorrupt on impossible codes."""
    if n == 0:
        if payload:
            raise ArchiveCorrupt("an empty adaptive-coded window has bytes; the archive is damaged")
        return []
    if payload and payload[-1] == 0:
        raise ArchiveCorrupt("an adaptive-coded window ends in a zero byte; the archive is damaged")
    dec = _Decoder(payload, _Models(p0, n0))
    out: list[int] = []
    hist, psign, zeros, ri = [0, 0, 0], 0, 0, 0
    while len(out) < n:
        if zeros >= RUN_ENTER:
            while True:
                blk = 1 << int(RUN_J[ri])
                if dec.bit(R0 + ri):
                    take = min(blk, n - len(out))
                    out += [0] * take
                    ri = min(ri + 1, NRUN - 1) if take == blk else ri
                    if len(out) == n:
                        break
                else:
                    run = _decode_run_length(dec, int(RUN_J[ri]))
                    if len(out) + run >= n:
                        raise ArchiveCorrupt("an adaptive-coded zero run passes the window's end; "
                                             "the archive is damaged")
                    out += [0] * run
                    v, psign = _decode_nonzero(dec, ROWS - 1, psign)
                    out.append(v)
                    hist[:] = [min(abs(v), ACT_CAP), 0, 0 if run else hist[1]]
                    ri, zeros = max(ri - 1, 0), 0
                    break
            continue
        c = _context(hist)
        if dec.bit(Z0 + c):
            v, psign = _decode_nonzero(dec, c, psign)
            zeros = 0
        else:
            v = 0
            zeros += 1
        out.append(v)
        _push(hist, v)
    if dec.read - 1 < len(payload):
        raise ArchiveCorrupt("an adaptive-coded window has bytes past its code; the archive is damaged")
    return out
