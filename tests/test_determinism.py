"""The same input, settings and tool version give the same archive bytes: on any thread count, on a
fast or a busy machine, at any time of day.  And the trainer's arithmetic is exact where it must be."""

from __future__ import annotations

import os
import subprocess
import sys
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pytest

import tsarchive
from tsarchive.model import exact
from tsarchive.model import train as train_mod

from conftest import make_signal

PKG_ROOT = str(Path(tsarchive.__file__).resolve().parent.parent)


def _members(archive: Path) -> dict[str, bytes]:
    """Every file of the archive folder, by relative path."""
    return {str(p.relative_to(archive)): p.read_bytes() for p in sorted(archive.rglob("*")) if p.is_file()}


def _source(tmp_path: Path) -> Path:
    src = tmp_path / "rig.npy"
    np.save(src, make_signal(6000).astype(np.float32))
    return src


def _pack(src: Path, out: Path, **kw) -> dict[str, bytes]:
    # an explicit code size keeps the model, so its weights and every window's code are in the bytes
    tsarchive.pack(src, out, "0.5%", rate=200.0, window=64, code_size=4, train_seconds=5.0, **kw)
    return _members(out)


# ------------------------------------------------------------------------ whole archives
_CHILD = r"""
import os, sys
sys.path.insert(0, {root!r})
n = int(os.environ["OMP_NUM_THREADS"])
import torch
torch.set_num_threads(n)                 # torch threads too, in case anything on the way uses it
from threadpoolctl import threadpool_limits
import tsarchive
from tsarchive.model import train
train._one_blas_thread = lambda: threadpool_limits(limits=n, user_api="blas")   # the trainer's BLAS too
tsarchive.pack(sys.argv[1], sys.argv[2], "0.5%", rate=200.0, window=64, code_size=4, train_seconds=1.0)
"""


def test_same_archive_bytes_with_one_and_two_threads(tmp_path):
    src = _source(tmp_path)
    got = {}
    for n in (1, 2):
        env = dict(os.environ, TSARCHIVE_THREADS=str(n), OMP_NUM_THREADS=str(n), OPENBLAS_NUM_THREADS=str(n),
                   MKL_NUM_THREADS=str(n), NUMBA_NUM_THREADS=str(n))
        out = tmp_path / f"t{n}.tsa"
        subprocess.run([sys.executable, "-c", _CHILD.format(root=PKG_ROOT), str(src), str(out)], env=env,
                       check=True, capture_output=True, timeout=600)
        got[n] = _members(out)
    assert "model.parquet" in got[1]                      # the trained model is part of what is compared
    assert sorted(got[1]) == sorted(got[2])
    for name in got[1]:
        assert got[1][name] == got[2][name], name


_CODERS_CHILD = r"""
import sys
sys.path.insert(0, {root!r})
sys.path.insert(0, {tests!r})
from coder_kit import pack_with_coders
pack_with_coders(sys.argv[1], 150_000)
"""


def test_same_bytes_with_one_and_two_threads_when_the_adaptive_coder_is_chosen(tmp_path):
    # the coder choice counts bytes in integers: the channels coded adaptively (one from a fitted state)
    # and the one range coded are the same on any thread count
    from coder_kit import coder_ids, fitted
    got = {}
    for n in (1, 2):
        env = dict(os.environ, TSARCHIVE_THREADS=str(n), OMP_NUM_THREADS=str(n), OPENBLAS_NUM_THREADS=str(n),
                   MKL_NUM_THREADS=str(n), NUMBA_NUM_THREADS=str(n))
        out = tmp_path / f"t{n}" / "c.tsa"
        code = _CODERS_CHILD.format(root=PKG_ROOT, tests=str(Path(__file__).parent))
        subprocess.run([sys.executable, "-c", code, str(out)], env=env, check=True, capture_output=True, timeout=600)
        got[n] = _members(out)
    assert coder_ids(tmp_path / "t1" / "c.tsa") == [None, "adaptive"] and fitted(tmp_path / "t1" / "c.tsa")[1]
    assert sorted(got[1]) == sorted(got[2])
    for name in got[1]:
        assert got[1][name] == got[2][name], name


class _FastClock:
    """time.monotonic of a very busy (or very slow) machine: half a second passes between any two readings."""

    def __init__(self) -> None:
        self.t = 0.0

    def monotonic(self) -> float:
        self.t += 0.5
        return self.t

    def perf_counter(self) -> float:
        return self.monotonic()


def test_a_slow_clock_does_not_change_the_archive(tmp_path, monkeypatch):
    # Training used to stop on the wall clock: on a loaded machine fewer steps, other weights, other bytes.
    src = _source(tmp_path)
    calm = _pack(src, tmp_path / "calm.tsa")
    monkeypatch.setattr(train_mod, "time", _FastClock())
    busy = _pack(src, tmp_path / "busy.tsa")
    assert "model.parquet" in calm
    assert calm["model.parquet"] == busy["model.parquet"]     # the trained decoder's integers
    assert calm["windows.parquet"] == busy["windows.parquet"]  # every window's code
    assert calm == busy


