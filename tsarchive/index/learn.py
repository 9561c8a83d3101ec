"""The index's code for one channel: an exact principal basis, or a small autoencoder when it does better.

Both are learned on the channel's own segments, each normalised (mean
removed, divided by the channel's spread), and compared on the same held-out
segments (every tenth) by the mean squared error of what their *stored*
codes decode to; the better one is kept and named in the member (``kind``).

* ``linear`` -- the leading principal subspace, found by subspace (orthogonal)
  iteration on the Gram matrix ``X^T X``; every product and sum goes through
  :mod:`tsarchive.model.exact`, so the basis is the same bits on every
  machine (a BLAS SVD is not).  A linear autoencoder trained with squared
  error spans the same subspace (Baldi & Hornik 1989).  The basis is stored
  as int8 rows with a power-of-two scale each; a code is the projection
  divided by a power-of-two ``step`` (at most the basis's own error, and at
  most 1/16 of the leading component's spread), rounded and clipped to int8.
* ``nonlinear`` -- :func:`tsarchive.model.train.train_autoencoder` (normalised
  inputs, learning rate 1e-3, tanh codes in int8, early stopping on held-out
  segments, a work budget) with its integer decoder; tried only on channels
  with enough segments whose decoder (its size is known before training)
  costs at most :data:`MODEL_SHARE` of the channel's raw bytes.
* ``facts`` -- no coder and no codes (:func:`facts_only`): what the index's
  byte budget (:mod:`tsarchive.index.budget`) keeps when not even a small
  basis fits; the preview is then the segment levels.
"""

from __future__ import annotations

import functools
import math
from contextlib import nullcontext
from dataclasses import dataclass
from typing import Callable

import numpy as np

from tsarchive.compiled import compile_kernels
from tsarchive.model import exact
from tsarchive.model.spec import decoder_params
from tsarchive.model.intnet import IntDecoder

from .segments import squares

ITERATIONS = 120             # subspace iterations (bounded work; the gap of real recordings converges well before)
AE_MIN_SEGMENTS = 512        # fewer training segments: the autoencoder is not tried
AE_HIDDEN = 32
AE_WORK = 6e9                # multiply-adds of autoencoder training (a work budget, never the clock)
AE_LR = 1e-3                 # 1e-2 saturates the tanh codes (issue 13); 1e-3 does not
MODEL_SHARE = 0.001          # a kept autoencoder decoder costs at most this share of the channel's raw bytes
                             # (0.01 let a 17 kB decoder into a 47 kB archive of a smooth respiration belt)
MAX_CODE = 127               # codes are int8 (a segment whose projection is larger is clipped: its miss shows it)
CODE_LEVELS = 16             # the code step is at most the leading component's spread / 16 (look-alikes need it)


@dataclass(frozen=True, eq=False)
class Coder:
    """How one channel's normalised segments map to codes and back (see module doc)."""

    kind: str                          # "linear", "nonlinear" or "facts" (no codes: the byte budget kept facts only)
    segment: int
    code_size: int
    basis: np.ndarray | None = None    # int8 (K, S), linear
    shifts: np.ndarray | None = None   # int64 (K,): row k is basis[k] * 2**-shifts[k]
    step: float = 1.0                  # linear: latent = code * step
    decoder: IntDecoder | None = None  # nonlinear
    heldout_linear: float = math.nan
    heldout_nonlinear: float = math.nan
    note: str = ""
    encoder: Callable | None = None    # nonlinear, at pack time only (not stored)

    @property
    def rows(self) -> np.ndarray:
        """The linear basis as float64 (K, S)."""
        return self.basis.astype(np.float64) * np.ldexp(1.0, -self.shifts.astype(np.int64))[:, None]

    def encode(self, X: np.ndarray) -> np.ndarray:
        """Codes (n, K) in int8 range, held as int16, of normalised segments (n, S); the same bits on every machine."""
        if self.kind == "facts":
            return np.zeros((len(X), 0), dtype=np.int16)
        if self.kind == "nonlinear":
            return np.clip(self.encoder(X), -MAX_CODE, MAX_CODE).astype(np.int16)
        z = exact.matmul(X, self.rows.T) / self.step
        return np.clip(np.rint(z), -MAX_CODE, MAX_CODE).astype(np.int16)

    def decode(self, codes: np.ndarray, *, exact_sums: bool = True, scale: float = 1.0) -> np.ndarray:
        """Normalised segments (n, S) float64 from codes, times ``scale``; ``exact_sums`` repeats bit for bit
        (pack time), without it a plain BLAS product (previews)."""
        if self.kind == "facts":
            return np.zeros((len(codes), self.segment))
        if self.kind == "nonlinear":
            fixed = self.decoder.predict(np.asarray(codes, dtype=np.int64))      # integers, frac_bits fraction bits
            return fixed.astype(np.float64) * 2.0 ** (-int(self.decoder.frac_bits)) * scale
        if not len(codes):
            return np.zeros((0, self.segment))
        if exact_sums:
            return exact.matmul(np.asarray(codes, dtype=np.float64) * self.step, self.rows) * scale
        c = np.asarray(codes, dtype=np.float64)
        with _one_thread():                    # a thin product (K <= 8): BLAS threads only contend
            return np.matmul(c, self.rows * (self.step * scale), out=np.empty((len(c), self.segment)))


