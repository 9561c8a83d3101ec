"""Integer-only decoder: the part of the autoencoder stored in an archive.

The decoder is a chain of layers, each ``acc = h @ W + b`` followed by an
arithmetic shift (floor division by ``2**shift``; a negative shift is a left
shift) and, on every layer but the last, ReLU.  The input ``h0`` is the
integer code (``|code| <= code_max``); the last layer yields the window in
fixed point with ``frac_bits`` fractional bits: ``y / 2**frac_bits`` is close to
the float decoder output.

Exactness: at construction the worst-case magnitude of every accumulator
(all codes within ``+-code_max``, any ReLU pattern) is bounded and must stay
below ``2**EXACT_BITS`` (2**50).  All values are then integers that float64
represents exactly, so a float64 BLAS product of these integer matrices is
exact whatever the summation order, blocking, FMA use or thread count -- the
default ``predict`` uses it and equals the pure int64 path bit for bit (tests
compare both and the torch int64 path).  Nothing can overflow int64.

numpy only: this module is on the reading path.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tsarchive.errors import ArchiveCorrupt, BadInput

MODEL_ID = "mlp-int-v1"
FRAC_BITS = 12          # fractional bits of the decoder output
WEIGHT_BITS = 12        # signed weights in [-(2**11 - 1), 2**11 - 1]
ACT_BITS = 15           # largest observed hidden activation is scaled to about 2**15
EXACT_BITS = 50         # worst-case accumulator bound (float64 exact up to 2**53; margin for safety)
_MAX_SHIFT = 62
_CHUNK_ELEMS = 1 << 22  # rows per chunk such that the widest layer holds ~4M values


@dataclass(frozen=True, eq=False)
class IntLayer:
    """One integer layer: ``weight`` int16 (n_in, n_out), ``bias`` int64 (n_out,), ``shift``."""

    weight: np.ndarray
    bias: np.ndarray
    shift: int


def _shift(acc: np.ndarray, s: int) -> np.ndarray:
    return acc >> s if s >= 0 else acc << (-s)


@dataclass(frozen=True, eq=False)
class IntDecoder:
    """Integer decoder ``codes (N, K) -> windows (N, W)`` in fixed point (see module doc)."""

    layers: tuple[IntLayer, ...]
    frac_bits: int = FRAC_BITS
    code_max: int = 127

    def __post_init__(self) -> None:
        problem = self._problem()
        if problem:
            raise BadInput(f"integer decoder rejected: {problem}")

    # ------------------------------------------------------------------ checks
    def _problem(self) -> str:
        if not self.layers:
            return "it has no layers"
        if not (0 <= int(self.frac_bits) <= 30):
            return f"frac_bits {self.frac_bits} is outside 0..30"
        if not (1 <= int(self.code_max) <= 32767):
            return f"code_max {self.code_max} is outside 1..32767"
        bound = None
        for i, layer in enumerate(self.layers):
            w, b = layer.weight, layer.bias
            if not (isinstance(w, np.ndarray) and w.dtype == np.int16 and w.ndim == 2):
                return f"layer {i} weights must be a 2-D int16 array"
            if bound is None:                    # |code| <= code_max on the input
                bound = np.full(w.shape[0], float(self.code_max))
            if not (isinstance(b, np.ndarray) and b.dtype == np.int64 and b.shape == (w.shape[1],)):
                return f"layer {i} bias must be int64 of length {w.shape[1]}"
            if w.shape[0] != bound.shape[0] or min(w.shape) < 1:
                return f"layer {i} expects {w.shape[0]} inputs but receives {bound.shape[0]}"
            if not (-_MAX_SHIFT <= int(layer.shift) <= _MAX_SHIFT):
                return f"layer {i} shift {layer.shift} is outside -{_MAX_SHIFT}..{_MAX_SHIFT}"
            # worst case |acc_j| <= sum_i |W_ij| * bound_i + |b_j|  (float64 sums of ints < 2**53: tight)
            acc = np.abs(w.astype(np.float64)).T @ bound + np.abs(b.astype(np.float64))
            top = float(acc.max())
            if not math.isfinite(top) or top >= 2.0 ** EXACT_BITS:
                return f"layer {i} accumulator may reach {top:.3g} >= 2**{EXACT_BITS}"
            s = int(layer.shift)
            bound = np.floor(acc / 2.0 ** s) + 1.0 if s >= 0 else acc * 2.0 ** (-s)
            if float(bound.max()) >= 2.0 ** EXACT_BITS:
                return f"layer {i} output may reach {float(bound.max()):.3g} >= 2**{EXACT_BITS}"
        return ""

    # --------------------------------------------------------------- geometry
    @property
    def code_size(self) -> int:
        return int(self.layers[0].weight.shape[0])

    @property
    def window(self) -> int:
        return int(self.layers[-1].weight.shape[1])

    @property
    def sizes(self) -> tuple[int, ...]:
        """Layer widths from input to output, e.g. ``(K, H, W)``."""
        return (self.code_size,) + tuple(int(l.weight.shape[1]) for l in self.layers)

    @property
    def n_params(self) -> int:
        return int(sum(l.weight.size + l.bias.size for l in self.layers))

    def config(self) -> dict:
        """JSON-safe description (stored in the manifest beside the arrays)."""
        return {"id": MODEL_ID, "sizes": list(self.sizes), "frac_bits": int(self.frac_bits),
                "code_max": int(self.code_max), "weight_bits": WEIGHT_BITS, "n_params": self.n_params}

    # -------------------------------------------------------------- inference
    def _check_codes(self, codes: np.ndarray) -> np.ndarray:
        codes = np.asarray(codes)
        if codes.ndim != 2 or codes.shape[1] != self.code_size or not np.issubdtype(codes.dtype, np.integer):
            raise BadInput(f"codes must be an integer array of shape (N, {self.code_size}), "
                           f"got {codes.dtype} {codes.shape}; pass the stored int8 codes")
        if codes.size and (int(codes.min()) < -self.code_max or int(codes.max()) > self.code_max):
            raise BadInput(f"codes must lie within +-{self.code_max}; clip them before decoding")
        return codes.astype(np.int64)

    def predict(self, codes: np.ndarray, *, exact_int64: bool = False) -> np.ndarray:
        """Decode ``codes`` (N, K) to int64 windows (N, W) with ``frac_bits`` fractional bits.

        Bit-exact on every machine.  By default the products run as float64
        BLAS on exactly representable integers (fast); ``exact_int64=True``
        runs numpy int64 matmul instead (slow reference, same result).
        """
        c = self._check_codes(codes)
        out = np.empty((c.shape[0], self.window), dtype=np.int64)
        rows = max(1, _CHUNK_ELEMS // max(self.sizes))
        for a in range(0, c.shape[0], rows):
            h = c[a:a + rows]
            for i, layer in enumerate(self.layers):
                if exact_int64:
                    acc = h @ layer.weight.astype(np.int64)
                else:
                    acc = (h.astype(np.float64) @ layer.weight.astype(np.float64)).astype(np.int64)
                acc += layer.bias
                h = _shift(acc, int(layer.shift))
                if i < len(self.layers) - 1:
                    np.maximum(h, 0, out=h)
            out[a:a + rows] = h
        return out

    # ---------------------------------------------------------------- storage
    def to_arrays(self) -> dict[str, np.ndarray]:
        """Plain integer arrays: ``w{i}`` int16 (n_in, n_out), ``b{i}`` int64, ``shifts`` int64 (L,),
        ``frac_bits`` and ``code_max`` int64 (1,)."""
        d: dict[str, np.ndarray] = {}
        for i, layer in enumerate(self.layers):
            d[f"w{i}"] = layer.weight.copy()
            d[f"b{i}"] = layer.bias.copy()
        d["shifts"] = np.array([int(l.shift) for l in self.layers], dtype=np.int64)
        d["frac_bits"] = np.array([int(self.frac_bits)], dtype=np.int64)
        d["code_max"] = np.array([int(self.code_max)], dtype=np.int64)
        return d

    @classmethod
    def from_arrays(cls, d: dict[str, np.ndarray]) -> "IntDecoder":
        """Rebuild from :meth:`to_arrays` output; raises ArchiveCorrupt when anything is off."""
        try:
            shifts = _int_array(d["shifts"], "shifts", 1)
            frac = _int_array(d["frac_bits"], "frac_bits", 1)
            cmax = _int_array(d["code_max"], "code_max", 1)
            if frac.size != 1 or cmax.size != 1 or not (1 <= shifts.size <= 16):
                raise ArchiveCorrupt("model arrays frac_bits/code_max/shifts have the wrong length")
            layers = []
            for i, s in enumerate(shifts.tolist()):
                w = _int_array(d[f"w{i}"], f"w{i}", 2)
                if w.size and (int(w.min()) < -(2 ** 15 - 1) or int(w.max()) > 2 ** 15 - 1):
                    raise ArchiveCorrupt(f"model weights w{i} exceed the int16 range")
                layers.append(IntLayer(weight=w.astype(np.int16), bias=_int_array(d[f"b{i}"], f"b{i}", 1),
                                       shift=int(s)))
            extra = set(d) - {"shifts", "frac_bits", "code_max"} - {f"{p}{i}" for p in "wb"
                                                                     for i in range(len(layers))}
            if extra:
                raise ArchiveCorrupt(f"unexpected model arrays {sorted(extra)}")
            return cls(layers=tuple(layers), frac_bits=int(frac[0]), code_max=int(cmax[0]))
        except KeyError as e:
            raise ArchiveCorrupt(f"model array {e.args[0]!r} is missing; the archive is incomplete") from None
        except BadInput as e:
            raise ArchiveCorrupt(f"stored model is damaged ({e}); re-pack the source") from None


def _int_array(a: object, name: str, ndim: int) -> np.ndarray:
    a = np.asarray(a)
    if a.ndim != ndim or not np.issubdtype(a.dtype, np.integer):
        raise ArchiveCorrupt(f"model array {name} must be a {ndim}-D integer array, got {a.dtype} {a.shape}")
    if a.dtype == np.uint64 and a.size and int(a.max()) > 2 ** 63 - 1:
        raise ArchiveCorrupt(f"model array {name} holds values beyond int64")
    return a.astype(np.int64)


# ------------------------------------------------------------ quantization
def _floor_log2(x: float) -> int:
    """floor(log2(x)) for x > 0, exactly (frexp does not round; math.log2 may be off by an ulp)."""
    return math.frexp(x)[1] - 1


def _ceil_log2(x: float) -> int:
    """ceil(log2(x)) for x > 0, exactly."""
    m, e = math.frexp(x)
    return e - 1 if m == 0.5 else e


def quantize_decoder(weights: list[tuple[np.ndarray, np.ndarray]], act_max: list[float], *,
                     code_max: int = 127, frac_bits: int = FRAC_BITS,
                     weight_bits: int = WEIGHT_BITS, act_bits: int = ACT_BITS) -> IntDecoder:
    """Post-training quantization of a float ReLU MLP decoder.

    ``weights`` are ``(W (n_in, n_out), b (n_out,))`` float arrays per layer of
    the float decoder ``y = L_n(relu(... relu(L_1(code / code_max))))``;
    ``act_max[i]`` is the largest post-ReLU activation of hidden layer ``i``
    seen on calibration codes.  Scales are powers of two: weights use the
    full ``weight_bits`` of their layer's largest magnitude, hidden
    activations are scaled so ``act_max`` maps to ``2**act_bits``, and the
    bias carries the half-step offset so every shift rounds to nearest.
    Scales come from exact exponents (frexp), so the result repeats bit for bit.
    """
    if len(act_max) != len(weights) - 1:
        raise BadInput("act_max needs one value per hidden layer")
    qmax = 2 ** (weight_bits - 1) - 1
    f_in = 0                                     # codes are integers: 0 fractional bits
    layers = []
    for i, (w, b) in enumerate(weights):
        w = np.asarray(w, dtype=np.float64) / (code_max if i == 0 else 1.0)
        b = np.asarray(b, dtype=np.float64)
        peak = float(np.abs(w).max()) if w.size else 0.0
        e = _floor_log2(qmax / peak) if peak > 0 else 0
        bpeak = float(np.abs(b).max()) if b.size else 0.0
        if bpeak > 0:                            # keep the scaled bias well inside the exact range
            e = min(e, _floor_log2(2.0 ** (EXACT_BITS - 4) / bpeak) - f_in)
        last = i == len(weights) - 1
        if last:
            f_out = frac_bits
        else:
            a = float(act_max[i])
            f_out = act_bits - _ceil_log2(a) if a > 0 else act_bits
            f_out = min(f_out, f_in + e)         # never a left shift on hidden layers
        s = f_in + e - f_out
        wq = np.clip(np.rint(w * math.ldexp(1.0, e)), -qmax, qmax).astype(np.int16)
        bq = np.rint(b * math.ldexp(1.0, f_in + e)).astype(np.int64) + (1 << (s - 1) if s > 0 else 0)
        layers.append(IntLayer(weight=wq, bias=bq, shift=s))
        f_in = f_out
    return IntDecoder(layers=tuple(layers), frac_bits=frac_bits, code_max=code_max)
