"""Training the window autoencoder (numpy, reproducible bit for bit), and turning it into an IntDecoder.

Contract of :func:`train_autoencoder`:

* input ``X`` float (N, W), windows already normalised (typical ``|X| ~ 1``);
* at most ``max_windows`` randomly chosen rows are used (90 % train, 10 %
  held out for early stopping), so training cost does not grow with N;
* the run stops at convergence (held-out loss stalls), after ``max_epochs``,
  or when its **work budget** is spent: ``work`` multiply-adds, counted per
  step from the layer sizes (never the wall clock); the weights of the best
  held-out epoch are kept;
* **the same bits on every machine and thread count** for the same input,
  settings and seed: every product and sum goes through
  :mod:`tsarchive.model.exact` (operands rounded to integers whose partial
  sums float64 holds exactly), everything else is elementwise ``+ - * / sqrt
  rint`` (correctly rounded everywhere), tanh is built from those, and the
  random numbers come from numpy's PCG64 bit stream, turned into floats and
  orders by :class:`Stream` (numpy's own conversions may change between versions);
* ``cancel.is_set()`` is checked every batch and raises Cancelled.

Model: encoder MLP ``W -> He -> He -> K`` (ReLU; ``He = clamp(H, 64, 512)``), then ``tanh`` (from
:func:`tsarchive.model.exact.tanh`) and ``code = rint(127 * tanh)`` in int8 range; decoder
``code/127 -> H (ReLU) -> W``.
During training the rounding is replaced by additive uniform noise of one
code step (a standard differentiable stand-in for uniform quantization), so
the decoder learns to cope with rounded codes; the held-out loss uses true
rounding.  Adam (Kingma & Ba 2015) with the learning rate halved on a
plateau.  ``linear=True`` gives a linear encoder/decoder with float latents
and no squashing, noise or rounding (a linear autoencoder = PCA subspace).
"""

from __future__ import annotations

import math
import time
from contextlib import nullcontext
from dataclasses import dataclass
from typing import Callable

import numpy as np

from tsarchive.errors import BadInput, Cancelled
from tsarchive.model import exact
from tsarchive.model.intnet import IntDecoder, quantize_decoder
from tsarchive.model.spec import TrainProgress, TrainReport, choose_hidden

CODE_MAX = 127
_PATIENCE = 15           # epochs without held-out improvement before stopping
_MIN_REL_GAIN = 1e-3     # an improvement must beat the best by this fraction
_BATCH = 256
_LR = 1e-2               # Adam; 1e-2 beat 2e-3 and 4e-3 on sines and on the linear (SVD) case
_BETAS = (0.9, 0.999)
_ADAM_EPS = 1e-8
_LR_PATIENCE = 6         # epochs on a plateau before the learning rate halves
_LR_THRESHOLD = 1e-4     # relative improvement that counts against the plateau
_ENC_DEPTH = 2           # encoder hidden layers (free: the encoder is not stored); 2 beat 1 on 3 seeds
_ENC_MIN = 64
_CHUNK = 4096            # rows per inference batch


@dataclass(frozen=True, eq=False)
class Layer:
    """``y = x @ weight + bias``; ``weight`` float64 (n_in, n_out)."""

    weight: np.ndarray
    bias: np.ndarray


class Stream:
    """Random numbers from the PCG64 bit stream itself (``random_raw``), turned into floats and orders here.

    The PCG64 algorithm is fixed, but numpy's ``Generator`` methods that turn its bits into floats,
    choices and shuffles may change between numpy versions; building them from the raw 64-bit words
    keeps the trained weights, hence the archive's bytes, the same under every numpy in our range.
    """

    def __init__(self, seed: int) -> None:
        self._bits = np.random.PCG64(seed)

    def raw(self, n: int) -> np.ndarray:
        return self._bits.random_raw(int(n)).astype(np.uint64)

    def random(self, shape) -> np.ndarray:
        """Uniform floats in [0, 1): the top 53 bits of each word times 2**-53 (exact)."""
        n = int(np.prod(shape, dtype=np.int64))
        return ((self.raw(n) >> np.uint64(11)).astype(np.float64) * 2.0 ** -53).reshape(shape)

    def uniform(self, lo: float, hi: float, shape) -> np.ndarray:
        return lo + (hi - lo) * self.random(shape)

    def permutation(self, n: int) -> np.ndarray:
        """The order of ``n`` random 64-bit keys (a stable sort: ties, as unlikely as they are, keep index order)."""
        return np.argsort(self.raw(n), kind="stable")

    def choice(self, n: int, k: int) -> np.ndarray:
        """``k`` distinct indices of ``0..n-1``, sorted: the first ``k`` of a random order."""
        return np.sort(self.permutation(n)[:k])


