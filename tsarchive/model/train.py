"""Training the window autoencoder with torch (CPU), and turning it into an IntDecoder.

Contract of :func:`train_autoencoder`:

* input ``X`` float (N, W), windows already normalised (typical ``|X| ~ 1``);
* at most ``max_windows`` randomly chosen rows are used (90 % train, 10 %
  held out for early stopping), so training cost does not grow with N;
* the run stops at convergence (held-out loss stalls), after ``max_epochs``
  or when ``time_limit_s`` of wall clock have passed (checked every batch);
  the weights of the best held-out epoch are kept;
* deterministic for a given ``seed`` as long as the time limit is not what
  stops the run (torch's CPU kernels are deterministic for a fixed thread count);
* ``cancel.is_set()`` is checked every batch and raises Cancelled.

Model: encoder MLP ``W -> He -> He -> K`` (ReLU; ``He = clamp(H, 64, 512)``), then ``tanh`` and ``code =
round(127 * tanh)`` in int8 range; decoder ``code/127 -> H (ReLU) -> W``.  During
training the rounding is replaced by additive uniform noise of one code
step (a standard differentiable stand-in for uniform quantization), so the
decoder learns to cope with rounded codes; the held-out loss uses true
rounding.  ``linear=True`` gives a linear encoder/decoder with float latents
and no tanh, noise or rounding (a linear autoencoder = PCA subspace).
"""

from __future__ import annotations

import math
import os
import time
from dataclasses import dataclass
from typing import Callable

import numpy as np
import torch
from torch import nn

from tsarchive.errors import BadInput, Cancelled
from tsarchive.model.intnet import IntDecoder, quantize_decoder
from tsarchive.model.spec import TrainProgress, TrainReport, choose_hidden

CODE_MAX = 127
_PATIENCE = 15           # epochs without held-out improvement before stopping
_MIN_REL_GAIN = 1e-3     # an improvement must beat the best by this fraction
_BATCH = 256
_LR = 1e-2               # Adam; 1e-2 beat 2e-3 and 4e-3 on sines and on the linear (SVD) case
_QUANT = "noise"         # "noise" (additive uniform) or "ste" (straight-through rounding): on par when measured
_LR_PATIENCE = 6          # epochs on a plateau before the learning rate halves
_ENC_DEPTH = 2            # encoder hidden layers (free: the encoder is not stored); 2 beat 1 on 3 seeds
_ENC_MIN = 64


def _threads() -> int:
    """Intra-op threads for training: the cores that are idle now (1-minute load average), 1..8.

    Oversubscribed cores make torch's worker threads wait on each other (measured
    16 ms/step with 1 thread vs 265 ms/step with 2 on a busy 2-core machine).
    """
    cores = os.cpu_count() or 1
    try:
        idle = cores - os.getloadavg()[0]
    except (AttributeError, OSError):
        idle = cores
    return int(max(1, min(cores, 8, round(idle))))


class _Net(nn.Module):
    def __init__(self, window: int, code_size: int, hidden: int, enc_hidden: int, linear: bool):
        super().__init__()
        self.linear = linear
        if linear:
            self.encoder = nn.Linear(window, code_size)
            self.decoder = nn.Sequential(nn.Linear(code_size, window))
        else:
            enc = [nn.Linear(window, enc_hidden), nn.ReLU()]
            for _ in range(_ENC_DEPTH - 1):
                enc += [nn.Linear(enc_hidden, enc_hidden), nn.ReLU()]
            self.encoder = nn.Sequential(*enc, nn.Linear(enc_hidden, code_size))
            self.decoder = nn.Sequential(nn.Linear(code_size, hidden), nn.ReLU(), nn.Linear(hidden, window))

    def latent(self, x: torch.Tensor, mode: str) -> torch.Tensor:
        """Decoder input: float latent (linear), else code/127 with ``mode`` 'noise' | 'round'."""
        z = self.encoder(x)
        if self.linear:
            return z
        z = torch.tanh(z) * CODE_MAX
        if mode == "noise":
            z = z + (torch.rand_like(z) - 0.5)
        elif mode == "ste":
            z = z + (torch.round(z) - z).detach()
        else:
            z = torch.round(z)
        return z / CODE_MAX

    def forward(self, x: torch.Tensor, mode: str = "round") -> torch.Tensor:
        return self.decoder(self.latent(x, mode))


