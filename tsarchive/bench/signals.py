"""Synthetic signal families with known parameters, and the noise-entropy limit.

Every family is a function ``make_<family>(n, seed) -> Signal`` that is
deterministic for a given ``(n, seed)`` (``numpy.random.default_rng(seed)``).
Time is ``t = i / rate`` for sample ``i``; ``N(0, 1)`` is standard normal
noise.  Data is float32 (what a logger writes) except the integer counts,
which are int32.  The formula of each family is in its docstring and in
``Signal.formula`` so that a bench table can print it.

:func:`quantized_gaussian_entropy` is the "physical limit" for a channel
whose unpredictable part is Gaussian noise of known ``sigma``: the entropy
of that noise after uniform quantization with step ``2 eps``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tsarchive.errors import BadInput

DEFAULT_N = 200_000
QUICK_N = 20_000


@dataclass(frozen=True)
class Signal:
    """One synthetic recording: ``data`` is (n_samples, n_channels).

    ``noise_sigma`` is the standard deviation of the additive i.i.d.
    Gaussian noise in each channel (None when the family has none).  When
    ``noise_limited`` that noise is the family's only randomness (the rest
    is a fixed formula), so :func:`quantized_gaussian_entropy` is the
    reference limit for its bits per sample.
    """

    name: str
    data: np.ndarray
    rate: float
    channel_names: tuple[str, ...]
    unit: str
    formula: str
    noise_sigma: float | None = None
    seed: int = 0
    noise_limited: bool = False

    @property
    def n_samples(self) -> int:
        return int(self.data.shape[0])


def _t(n: int, rate: float) -> np.ndarray:
    if n < 2:
        raise BadInput(f"a synthetic signal needs at least 2 samples, got {n}; pass a larger n")
    return np.arange(n, dtype=np.float64) / rate


def make_noise(n: int = DEFAULT_N, seed: int = 1) -> Signal:
    """Pure Gaussian noise: ``x = sigma N(0,1)``, sigma = 1, rate 1 kHz, one channel."""
    rng = np.random.default_rng(seed)
    _t(n, 1000.0)
    x = rng.standard_normal(n)
    return Signal("noise", x.astype(np.float32)[:, None], 1000.0, ("x",), "V",
                  "x = 1.0*N(0,1)", noise_sigma=1.0, seed=seed, noise_limited=True)


def make_harmonics(n: int = DEFAULT_N, seed: int = 2) -> Signal:
    """Machine vibration, two channels at 1 kHz, fundamental f0 = 49.8 Hz:
    ``x_c = sum_{k=1..4} (1/k) sin(2 pi k f0 t + phi_{c,k}) + 0.02 N(0,1)``
    with phases ``phi`` uniform on [0, 2 pi) from the seed."""
    rng = np.random.default_rng(seed)
    rate, f0, sigma = 1000.0, 49.8, 0.02
    t = _t(n, rate)
    phases = rng.uniform(0.0, 2 * np.pi, size=(2, 4))
    cols = []
    for c in range(2):
        s = sum(np.sin(2 * np.pi * k * f0 * t + phases[c, k - 1]) / k for k in range(1, 5))
        cols.append(s + sigma * rng.standard_normal(n))
    return Signal("harmonics", np.column_stack(cols).astype(np.float32), rate, ("accel_x", "accel_y"), "g",
                  "sum_k=1..4 (1/k) sin(2pi k 49.8Hz t + phi) + 0.02*N(0,1)", noise_sigma=sigma, seed=seed,
                  noise_limited=True)


def make_chirp(n: int = DEFAULT_N, seed: int = 3) -> Signal:
    """Linear chirp, 1 kHz, sweeping f0 = 5 Hz to f1 = 200 Hz over the record length T:
    ``x = sin(2 pi (f0 t + (f1 - f0) t^2 / (2 T))) + 0.01 N(0,1)``."""
    rng = np.random.default_rng(seed)
    rate, f0, f1, sigma = 1000.0, 5.0, 200.0, 0.01
    t = _t(n, rate)
    big_t = n / rate
    x = np.sin(2 * np.pi * (f0 * t + (f1 - f0) * t * t / (2 * big_t))) + sigma * rng.standard_normal(n)
    return Signal("chirp", x.astype(np.float32)[:, None], rate, ("sweep",), "V",
                  "sin(2pi(5t + 195 t^2/(2T))) + 0.01*N(0,1)", noise_sigma=sigma, seed=seed,
                  noise_limited=True)


def make_steps(n: int = DEFAULT_N, seed: int = 4) -> Signal:
    """Set-point steps with first-order transients (a heated chamber), 10 Hz:
    levels ``L_j`` uniform on [20, 300] degC change at Poisson times (mean
    every 2000 samples); after a change at ``t_j`` the output relaxes as
    ``x = L_j + (x(t_j) - L_j) exp(-(t - t_j) / tau)``, tau = 30 s, plus
    ``0.05 N(0,1)``."""
    rng = np.random.default_rng(seed)
    rate, tau, sigma = 10.0, 30.0, 0.05
    _t(n, rate)
    change = rng.random(n) < 1.0 / 2000.0
    change[0] = True
    bounds = np.flatnonzero(change).tolist() + [n]
    x = np.empty(n)
    previous = 20.0
    for a, b in zip(bounds[:-1], bounds[1:]):
        target = rng.uniform(20.0, 300.0)
        x[a:b] = target + (previous - target) * np.exp(-np.arange(b - a) / rate / tau)
        previous = x[b - 1]
    x = x + sigma * rng.standard_normal(n)
    return Signal("steps", x.astype(np.float32)[:, None], rate, ("chamber",), "degC",
                  "level steps U[20,300] at Poisson times, relax tau=30s, + 0.05*N(0,1)", noise_sigma=sigma, seed=seed)


def make_random_walk(n: int = DEFAULT_N, seed: int = 5) -> Signal:
    """Strain drift as a Gaussian random walk, 100 Hz: ``x[i] = x[i-1] + 0.5 N(0,1)``, ``x[-1] = 0``."""
    rng = np.random.default_rng(seed)
    _t(n, 100.0)
    x = np.cumsum(0.5 * rng.standard_normal(n))
    return Signal("random_walk", x.astype(np.float32)[:, None], 100.0, ("strain",), "ustrain",
                  "x[i] = x[i-1] + 0.5*N(0,1)", noise_sigma=None, seed=seed)


def make_spikes(n: int = DEFAULT_N, seed: int = 6) -> Signal:
    """Sparse impulses on a noise floor, 2 kHz: ``x = 0.05 N(0,1) + sum_j s_j A_j delta[i - i_j]``,
    impulses with probability 1e-3 per sample, sign ``s_j = +-1`` and
    amplitude ``A_j`` uniform on [2, 10]; each impulse decays over 8 samples as 0.5^k."""
    rng = np.random.default_rng(seed)
    rate, sigma = 2000.0, 0.05
    _t(n, rate)
    impulses = np.zeros(n)
    where = rng.random(n) < 1e-3
    impulses[where] = rng.choice([-1.0, 1.0], size=int(where.sum())) * rng.uniform(2.0, 10.0, size=int(where.sum()))
    kernel = 0.5 ** np.arange(8)
    x = np.convolve(impulses, kernel)[:n] + sigma * rng.standard_normal(n)
    return Signal("spikes", x.astype(np.float32)[:, None], rate, ("pickup",), "mV",
                  "0.05*N(0,1) + impulses p=1e-3, +-U[2,10], decay 0.5^k over 8 samples", noise_sigma=sigma, seed=seed)


def make_counts(n: int = DEFAULT_N, seed: int = 7) -> Signal:
    """Integer event counts per 1 s bin: ``x ~ Poisson(lambda(t))``,
    ``lambda(t) = 40 (1 + 0.5 sin(2 pi t / 3600 s))``; int32 data."""
    rng = np.random.default_rng(seed)
    t = _t(n, 1.0)
    lam = 40.0 * (1.0 + 0.5 * np.sin(2 * np.pi * t / 3600.0))
    x = rng.poisson(lam).astype(np.int32)
    return Signal("counts", x[:, None], 1.0, ("events",), "1/s",
                  "Poisson(40(1 + 0.5 sin(2pi t/3600s)))", noise_sigma=None, seed=seed)


FAMILIES = {
    "noise": make_noise,
    "harmonics": make_harmonics,
    "chirp": make_chirp,
    "steps": make_steps,
    "random_walk": make_random_walk,
    "spikes": make_spikes,
    "counts": make_counts,
}


def make(name: str, n: int = DEFAULT_N) -> Signal:
    """The family ``name`` with ``n`` samples and its fixed seed."""
    try:
        factory = FAMILIES[name]
    except KeyError:
        raise BadInput(f"unknown synthetic signal {name!r}; choose one of {', '.join(FAMILIES)}") from None
    return factory(n)


def quantized_gaussian_entropy(eps: float, sigma: float) -> float:
    """Entropy in bits/sample of N(0, sigma^2) after uniform quantization with step 2 eps.

    ``H = -sum_k p_k log2 p_k``, ``p_k = Phi((2k+1) eps/sigma) - Phi((2k-1) eps/sigma)``
    (cells centred on ``2 k eps``).  For sigma >> eps this tends to
    ``log2(sigma / eps) + 1/2 log2(2 pi e) - 1 = log2(sigma/eps) + 1.047``
    (high-resolution quantization; Cover & Thomas, Elements of Information
    Theory, ch. 8).  Cells out to 12 sigma are summed; the tail beyond holds
    under 1e-32 of the mass.
    """
    from scipy.special import ndtr

    if not (eps > 0 and sigma > 0 and math.isfinite(eps) and math.isfinite(sigma)):
        raise BadInput(f"entropy needs positive finite eps and sigma, got eps={eps!r}, sigma={sigma!r}")
    r = eps / sigma
    k_max = int(math.ceil(12.0 / (2.0 * r))) + 1
    if k_max > 50_000_000:
        raise BadInput(f"eps/sigma = {r:g} is too small to sum exactly; use the high-resolution limit")
    k = np.arange(1, k_max + 1, dtype=np.float64)
    # Upper-tail differences (ndtr of negative arguments) keep the small cells accurate.
    p_pos = ndtr(-(2 * k - 1) * r) - ndtr(-(2 * k + 1) * r)
    p0 = 1.0 - 2.0 * ndtr(-r)
    probs = np.concatenate([[p0], p_pos, p_pos])
    probs = probs[probs > 0]
    return float(-np.sum(probs * np.log2(probs)))


def high_resolution_entropy(eps: float, sigma: float) -> float:
    """The sigma >> eps limit ``log2(sigma/eps) + 1/2 log2(2 pi e) - 1`` (bits/sample)."""
    return math.log2(sigma / eps) + 0.5 * math.log2(2 * math.pi * math.e) - 1.0