def _init(rng: Stream, n_in: int, n_out: int) -> Layer:
    bound = 1.0 / math.sqrt(n_in)     # the usual U(-1/sqrt(fan_in), 1/sqrt(fan_in)) (as torch.nn.Linear)
    return Layer(rng.uniform(-bound, bound, (n_in, n_out)), rng.uniform(-bound, bound, n_out))


def _forward(layers: list[Layer], x: np.ndarray, keep: list | None = None) -> np.ndarray:
    """ReLU MLP (no ReLU after the last layer); ``keep`` collects each layer's input for the backward pass."""
    h = x
    for i, layer in enumerate(layers):
        if keep is not None:
            keep.append(h)
        h = exact.matmul(h, layer.weight) + layer.bias
        if i < len(layers) - 1:
            h = np.maximum(h, 0.0)
    return h


def _backward(layers: list[Layer], inputs: list[np.ndarray], dy: np.ndarray, grads: list) -> np.ndarray:
    """Append (dW, db) per layer (last layer first) to ``grads``; return the gradient at the input."""
    for i in range(len(layers) - 1, -1, -1):
        grads.append((exact.matmul(inputs[i].T, dy), exact.total(dy, axis=0)))
        dy = exact.matmul(dy, layers[i].weight.T)
        if i > 0:
            dy = dy * (inputs[i] > 0)          # ReLU of the previous layer: its output is this input
    return dy


@dataclass(frozen=True, eq=False)
class TrainedAutoencoder:
    """A trained model: float64 encoder/decoder layers plus the stored integer decoder."""

    encoder: tuple[Layer, ...]
    decoder: tuple[Layer, ...]
    report: TrainReport
    quantized: IntDecoder | None
    window: int
    code_size: int
    linear: bool

    @property
    def int_decoder(self) -> IntDecoder:
        """The quantized decoder that the archive stores (not defined for ``linear=True``)."""
        if self.quantized is None:
            raise BadInput("a linear autoencoder has float latents and no integer decoder; train with linear=False")
        return self.quantized

    def _rows(self, X: np.ndarray) -> np.ndarray:
        X = np.asarray(X)
        if X.ndim != 2 or X.shape[1] != self.window:
            raise BadInput(f"windows must have shape (N, {self.window}), got {X.shape}")
        return X

    def _latent(self, X: np.ndarray) -> np.ndarray:
        """Decoder input: the float latent (linear), else code / 127 with the code rounded."""
        z = _forward(list(self.encoder), X.astype(np.float64))
        return z if self.linear else np.rint(CODE_MAX * exact.tanh(z)) / CODE_MAX

    def encode(self, X: np.ndarray) -> np.ndarray:
        """int8 codes (N, K) in ``[-127, 127]`` for windows ``X`` (N, W); each row's code depends on that row only."""
        if self.linear:
            raise BadInput("a linear autoencoder has float latents; use latents() or train with linear=False")
        return self._batched(self._rows(X), lambda x: np.rint(self._latent(x) * CODE_MAX), self.code_size
                             ).astype(np.int8)

    def latents(self, X: np.ndarray) -> np.ndarray:
        """Decoder inputs (N, K) float64: raw latents (linear) or ``codes / 127``."""
        return self._batched(self._rows(X), self._latent, self.code_size)

    def float_decode(self, codes: np.ndarray) -> np.ndarray:
        """Float decoder output (N, W) float64 for int codes (or float latents when linear)."""
        codes = np.asarray(codes)
        if codes.ndim != 2 or codes.shape[1] != self.code_size:
            raise BadInput(f"codes must have shape (N, {self.code_size}), got {codes.shape}")
        z = codes.astype(np.float64) if self.linear else codes.astype(np.float64) / CODE_MAX
        return self._batched(z, lambda c: _forward(list(self.decoder), c), self.window)

    def reconstruct(self, X: np.ndarray) -> np.ndarray:
        """Encode then float-decode (through rounded codes unless linear), float64 (N, W)."""
        return self._batched(self._rows(X), lambda x: _forward(list(self.decoder), self._latent(x)), self.window)

    @staticmethod
    def _batched(X: np.ndarray, fn: Callable, width: int) -> np.ndarray:
        out = np.empty((X.shape[0], width), dtype=np.float64)
        for a in range(0, X.shape[0], _CHUNK):
            out[a:a + _CHUNK] = fn(np.asarray(X[a:a + _CHUNK], dtype=np.float64))
        return out


