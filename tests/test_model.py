"""Autoencoder training and the integer-only decoder (tsarchive.model)."""

from __future__ import annotations

import hashlib
import os
import subprocess
import sys
import threading
from pathlib import Path

import numpy as np
import pytest
import torch

import tsarchive
from tsarchive.errors import ArchiveCorrupt, BadInput, Cancelled
from tsarchive.model import FRAC_BITS, IntDecoder, IntLayer, choose_hidden, decoder_params
from tsarchive.model.torch_infer import predict_torch
from tsarchive.model.train import train_autoencoder

PKG_ROOT = str(Path(tsarchive.__file__).resolve().parent.parent)


def _sines(n: int, w: int, seed: int = 0) -> np.ndarray:
    """Windows of sines with random frequency (1..4 cycles), phase and amplitude, per-window centred."""
    rng = np.random.default_rng(seed)
    t = np.arange(w)
    f = rng.uniform(1.0, 4.0, (n, 1))
    ph = rng.uniform(0.0, 2 * np.pi, (n, 1))
    a = rng.uniform(0.5, 1.5, (n, 1))
    x = a * np.sin(2 * np.pi * f * t / w + ph) + 0.02 * rng.standard_normal((n, w))
    return (x - x.mean(axis=1, keepdims=True)).astype(np.float32)


@pytest.fixture(scope="module")
def sine_model():
    X = _sines(2000, 48)
    model = train_autoencoder(X, 4, max_epochs=60, seed=0)
    return X, model


def _python_int_decode(dec: IntDecoder, codes: np.ndarray) -> np.ndarray:
    """Reference: the decoder evaluated with Python's arbitrary-precision ints (cannot overflow)."""
    out = []
    for row in codes.tolist():
        h = [int(v) for v in row]
        for i, layer in enumerate(dec.layers):
            w = layer.weight.astype(np.int64).tolist()
            acc = [sum(h[k] * w[k][j] for k in range(len(h))) + int(layer.bias[j]) for j in range(len(w[0]))]
            s = int(layer.shift)
            acc = [a >> s if s >= 0 else a << -s for a in acc]   # Python >> floors, like numpy/torch on int64
            h = [max(a, 0) for a in acc] if i < len(dec.layers) - 1 else acc
        out.append(h)
    return np.array(out, dtype=object)


# ---------------------------------------------------------------- training
def test_linear_autoencoder_meets_eckart_young_bound():
    # Eckart & Young (1936) / Mirsky (1960): for centred data the best rank-K
    # approximation in Frobenius norm is the truncated SVD, so no linear
    # encoder/decoder pair with K latents can do better.  Reference: numpy.linalg.svd.
    rng = np.random.default_rng(1)
    n, w, k = 1000, 32, 3
    basis = rng.standard_normal((w, k))
    z = rng.standard_normal((n, k)) * np.array([3.0, 2.0, 1.5])
    X = z @ basis.T * (3.0 / np.sqrt(w)) + 0.1 * rng.standard_normal((n, w))
    X = (X - X.mean(axis=0)).astype(np.float32)
    s = np.linalg.svd(X.astype(np.float64), compute_uv=False)
    svd_mse = float(np.sum(s[k:] ** 2) / X.size)

    model = train_autoencoder(X, k, linear=True, max_epochs=300, seed=0)
    mse = float(np.mean((model.reconstruct(X).astype(np.float64) - X) ** 2))
    assert mse >= svd_mse * (1 - 1e-6)          # the theorem
    assert mse <= svd_mse * 1.05                # training gets close to the optimum
    with pytest.raises(BadInput):
        model.int_decoder                        # float latents: nothing integer to store


def test_nonlinear_model_learns_sines(sine_model):
    X, model = sine_model
    var = float(np.mean(X.astype(np.float64) ** 2))
    rec = model.float_decode(model.encode(X)).astype(np.float64)
    mse = float(np.mean((rec - X) ** 2))
    # Three free parameters per window (frequency, phase, amplitude) -> 4 codes
    # should explain the bulk of the variance; bar "< 10 %" is common practice (no source).
    assert mse < 0.1 * var
    codes = model.encode(X)
    assert codes.dtype == np.int8 and codes.shape == (2000, 4)
    assert int(np.abs(codes.astype(int)).max()) <= 127


def test_training_is_deterministic_for_a_seed():
    X = _sines(300, 32, seed=3)
    a = train_autoencoder(X, 2, max_epochs=3, seed=7)
    b = train_autoencoder(X, 2, max_epochs=3, seed=7)
    assert np.array_equal(a.encode(X), b.encode(X))
    assert a.int_decoder.to_arrays()["w1"].tobytes() == b.int_decoder.to_arrays()["w1"].tobytes()