@functools.cache
def _pools():
    """threadpoolctl's view of the loaded BLAS, made once (building it lists the loaded libraries)."""
    try:
        from threadpoolctl import ThreadpoolController
    except ImportError:
        return None
    return ThreadpoolController()


def _one_thread():
    ctl = _pools()
    return nullcontext() if ctl is None else ctl.limit(limits=1, user_api="blas")


def code_size_for(n_segments: int, n_samples: int, segment: int) -> int:
    """Codes per segment: 8, fewer on short recordings so the basis stays small beside the data."""
    return int(min(8, max(1, min(n_segments // 16, n_samples // (64 * segment)))))


def _orthonormal(V: np.ndarray) -> np.ndarray:
    """Gram-Schmidt on the columns (sums through exact.total; elementwise otherwise)."""
    kern = _kernels()
    if kern is not None and V.ndim == 2 and V.shape[0]:
        out, ok = kern[0](np.ascontiguousarray(V, dtype=np.float64), exact._bits_for(V.shape[0]))
        if ok:
            return out
    return _orthonormal_numpy(V)


def _orthonormal_numpy(V: np.ndarray) -> np.ndarray:
    V = V.copy()
    for k in range(V.shape[1]):
        v = V[:, k]
        for j in range(k):
            v = v - exact.total(v * V[:, j]) * V[:, j]
        norm = math.sqrt(exact.total(v * v))
        if not norm > 0:
            v = np.zeros_like(v)
            v[k % len(v)] = 1.0
            for j in range(k):
                v = v - exact.total(v * V[:, j]) * V[:, j]
            norm = math.sqrt(exact.total(v * v)) or 1.0
        V[:, k] = v / norm
    return V


def _total_py(v, bits):
    """:func:`tsarchive.model.exact.total` of a 1-D vector, compiled (NaN when a value is not finite)."""
    peak = 0.0
    for x in v:
        a = abs(x)
        if not a <= 1.7976931348623157e308:
            return np.nan
        peak = max(peak, a)
    scale = math.ldexp(1.0, bits - math.frexp(peak)[1])
    s = 0.0
    for x in v:
        s += np.rint(x * scale)        # integers below 2**52: the sum is exact in any order
    return s / scale


_total = _total_py       # the kernel's helper; compile_kernels puts the compiled one in its place


def _orthonormal_kernel(V, bits):
    """:func:`_orthonormal_numpy`, the same operations one element at a time: (columns, every sum finite)."""
    S, K = V.shape
    V = V.copy()
    v = np.empty(S)
    w = np.empty(S)
    for k in range(K):
        for i in range(S):
            v[i] = V[i, k]
        for attempt in range(2):
            if attempt == 1:                   # a column that vanished: start again from a unit vector
                v[:] = 0.0
                v[k % S] = 1.0
            for j in range(k):
                for i in range(S):
                    w[i] = v[i] * V[i, j]
                t = _total(w, bits)
                if not t == t:
                    return V, False
                for i in range(S):
                    v[i] = v[i] - t * V[i, j]
            for i in range(S):
                w[i] = v[i] * v[i]
            sq = _total(w, bits)
            if not sq == sq:
                return V, False
            norm = math.sqrt(sq)
            if norm > 0 or attempt == 1:
                break
        if not norm > 0:
            norm = 1.0
        for i in range(S):
            V[i, k] = v[i] / norm
    return V, True


@functools.cache
def _kernels():
    """The compiled :func:`_orthonormal_kernel`, or None without numba (:func:`_orthonormal_numpy` then)."""
    return compile_kernels((_orthonormal_kernel,), globals(), helpers=("_total",))


def principal_basis(X: np.ndarray, K: int, seed: int = 0) -> np.ndarray:
    """The leading ``K`` principal directions of rows ``X`` (n, S) as columns (S, K), by subspace iteration
    on ``X^T X`` (exact sums); each column's largest entry is positive."""
    from tsarchive.model.train import Stream
    S = X.shape[1]
    K = min(K, S)
    G = exact.matmul(X.T, X)
    V = _orthonormal(Stream(seed).uniform(-1.0, 1.0, (S, K)))
    left = exact.left_grid(G)                # the same every iteration
    with _one_thread():                      # thin products (K <= 8 columns): BLAS threads only contend
        for _ in range(ITERATIONS):
            V = _orthonormal(exact.matmul(G, V, left))
    top = np.argmax(np.abs(V), axis=0)
    return V * np.where(V[top, np.arange(K)] < 0, -1.0, 1.0)


def _int8_rows(V: np.ndarray, bits: int = 7) -> tuple[np.ndarray, np.ndarray]:
    """(int8 (K, S), shifts): row k ~ q[k] * 2**-shift[k], the largest entry near 2**bits - 1 (127 by default;
    fewer ``bits`` store the basis coarser and smaller)."""
    top = (1 << bits) - 1
    peak = np.abs(V).max(axis=0)
    shifts = np.array([bits - int(np.frexp(p)[1]) if p > 0 else 0 for p in peak], dtype=np.int64)
    q = np.clip(np.rint(V.T * np.ldexp(1.0, shifts)[:, None]), -top, top).astype(np.int8)
    return q, shifts


def _mse(coder: Coder, X: np.ndarray) -> float:
    if not len(X):
        return math.nan
    e = coder.decode(coder.encode(X)) - X
    return exact.total(squares(e)) / e.size


def fit_linear(train: np.ndarray, K: int, seed: int = 0, basis_bits: int = 7) -> Coder:
    """The principal basis of ``train`` (normalised segments) with its code step."""
    S = train.shape[1]
    q, shifts = _int8_rows(principal_basis(train, K, seed), basis_bits)
    plain = Coder("linear", S, q.shape[0], basis=q, shifts=shifts, step=1.0)
    z = exact.matmul(train, plain.rows.T)
    e = exact.matmul(z, plain.rows) - train
    e_res = exact.total(squares(e)) / max(len(train), 1)               # per segment
    top = exact.total(squares(z[:, 0])) / max(len(train), 1) if z.size else 0.0
    step = max(min(math.sqrt(12.0 * e_res / q.shape[0]), math.sqrt(top) / CODE_LEVELS), 2.0 ** -30)
    step = math.ldexp(1.0, math.frexp(step)[1] - 1)              # a power of two at or below
    return Coder("linear", S, q.shape[0], basis=q, shifts=shifts, step=step)


def fit_nonlinear(train: np.ndarray, K: int, seed: int = 0) -> Coder:
    from tsarchive.model.train import train_autoencoder
    model = train_autoencoder(train, K, hidden=AE_HIDDEN, work=AE_WORK, seed=seed, lr=AE_LR)
    return Coder("nonlinear", train.shape[1], K, decoder=model.int_decoder, encoder=model.encode,
                 note=f"trained {model.report.epochs_run} epochs, stopped by {model.report.stopped_by}")


def facts_only(segment: int, why: str) -> Coder:
    """No codes at all: the index keeps each segment's level and facts (its byte budget allowed no more)."""
    return Coder("facts", segment, 0, note=why)


def choose(X: np.ndarray, K: int, raw_bytes: int, seed: int = 0, try_nonlinear: bool = True,
           basis_bits: int = 7) -> Coder:
    """Fit both coders on nine segments in ten and keep the one with the lower held-out error (module doc)."""
    held = np.arange(len(X)) % 10 == 9
    train, test = (X[~held], X[held]) if held.any() and (~held).any() else (X, X)
    lin = fit_linear(train, K, seed, basis_bits)
    err_lin = _mse(lin, test)
    if not try_nonlinear or len(train) < AE_MIN_SEGMENTS:
        return _with(lin, err_lin, math.nan, f"linear: the nonlinear coder needs {AE_MIN_SEGMENTS} segments "
                     f"to learn from, this channel has {len(train)}" if try_nonlinear else "linear: only tried")
    weight_bytes = 2 * decoder_params(K, AE_HIDDEN, train.shape[1])   # known before training: skip what can't be kept
    if weight_bytes > MODEL_SHARE * raw_bytes:
        return _with(lin, err_lin, math.nan, f"linear: a nonlinear decoder ({weight_bytes} B) would exceed "
                     f"{100 * MODEL_SHARE:g} % of the raw bytes; not trained")
    non = fit_nonlinear(train, K, seed)
    err_non = _mse(non, test)
    if err_non < err_lin:
        return _with(non, err_lin, err_non, f"nonlinear: lower held-out error ({non.note})")
    return _with(lin, err_lin, err_non, f"linear: the nonlinear coder had higher held-out error ({non.note})")


def _with(c: Coder, lin: float, non: float, note: str) -> Coder:
    return Coder(c.kind, c.segment, c.code_size, c.basis, c.shifts, c.step, c.decoder, lin, non, note, c.encoder)