def train_autoencoder(X: np.ndarray, code_size: int, *, hidden: int | None = None, max_windows: int = 20000,
                      work: float | None = None, max_epochs: int = 300, seed: int = 0, linear: bool = False,
                      lr: float = _LR, progress: Callable[[TrainProgress], None] | None = None,
                      cancel: object | None = None) -> TrainedAutoencoder:
    """Train an autoencoder on windows ``X`` (N, W) with ``code_size`` latents (see module doc).

    ``hidden`` defaults to :func:`tsarchive.model.spec.choose_hidden` (decoder
    weights <= 5 % of the N*W samples, within ``[max(K, 4), 256]``).  ``work``
    caps the multiply-adds of the training steps (None: only ``max_epochs``
    and convergence stop it); at least one step is always taken.
    """
    X = np.asarray(X)
    if X.ndim != 2 or X.shape[0] < 2 or X.shape[1] < 1:
        raise BadInput(f"training needs a 2-D array of at least 2 windows, got shape {X.shape}")
    if not (1 <= code_size <= 64):
        raise BadInput(f"code size {code_size} is outside 1..64; choose a code size from 1 to 64")
    if max_windows < 2:
        raise BadInput(f"max_windows={max_windows} leaves nothing to train on; use at least 2")
    n, w = X.shape
    hidden = int(hidden) if hidden else choose_hidden(n, w, code_size)
    enc_hidden = int(min(512, max(_ENC_MIN, 4 * code_size, hidden)))

    rng = Stream(seed)
    pick = rng.choice(n, min(n, max_windows))
    sample = np.asarray(X[pick], dtype=np.float64)
    if not np.all(np.isfinite(sample)):
        raise BadInput("training windows contain NaN or infinity; clean or mask the source first")
    sample = sample[rng.permutation(sample.shape[0])]
    n_val = max(1, int(round(0.1 * sample.shape[0])))
    xv, xt = sample[:n_val], (sample[n_val:] if sample.shape[0] > n_val else sample)

    if linear:
        enc, dec = [_init(rng, w, code_size)], [_init(rng, code_size, w)]
    else:
        sizes = [w] + [enc_hidden] * _ENC_DEPTH + [code_size]
        enc = [_init(rng, a, b) for a, b in zip(sizes, sizes[1:])]
        dec = [_init(rng, code_size, hidden), _init(rng, hidden, w)]
    fit = _Fit(enc, dec, linear, rng, cancel)
    fit.lr = float(lr)
    with _one_blas_thread():
        report = fit.run(xt, xv, max_epochs, work, progress, hidden)
    model = TrainedAutoencoder(encoder=tuple(fit.enc), decoder=tuple(fit.dec), report=report, quantized=None,
                               window=w, code_size=code_size, linear=linear)
    if linear:
        return model
    with _one_blas_thread():
        int_dec = _quantize(model, xt)
    return TrainedAutoencoder(encoder=model.encoder, decoder=model.decoder, report=report,
                              quantized=int_dec, window=w, code_size=code_size, linear=False)