@dataclass(frozen=True, eq=False)
class TrainedAutoencoder:
    """A trained model: float encoder/decoder (torch) plus the stored integer decoder."""

    net: _Net
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

    def encode(self, X: np.ndarray, batch: int = 4096) -> np.ndarray:
        """int8 codes (N, K) in ``[-127, 127]`` for windows ``X`` (N, W) (float inference, batched)."""
        if self.linear:
            raise BadInput("a linear autoencoder has float latents; use latents() or train with linear=False")
        return self._batched(X, batch, lambda x: torch.round(self.net.latent(x, "round") * CODE_MAX),
                             self.code_size).astype(np.int8)

    def latents(self, X: np.ndarray, batch: int = 4096) -> np.ndarray:
        """Decoder inputs (N, K) float32: raw latents (linear) or ``codes / 127``."""
        return self._batched(X, batch, lambda x: self.net.latent(x, "round"), self.code_size)

    def float_decode(self, codes: np.ndarray, batch: int = 4096) -> np.ndarray:
        """Float decoder output (N, W) float32 for int codes (or float latents when linear)."""
        codes = np.asarray(codes)
        if codes.ndim != 2 or codes.shape[1] != self.code_size:
            raise BadInput(f"codes must have shape (N, {self.code_size}), got {codes.shape}")
        z = codes.astype(np.float32) if self.linear else codes.astype(np.float32) / CODE_MAX
        return self._batched(z, batch, self.net.decoder, self.window, check=False)

    def reconstruct(self, X: np.ndarray, batch: int = 4096) -> np.ndarray:
        """Encode then float-decode (through rounded codes unless linear), float32 (N, W)."""
        return self._batched(X, batch, lambda x: self.net(x, "round"), self.window)

    def _batched(self, X: np.ndarray, batch: int, fn: Callable, width: int, check: bool = True) -> np.ndarray:
        X = self._rows(X) if check else X
        out = np.empty((X.shape[0], width), dtype=np.float32)
        self.net.eval()
        with torch.no_grad():
            for a in range(0, X.shape[0], batch):
                x = torch.from_numpy(np.ascontiguousarray(X[a:a + batch], dtype=np.float32))
                out[a:a + batch] = fn(x).numpy()
        return out