def test_the_manifest_holds_no_clock_reading(tmp_path, monkeypatch):
    src = _source(tmp_path)
    now = _pack(src, tmp_path / "now.tsa")

    class _Later(datetime):
        @classmethod
        def now(cls, tz=None):
            return datetime(2041, 7, 1, 12, 0, 0, tzinfo=timezone.utc)

    import tsarchive.store.manifest as manifest_mod
    monkeypatch.setattr(manifest_mod, "datetime", _Later)
    later = _pack(src, tmp_path / "later.tsa")
    assert now["windows.parquet"] == later["windows.parquet"]      # format 6: the manifest is in its footer
    from tsarchive.store.binding import read_manifest
    assert "created_utc" not in read_manifest(tmp_path / "now.tsa")


def test_report_shows_when_the_archive_was_written_from_the_file_time(small_archive, capsys):
    from tsarchive.cli import main
    stamp = datetime(2030, 1, 2, 3, 4, 5, tzinfo=timezone.utc).timestamp()
    manifest = small_archive / "windows.parquet"          # format 6: the file that holds the manifest
    old = manifest.stat()
    try:
        os.utime(manifest, (stamp, stamp))
        assert main(["report", str(small_archive)]) == 0
    finally:
        os.utime(manifest, ns=(old.st_atime_ns, old.st_mtime_ns))
    # the expected text is ISO 8601 of the timestamp set above (datetime's own conversion)
    assert "written 2030-01-02T03:04:05Z" in capsys.readouterr().out


# ------------------------------------------------------------------------ the trainer
_TRAIN_CHILD = r"""
import hashlib, sys
sys.path.insert(0, {root!r})
import numpy as np
from threadpoolctl import threadpool_limits
from tsarchive.model import train
n = int(sys.argv[1])
train._one_blas_thread = lambda: threadpool_limits(limits=n, user_api="blas")
rng = np.random.default_rng(4)
t = np.arange(128)
X = np.sin(2 * np.pi * rng.uniform(1, 4, (600, 1)) * t / 128 + rng.uniform(0, 6, (600, 1)))
X += 0.05 * rng.standard_normal(X.shape)
m = train.train_autoencoder(X.astype(np.float32), 6, hidden=48, max_epochs=2, seed=3)
h = hashlib.sha256()
for layer in m.encoder + m.decoder:
    h.update(layer.weight.tobytes()); h.update(layer.bias.tobytes())
for k, v in sorted(m.int_decoder.to_arrays().items()):
    h.update(k.encode()); h.update(v.tobytes())
h.update(m.encode(X).tobytes())
print(h.hexdigest())
"""


def test_trainer_output_is_identical_across_blas_thread_counts():
    # float64 BLAS with 1, 2 and 4 threads blocks and orders its sums differently; the trained float
    # weights, the integer decoder and the codes must not notice.
    digests = set()
    for n in (1, 2, 4):
        out = subprocess.run([sys.executable, "-c", _TRAIN_CHILD.format(root=PKG_ROOT), str(n)], check=True,
                             capture_output=True, text=True, timeout=600)
        digests.add(out.stdout.strip())
    assert len(digests) == 1