def _one_blas_thread():
    """Training's BLAS on one thread: packing encodes on the other core meanwhile, and a second BLAS thread
    on a busy core made each product several times slower (measured).  Speed only: the results are the
    same bits for any thread count (:mod:`tsarchive.model.exact`)."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:              # a dependency; without it training is as exact, only maybe slower
        return nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


class _Fit:
    """The training loop's state: layers, Adam moments, learning-rate schedule."""

    def __init__(self, enc: list[Layer], dec: list[Layer], linear: bool, rng: Stream, cancel):
        self.enc, self.dec, self.linear, self.rng, self.cancel = enc, dec, linear, rng, cancel
        self.moments = [(np.zeros_like(p), np.zeros_like(p)) for p in self._params()]
        self.t, self.lr = 0, _LR
        self.b1t, self.b2t = 1.0, 1.0          # beta**t by repeated multiplication (no pow)

    def _params(self) -> list[np.ndarray]:
        return [a for layer in self.enc + self.dec for a in (layer.weight, layer.bias)]

    def _loss_grad(self, xb: np.ndarray) -> float:
        """One forward/backward pass; returns the batch's mean squared error and applies an Adam step."""
        enc_in, dec_in = [], []
        z = _forward(self.enc, xb, enc_in)
        if self.linear:
            latent = z
        else:
            c = CODE_MAX * exact.tanh(z) + (self.rng.random(z.shape) - 0.5)   # one code step of noise
            latent = c / CODE_MAX
        err = _forward(self.dec, latent, dec_in) - xb
        dy = err * (2.0 / err.size)
        grads: list = []
        dz = _backward(self.dec, dec_in, dy, grads)
        if not self.linear:
            th = exact.tanh(z)
            dz = dz * (1.0 - th * th)            # d tanh / dz = 1 - tanh^2; the noise passes the gradient
        _backward(self.enc, enc_in, dz, grads)
        dec_grads, enc_grads = grads[:len(self.dec)][::-1], grads[len(self.dec):][::-1]
        self._adam([g for pair in enc_grads + dec_grads for g in pair])
        return exact.total(err * err) / err.size

    def _adam(self, grads: list[np.ndarray]) -> None:
        b1, b2 = _BETAS
        self.t += 1
        self.b1t, self.b2t = self.b1t * b1, self.b2t * b2
        step, unbias2 = self.lr / (1.0 - self.b1t), 1.0 - self.b2t
        for p, g, (m, v) in zip(self._params(), grads, self.moments):
            m *= b1
            m += (1.0 - b1) * g
            v *= b2
            np.multiply(g, g, out=g)           # g is spent: reuse it for g*g and the step (in place)
            g *= 1.0 - b2
            v += g
            np.divide(v, unbias2, out=g)
            np.sqrt(g, out=g)
            g += _ADAM_EPS
            np.divide(m, g, out=g)
            g *= step
            p -= g

    def _val_loss(self, xv: np.ndarray) -> float:
        sq = 0.0
        for a in range(0, xv.shape[0], _CHUNK):
            x = xv[a:a + _CHUNK]
            z = _forward(self.enc, x)
            latent = z if self.linear else np.rint(CODE_MAX * exact.tanh(z)) / CODE_MAX
            e = _forward(self.dec, latent) - x
            sq += exact.total(e * e)             # fixed chunk order: the same float additions everywhere
        return sq / xv.size

    def _epoch(self, xt: np.ndarray, xv: np.ndarray, bs: int, steps: int, max_steps: float):
        """One pass over ``xt`` (or until the work budget is spent): (train loss, held-out loss, spent, steps)."""
        order = self.rng.permutation(xt.shape[0])
        total, count = 0.0, 0
        for a in range(0, xt.shape[0], bs):
            if self.cancel is not None and self.cancel.is_set():
                raise Cancelled("training was cancelled; nothing was written")
            xb = xt[order[a:a + bs]]
            total += self._loss_grad(xb) * xb.shape[0]
            count += xb.shape[0]
            steps += 1
            if steps >= max_steps:
                break
        return total / max(count, 1), self._val_loss(xv), steps >= max_steps, steps

    def run(self, xt: np.ndarray, xv: np.ndarray, max_epochs: int, work: float | None, progress,
            hidden: int) -> TrainReport:
        t0 = time.monotonic()
        bs = int(min(_BATCH, max(16, xt.shape[0] // 32), xt.shape[0]))   # >= ~32 steps per epoch on small sets
        sizes = [l.weight.shape for l in self.enc + self.dec]
        per_step = 3 * bs * sum(a * b for a, b in sizes)
        max_steps = math.inf if work is None else max(1, int(work // per_step))
        best, best_epoch, train_loss = math.inf, 0, math.inf
        best_state = [p.copy() for p in self._params()]      # kept if training diverges at once
        plateau_best, bad_epochs, steps = math.inf, 0, 0
        stopped, epoch = "max_epochs", 0
        for epoch in range(1, max_epochs + 1):
            try:
                with np.errstate(over="ignore", invalid="ignore"):    # non-finite values are caught below
                    train_loss, val, spent, steps = self._epoch(xt, xv, bs, steps, max_steps)
            except FloatingPointError:
                stopped = "diverged"          # the best epoch so far (or the initial weights) is kept
                break
            if val < plateau_best * (1 - _LR_THRESHOLD):          # as torch's ReduceLROnPlateau (mode "min")
                plateau_best, bad_epochs = val, 0
            else:
                bad_epochs += 1
                if bad_epochs > _LR_PATIENCE:
                    self.lr, bad_epochs = self.lr * 0.5, 0
            if val < best * (1 - _MIN_REL_GAIN) or best_epoch == 0:
                best, best_epoch = val, epoch
                best_state = [p.copy() for p in self._params()]
            if progress is not None:
                progress(TrainProgress(epoch=epoch, epochs=max_epochs, loss=train_loss, val_loss=val,
                                       elapsed_s=time.monotonic() - t0))
            if spent:
                stopped = "work"
                break
            if epoch - best_epoch >= _PATIENCE:
                stopped = "converged"
                break
        for p, kept in zip(self._params(), best_state):
            p[...] = kept
        return TrainReport(epochs_run=epoch, stopped_by=stopped, best_epoch=best_epoch, train_loss=train_loss,
                           val_loss=best, n_train=int(xt.shape[0]), n_val=int(xv.shape[0]), hidden=hidden,
                           elapsed_s=time.monotonic() - t0)


def _quantize(model: TrainedAutoencoder, xt: np.ndarray) -> IntDecoder:
    """Quantize the decoder using activation ranges seen on the training sample (max is exact)."""
    h = model.latents(xt)
    act_max = []
    for layer in model.decoder[:-1]:
        h = np.maximum(model._batched(h, lambda x, l=layer: exact.matmul(x, l.weight) + l.bias,
                                      layer.weight.shape[1]), 0.0)
        act_max.append(float(h.max()) if h.size else 0.0)
    return quantize_decoder([(l.weight, l.bias) for l in model.decoder], act_max, code_max=CODE_MAX)