def train_autoencoder(X: np.ndarray, code_size: int, *, hidden: int | None = None, max_windows: int = 20000,
                      time_limit_s: float = 60.0, max_epochs: int = 300, seed: int = 0, linear: bool = False,
                      progress: Callable[[TrainProgress], None] | None = None,
                      cancel: object | None = None, threads: int | None = None) -> TrainedAutoencoder:
    """Train an autoencoder on windows ``X`` (N, W) with ``code_size`` latents (see module doc).

    ``hidden`` defaults to :func:`tsarchive.model.spec.choose_hidden` (decoder
    weights <= 5 % of the N*W samples, within ``[max(K, 4), 256]``).  ``threads``
    fixes torch's intra-op thread count (default: the idle cores); the previous
    setting is restored on return.
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
    t0 = time.monotonic()

    rng = np.random.default_rng(seed)
    pick = np.sort(rng.choice(n, size=min(n, max_windows), replace=False))
    sample = np.asarray(X[pick], dtype=np.float32)
    if not np.all(np.isfinite(sample)):
        raise BadInput("training windows contain NaN or infinity; clean or mask the source first")
    rng.shuffle(sample)
    n_val = max(1, int(round(0.1 * sample.shape[0])))
    xv = torch.from_numpy(sample[:n_val])
    xt = torch.from_numpy(sample[n_val:] if sample.shape[0] > n_val else sample)

    old_threads = torch.get_num_threads()
    torch.set_num_threads(int(threads) if threads else _threads())
    try:
        with torch.random.fork_rng(devices=[]):  # seed locally; the caller's RNG state is left alone
            torch.manual_seed(seed)
            gen = torch.Generator().manual_seed(seed)
            net = _Net(w, code_size, hidden, enc_hidden, linear)
            net, report = _fit(net, xt, xv, max_epochs, time_limit_s, t0, gen, progress, cancel, hidden)
        int_dec = None if linear else _quantize(net, xt)
    finally:
        torch.set_num_threads(old_threads)
    return TrainedAutoencoder(net=net, report=report, quantized=int_dec, window=w, code_size=code_size,
                              linear=linear)


def _fit(net: _Net, xt: torch.Tensor, xv: torch.Tensor, max_epochs: int, time_limit_s: float, t0: float,
         gen: torch.Generator, progress, cancel, hidden: int) -> tuple[_Net, TrainReport]:
    opt = torch.optim.Adam(net.parameters(), lr=_LR)
    mode = "exact" if net.linear else _QUANT
    bs = int(min(_BATCH, max(16, xt.shape[0] // 32), xt.shape[0]))   # >= ~32 steps per epoch on small sets
    best, best_epoch, best_state, train_loss = math.inf, 0, None, math.inf
    sched = torch.optim.lr_scheduler.ReduceLROnPlateau(opt, factor=0.5, patience=_LR_PATIENCE)
    stopped, epoch = "max_epochs", 0
    for epoch in range(1, max_epochs + 1):
        net.train()
        order = torch.randperm(xt.shape[0], generator=gen)
        total, count, out_of_time = 0.0, 0, False
        for a in range(0, xt.shape[0], bs):
            if cancel is not None and cancel.is_set():
                raise Cancelled("training was cancelled; nothing was written")
            xb = xt[order[a:a + bs]]
            loss = torch.mean((net(xb, mode) - xb) ** 2)
            opt.zero_grad(set_to_none=True)
            loss.backward()
            opt.step()
            total += float(loss.detach()) * xb.shape[0]
            count += xb.shape[0]
            if time.monotonic() - t0 > time_limit_s:
                out_of_time = True
                break
        net.eval()
        with torch.no_grad():
            val = float(torch.mean((net(xv, "round") - xv) ** 2))
        train_loss = total / max(count, 1)
        sched.step(val)
        if val < best * (1 - _MIN_REL_GAIN) or best_state is None:
            best, best_epoch = val, epoch
            best_state = {k: v.detach().clone() for k, v in net.state_dict().items()}
        if progress is not None:
            progress(TrainProgress(epoch=epoch, epochs=max_epochs, loss=train_loss, val_loss=val,
                                   elapsed_s=time.monotonic() - t0))
        if out_of_time:
            stopped = "time"
            break
        if epoch - best_epoch >= _PATIENCE:
            stopped = "converged"
            break
    net.load_state_dict(best_state)
    net.eval()
    report = TrainReport(epochs_run=epoch, stopped_by=stopped, best_epoch=best_epoch, train_loss=train_loss,
                         val_loss=best, n_train=int(xt.shape[0]), n_val=int(xv.shape[0]), hidden=hidden,
                         elapsed_s=time.monotonic() - t0)
    return net, report


def _quantize(net: _Net, xt: torch.Tensor) -> IntDecoder:
    """Quantize the decoder using activation ranges seen on the training sample."""
    layers = [m for m in net.decoder if isinstance(m, nn.Linear)]
    act_max = []
    with torch.no_grad():
        h = torch.cat([net.latent(xt[a:a + 4096], "round") for a in range(0, xt.shape[0], 4096)])
        for lin in layers[:-1]:
            h = torch.relu(lin(h))
            act_max.append(float(h.max()) if h.numel() else 0.0)
    weights = [(lin.weight.detach().numpy().T.astype(np.float64), lin.bias.detach().numpy().astype(np.float64))
               for lin in layers]
    return quantize_decoder(weights, act_max, code_max=CODE_MAX)