def test_work_budget_counts_steps_not_seconds():
    # 400 windows: 40 held out, 360 trained in batches of 16 (>= 32 steps an epoch: 23 steps).  A budget
    # of exactly 30 steps' multiply-adds (3x the forward products of every layer, common practice (no
    # source)) must end the run in its second epoch, whatever the machine's speed.
    X = _sines(400, 32)
    h = choose_hidden(400, 32, 2)
    sizes = [32, 64, 64, 2, h, 32]
    per_step = 3 * 16 * sum(a * b for a, b in zip(sizes, sizes[1:]))
    model = train_autoencoder(X, 2, max_epochs=50, work=30 * per_step)
    assert (model.report.stopped_by, model.report.epochs_run) == ("work", 2)
    model = train_autoencoder(X, 2, max_epochs=50, work=23 * per_step - 1)
    assert (model.report.stopped_by, model.report.epochs_run) == ("work", 1)


def test_diverging_training_keeps_finite_weights():
    # Windows of 1e200 overflow the squared error (float64 max ~1.8e308, IEEE 754): training stops as
    # "diverged" and keeps the initial weights, which still quantize to a valid integer decoder.
    X = _sines(200, 16) * np.float64(1e200)
    model = train_autoencoder(X, 2, max_epochs=5)
    assert model.report.stopped_by == "diverged"
    assert all(np.isfinite(l.weight).all() for l in model.encoder + model.decoder)
    assert model.int_decoder.predict(np.zeros((1, 2), np.int8)).shape == (1, 16)


def test_progress_is_reported_per_epoch():
    X = _sines(200, 32)
    seen = []
    train_autoencoder(X, 2, max_epochs=3, progress=seen.append)
    assert [p.epoch for p in seen] == [1, 2, 3]
    assert all(p.epochs == 3 and np.isfinite(p.loss) and np.isfinite(p.val_loss) for p in seen)


def test_cancel_raises_cancelled():
    X = _sines(200, 32)
    ev = threading.Event()
    ev.set()
    with pytest.raises(Cancelled):
        train_autoencoder(X, 2, max_epochs=5, cancel=ev)
    ev2 = threading.Event()
    with pytest.raises(Cancelled):
        train_autoencoder(X, 2, max_epochs=50, cancel=ev2,
                          progress=lambda p: ev2.set() if p.epoch == 2 else None)


def test_bad_training_input():
    with pytest.raises(BadInput):
        train_autoencoder(np.zeros((10, 8), np.float32), 0)
    bad = _sines(20, 8)
    bad[3, 2] = np.nan
    with pytest.raises(BadInput):
        train_autoencoder(bad, 2, max_epochs=1)


def test_hidden_width_rule():
    # Our sizing rule (common practice (no source)): the decoder may cost at most 5 % of the samples.
    for n, w, k in [(100000, 512, 8), (3000, 256, 4), (800, 64, 2), (20000, 4096, 16)]:
        h = choose_hidden(n, w, k)
        assert max(k, 4) <= h <= 256
        if max(k, 4) < h < 256:
            assert decoder_params(k, h, w) <= 0.05 * n * w < decoder_params(k, h + 1, w)
    assert choose_hidden(10, 32, 8) == 8          # floor at K on tiny inputs
    assert choose_hidden(10 ** 6, 512, 8) == 256  # cap


# --------------------------------------------------------- integer decoder
def test_int_decoder_close_to_float_decoder(sine_model):
    X, model = sine_model
    codes = model.encode(X)
    fl = model.float_decode(codes).astype(np.float64)
    y = model.int_decoder.predict(codes)
    assert y.dtype == np.int64 and y.shape == X.shape
    gap = np.sqrt(np.mean((y / 2.0 ** FRAC_BITS - fl) ** 2)) / np.sqrt(np.mean(X.astype(np.float64) ** 2))
    assert gap < 0.01                          # design target for 12-bit weights: common practice (no source)


def test_int_paths_agree_bit_for_bit(sine_model):
    X, model = sine_model
    dec = model.int_decoder
    rng = np.random.default_rng(5)
    codes = np.concatenate([model.encode(X[:300]), rng.integers(-127, 128, (200, 4)).astype(np.int8)])
    ref = dec.predict(codes)
    assert np.array_equal(dec.predict(codes, exact_int64=True), ref)
    old = torch.get_num_threads()
    try:
        for n in (1, 2):
            torch.set_num_threads(n)
            assert np.array_equal(predict_torch(dec, codes), ref)
    finally:
        torch.set_num_threads(old)
    # Independent reference: Python's arbitrary-precision ints, whose >> floors
    # (Python language reference, "Shifting operations").
    assert np.array_equal(_python_int_decode(dec, codes[:3].astype(np.int64)).astype(np.int64), ref[:3])