def test_exact_matmul_equals_integer_arithmetic():
    # Reference: numpy's int64 matmul (integer arithmetic, no BLAS, no rounding) of the same grid
    # integers; the float64 BLAS product must equal it exactly, and scaling by powers of two is exact
    # (IEEE 754: the exponent changes, the significand does not).
    rng = np.random.default_rng(9)
    for n in (1, 7, 256, 8192):
        a = rng.standard_normal((33, n)) * rng.uniform(1e-3, 1e3, (33, 1))
        b = rng.standard_normal((n, 17)) * 10.0 ** rng.integers(-6, 6, 17)
        a[0] = 0.0                                        # an all-zero row has no exponent of its own
        bits = exact._bits_for(n)
        qa, sa = exact.to_grid(a, bits // 2, axis=1)
        qb, sb = exact.to_grid(b, bits - bits // 2, axis=0)
        assert np.all(qa == np.rint(qa)) and np.abs(qa).max() <= 2.0 ** (bits // 2)
        ref = qa.astype(np.int64) @ qb.astype(np.int64)
        assert np.abs(ref).max() < 2 ** 53                # every partial sum is a float64 integer
        got = exact.matmul(a, b)
        assert np.array_equal(got * sa * sb, ref.astype(np.float64))
        assert np.array_equal(exact.matmul(a[5:9], b), got[5:9])   # a row's result is its own
        # and the product is the true one to the grid's precision (2**-bits relative per operand)
        assert np.allclose(got, a @ b, rtol=0, atol=4 * n * 2.0 ** -(bits // 2) * np.abs(a).max() * np.abs(b).max())


def test_exact_total_is_order_free():
    # Summing the same numbers forwards, backwards and shuffled: plain float sums differ (rounding
    # depends on order, IEEE 754); the grid sum is the exact integer sum (Python ints as reference).
    rng = np.random.default_rng(2)
    x = rng.standard_normal(100_000) * 10.0 ** rng.integers(-8, 8, 100_000)
    sums = {exact.total(v) for v in (x, x[::-1], rng.permutation(x))}
    assert len(sums) == 1
    q, scale = exact.to_grid(x, exact._bits_for(x.size))
    assert sums.pop() == sum(int(v) for v in q.tolist()) / float(scale.ravel()[0])


def test_exact_tanh_and_exp_are_accurate_and_length_independent():
    # Reference: Python's math module (the platform C library); tolerance a few ulp (common practice
    # (no source)).  One-element arrays (numpy's scalar loop) and long ones (its SIMD loop) give the
    # same bits, as single IEEE-754 operations must.
    import math
    z = np.concatenate([np.linspace(-30.0, 30.0, 4001), [0.0, -0.0, 1e-300, 5e-9, 19.5, -700.0, 800.0]])
    th = exact.tanh(z)
    assert max(abs(a - math.tanh(v)) for a, v in zip(th.tolist(), z.tolist())) < 5e-16
    assert math.copysign(1.0, float(exact.tanh(np.array([-0.0]))[0])) == -1.0
    y = np.linspace(-700.0, 700.0, 4001)
    assert max(abs(a / math.exp(v) - 1) for a, v in zip(exact.exp(y).tolist(), y.tolist())) < 5e-16
    assert [float(exact.tanh(np.array([v]))[0]) for v in z[::97].tolist()] == exact.tanh(z[::97]).tolist()


def test_no_transcendental_function_in_training():
    # np.exp/tanh/log and friends dispatch to CPU-specific code; the trainer must not call them
    # (the only non-arithmetic ufuncs allowed are exact: abs, maximum, rint, frexp, ldexp, sqrt).
    import inspect
    import re
    for mod in (train_mod, exact):
        src = inspect.getsource(mod)
        assert not re.search(r"np\.(exp|expm1|log\w*|tanh|sinh|cosh|sin|cos|tan|arctan\w*|power|hypot)\(", src), \
            mod.__name__
        assert "import torch" not in src


@pytest.mark.parametrize("x", [0.75, 1.0, 1.5, 2.0 ** -30, 3.0 * 2.0 ** 40, np.nextafter(4.0, 0.0)])
def test_quantizer_exponents_are_exact(x):
    # floor/ceil of log2 from the float's exponent field; reference: Fraction arithmetic on the exact value
    from fractions import Fraction
    from tsarchive.model.intnet import _ceil_log2, _floor_log2
    f = Fraction(x)
    fl = max(k for k in range(-80, 80) if Fraction(2) ** k <= f)
    ce = min(k for k in range(-80, 80) if Fraction(2) ** k >= f)
    assert (_floor_log2(x), _ceil_log2(x)) == (fl, ce)


def test_training_randomness_is_built_from_the_raw_pcg64_words():
    # numpy's Generator conversions (uniform, choice, shuffle) may change between numpy versions; the
    # trainer's Stream uses only PCG64's raw 64-bit words (a fixed algorithm, O'Neill 2014), converted here.
    from tsarchive.model.train import Stream
    import numpy as np
    words = [int(w) for w in np.random.PCG64(7).random_raw(1000)]
    s = Stream(7)
    assert s.random(1000).tolist() == [(w >> 11) / 2**53 for w in words]    # exact in Python floats
    p = Stream(7).permutation(1000)
    assert sorted(p.tolist()) == list(range(1000))
    assert p.tolist() == sorted(range(1000), key=lambda i: (words[i], i))   # the order of the words
    c = Stream(7).choice(1000, 10)
    assert c.tolist() == sorted(p[:10].tolist())


def test_compiled_grid_equals_numpy_grid():
    # The compiled one-pass grid (model/exact.py) against numpy's max/min/frexp/rint path, bit for bit:
    # rows, columns, transposed views, zeros, subnormals, huge values, halves (round half to even,
    # IEEE 754 roundTiesToEven) and non-finite values (both refuse).
    if exact._kernels() is None:
        pytest.skip("numba is not installed")
    rng = np.random.default_rng(4)
    a = rng.standard_normal((37, 53)) * 10.0 ** rng.integers(-300, 300, (37, 1))
    a[0], a[1, :5], a[2] = 0.0, [5e-324, -2.5, 0.5, 1.5, -0.0], -0.0
    a[3] = np.arange(53) + 0.5
    for x in (a, a.T, a[::2, 1::3], np.ascontiguousarray(a.T)):
        for axis in (0, 1):
            for bits in (1, 12, 26):
                got = exact.to_grid(x, bits, axis=axis)
                peak = np.maximum(np.max(x, axis=axis, keepdims=True), -np.min(x, axis=axis, keepdims=True))
                scale = np.ldexp(1.0, bits - np.frexp(peak)[1])
                with np.errstate(invalid="ignore", over="ignore"):
                    want = np.rint(x * scale)
                assert np.array_equal(got[1], scale)
                assert np.array_equal(got[0].view(np.int64), want.view(np.int64))
    for bad in (np.nan, np.inf, -np.inf):
        b = a.copy()
        b[4, 7] = bad
        for axis in (0, 1):
            with pytest.raises(FloatingPointError):
                exact.to_grid(b, 20, axis=axis)