def _extreme_decoder() -> IntDecoder:
    """Largest 12-bit weights everywhere, shift 0: a near worst case for the accumulator bound."""
    k, h, w = 64, 64, 16
    rng = np.random.default_rng(2)
    s1 = rng.choice([-1, 1], size=(k, h)).astype(np.int16) * 2047
    s1[:, :32] = 2047                          # all-(+127) codes drive hidden units 0..31 to their maximum
    s2 = rng.choice([-1, 1], size=(h, w)).astype(np.int16) * 2047
    s2[:, 0] = 2047                            # ... and output 0 adds them all up
    return IntDecoder(layers=(IntLayer(s1, np.full(h, 2 ** 20, np.int64), 0),
                              IntLayer(s2, np.full(w, -(2 ** 30), np.int64), 0)))


def test_no_overflow_with_extreme_codes():
    dec = _extreme_decoder()
    rng = np.random.default_rng(3)
    codes = np.concatenate([np.full((1, 64), 127), np.full((1, 64), -127),
                            rng.choice([-127, 127], size=(6, 64))]).astype(np.int8)
    ref = _python_int_decode(dec, codes)
    assert max(abs(int(v)) for v in ref.ravel()) > 2 ** 40          # large, yet exact
    assert np.array_equal(dec.predict(codes), ref.astype(np.int64))
    assert np.array_equal(dec.predict(codes, exact_int64=True), ref.astype(np.int64))
    assert np.array_equal(predict_torch(dec, codes), ref.astype(np.int64))


def test_unsafe_decoder_is_rejected():
    base = _extreme_decoder()
    third = IntLayer(np.full((16, 16), 2047, np.int16), np.zeros(16, np.int64), 0)
    with pytest.raises(BadInput):              # worst case exceeds 2**50 -> refused at construction
        IntDecoder(layers=base.layers + (third,))


def test_codes_out_of_range_are_refused(sine_model):
    dec = sine_model[1].int_decoder
    with pytest.raises(BadInput):
        dec.predict(np.full((1, 4), 128, np.int16))
    with pytest.raises(BadInput):
        dec.predict(np.zeros((1, 5), np.int8))
    with pytest.raises(BadInput):              # |int64 min| would wrap under np.abs
        dec.predict(np.array([[-(2 ** 63), 0, 0, 0]], np.int64))


def test_arrays_round_trip(sine_model):
    dec = sine_model[1].int_decoder
    arrays = dec.to_arrays()
    assert all(np.issubdtype(a.dtype, np.integer) for a in arrays.values())
    back = IntDecoder.from_arrays({k: v.copy() for k, v in arrays.items()})
    codes = sine_model[1].encode(sine_model[0][:50])
    assert np.array_equal(back.predict(codes), dec.predict(codes))
    assert back.config() == dec.config() and dec.config()["id"] == "mlp-int-v1"
    assert dec.n_params == decoder_params(4, dec.sizes[1], 48)


@pytest.mark.parametrize("damage", ["missing", "float", "bias_len", "shift", "huge_weight", "wrap_weight", "extra",
                                    "frac"])
def test_damaged_arrays_raise_archive_corrupt(sine_model, damage):
    d = {k: v.copy() for k, v in sine_model[1].int_decoder.to_arrays().items()}
    if damage == "missing":
        del d["b1"]
    elif damage == "float":
        d["w0"] = d["w0"].astype(np.float32)
    elif damage == "bias_len":
        d["b0"] = d["b0"][:-1]
    elif damage == "shift":
        d["shifts"][0] = 99
    elif damage == "huge_weight":
        d["w1"] = d["w1"].astype(np.int64) * 10 ** 6
    elif damage == "wrap_weight":             # would wrap to 0 if cast to int16 unchecked
        d["w0"] = d["w0"].astype(np.int64)
        d["w0"][0, 0] = -(2 ** 63)
    elif damage == "extra":
        d["w7"] = d["w0"]
    elif damage == "frac":
        d["frac_bits"] = np.array([1, 2])
    with pytest.raises(ArchiveCorrupt):
        IntDecoder.from_arrays(d)


# ------------------------------------------------------ process-level checks
_CHILD = """
import hashlib, sys, numpy as np
from tsarchive.model.intnet import IntDecoder
z = np.load(sys.argv[1])
dec = IntDecoder.from_arrays({k: z[k] for k in z.files if k != "codes"})
print(hashlib.sha256(dec.predict(z["codes"]).tobytes()).hexdigest())
print("torch" in sys.modules)
"""


def test_numpy_predict_is_independent_of_thread_env(sine_model, tmp_path):
    X, model = sine_model
    codes = model.encode(X)
    path = tmp_path / "dec.npz"
    np.savez(path, codes=codes, **model.int_decoder.to_arrays())
    want = hashlib.sha256(model.int_decoder.predict(codes).tobytes()).hexdigest()
    for n in ("1", "2"):
        env = dict(os.environ, OMP_NUM_THREADS=n, OPENBLAS_NUM_THREADS=n, MKL_NUM_THREADS=n,
                   PYTHONPATH=PKG_ROOT)
        out = subprocess.run([sys.executable, "-c", _CHILD, str(path)], env=env, capture_output=True,
                             text=True, check=True).stdout.split()
        assert out[0] == want
        assert out[1] == "False"               # the reading side never loads torch
