"""The classic coder's choice, screened (tsarchive.coding.fallback, issue 12): zstd -19 and xz run only
where they can still be chosen, and the choice is the one the full search makes.

Outside references: every combination's bytes are made by the libraries themselves (the standard
library's ``lzma`` and ``bz2``, the ``zstandard`` package) on numpy's ``diff`` / ``cumsum`` of the windows
(tests/test_classic_channel.py::_library_sizes); the full search's rule is the module's own statement of it
(zstd and bzip2 on every order and shuffle, xz too where the best is within 5/4 of the bytes to beat, the
fewest bytes, ties in the order zstd, bzip2, xz; DEVELOPERS.md, the classic fallback).
"""

from __future__ import annotations

import numpy as np
import pytest

from tsarchive.coding import classic, fallback

from test_classic_channel import _library_sizes

_RANK = ("zstd", "bzip2", "xz")


def _full_search(res: np.ndarray, promising) -> tuple[str, int, bool] | None:
    """The combination trying every one chooses, by the libraries' bytes; None where it is not promising."""
    sizes = _library_sizes(res)
    key = lambda k: (sizes[k], _RANK.index(k[0]), k[1], k[2])      # noqa: E731
    fast = min((k for k in sizes if k[0] != "xz"), key=key)
    reach = promising(sizes[fast] * 4 // 5)
    best = min((k for k in sizes if reach or k[0] != "xz"), key=key)
    return best if promising(sizes[best]) else None


def _counting(monkeypatch) -> dict[int, int]:
    """Runs of each compressor (0 zstd -19, 1 xz, 2 bzip2) the coder makes from here on."""
    runs = {0: 0, 1: 0, 2: 0}
    compress = classic._compress

    def spy(raw, kind):
        runs[kind] += 1
        return compress(raw, kind)

    monkeypatch.setattr(classic, "_compress", spy)
    return runs


def _staircase(seed: int, flips: float, width: int = 300) -> np.ndarray:
    """Previous-sample residuals of 4 windows of 1024 samples: a staircase of levels repeated, a few
    samples one step off (synthetic test data, not a reference)."""
    rng = np.random.default_rng(seed)
    q = np.resize(np.repeat(rng.integers(-width, width, 24), 37), 4 * 1024)
    q = q + rng.integers(-1, 2, q.size) * (rng.random(q.size) < flips)
    q = q.reshape(4, 1024)
    return fallback.prev_residuals(q, q[:, 0])


def _walk_pattern(seed: int) -> np.ndarray:
    """A random walk of 700 samples repeated exactly, in 4 windows of 1024 (synthetic test data)."""
    rng = np.random.default_rng(seed)
    q = np.resize(np.cumsum(rng.integers(-40, 41, 700)), 4 * 1024).reshape(4, 1024)
    return fallback.prev_residuals(q, q[:, 0])


SIGNALS = [pytest.param(lambda: _staircase(3, 0.0), id="staircase"),
           pytest.param(lambda: _staircase(4, 0.02), id="staircase-flips"),
           pytest.param(lambda: _staircase(5, 0.2, 40), id="narrow-staircase-noisy"),
           pytest.param(lambda: _walk_pattern(6), id="walk-repeated")]


@pytest.mark.parametrize("make", SIGNALS)
@pytest.mark.parametrize("reach", [None, (5, 4), (11, 10), (1, 1)])
def test_the_screened_choice_is_the_full_search_choice(make, reach, monkeypatch):
    # the bytes to beat: anything (None), or the full search's best bytes times reach (a tie is not below)
    res = make()
    best = min(_library_sizes(res).values())
    limit = None if reach is None else best * reach[0] // reach[1]
    promising = (lambda size: True) if limit is None else (lambda size: size < limit)
    runs = _counting(monkeypatch)
    coder, payloads = fallback._setting(res, promising)
    want = _full_search(res, promising)
    got = None if coder is None else (coder.compressors[0], coder.orders[0], coder.shuffles[0])
    assert got == want
    if coder is not None:
        assert sum(map(len, payloads)) == _library_sizes(res)[got]     # the bytes are the libraries' own
    assert runs[0] <= 6 * len(res) and runs[2] <= 6 * len(res)         # at most as before


def test_one_byte_values_are_not_coded_again_shuffled(monkeypatch):
    # shuffling bytes of one-byte values changes nothing (Blosc's shuffle of element size 1), so where every
    # window's values of an order fit one byte (numpy's int8 range) the shuffled combination is not run again
    res = _staircase(5, 0.2, 40)
    fits = [o for o in (-1, 0, 1) if all(-128 <= v.min() and v.max() <= 127 for v in
                                         (np.cumsum(w) if o == -1 else np.diff(w, prepend=0) if o == 1 else w
                                          for w in res))]
    assert fits
    runs = _counting(monkeypatch)
    fallback._setting(res, lambda size: True)
    assert runs[2] == len(res) * (6 - len(fits))                       # bzip2: before, 6 runs a window


def test_zstd_19_runs_only_where_its_bound_is_within_the_best(monkeypatch):
    # the staircase: bzip2 takes far fewer bytes than zstd -9 on the shuffled orders, so zstd -19 is left out
    # there; what is left out takes more bytes with zstd -19 than the best (the libraries' sizes)
    res = _staircase(3, 0.0)
    runs = _counting(monkeypatch)
    coder, _ = fallback._setting(res, lambda size: True)
    sizes = _library_sizes(res)
    chosen = sizes[(coder.compressors[0], coder.orders[0], coder.shuffles[0])]
    assert 0 < runs[0] < 6 * len(res)                                  # before: every one of them
    skipped = 6 - runs[0] // len(res)
    above = sum(1 for k, v in sizes.items() if k[0] == "zstd" and v > chosen)
    assert skipped <= above


def test_a_predictable_channel_stops_after_bzip2(monkeypatch):
    # a sinusoid (20000 steps, a period of 97.3 samples: no exact repeat) plus white noise of 4 steps, against
    # what predicting the sinusoid leaves (the noise's Gaussian entropy, 2 % over): no zstd -19 and no xz runs,
    # and by the libraries no combination comes within xz's reach either
    rng = np.random.default_rng(2)
    t = np.arange(4 * 4096)
    q = np.rint(20000 * np.sin(2 * np.pi * t / 97.3) + rng.standard_normal(t.size) * 4.0).astype(np.int64)
    res = fallback.prev_residuals(q.reshape(4, 4096), q.reshape(4, 4096)[:, 0])
    noise_bits = 0.5 * np.log2(2 * np.pi * np.e * (16.0 + 1 / 12))       # Gaussian entropy, rounding included
    entropy_bytes = int(q.size * noise_bits / 8 * 1.02)
    promising = lambda size: size < entropy_bytes      # noqa: E731
    runs = _counting(monkeypatch)
    assert fallback._setting(res, promising) == (None, [])
    assert runs[0] == 0 and runs[1] == 0 and runs[2] == 6 * len(res)   # before: 6 zstd -19 runs a window
    assert _full_search(res, promising) is None
    assert min(_library_sizes(res).values()) * 4 // 5 >= entropy_bytes  # not even within xz's reach


def test_screen_bytes_are_zstd_at_that_level_with_the_header_byte():
    # the stand-in: order-1 differences, narrowest width, shuffled, zstd at level 9 by the library
    import zstandard
    rng = np.random.default_rng(9)
    x = np.cumsum(rng.integers(-300, 300, 5000))
    d = np.diff(x, prepend=0)
    raw = d.astype("<i2").tobytes()
    shuffled = np.frombuffer(raw, np.uint8).reshape(-1, 2).T.tobytes()
    assert classic.screen_bytes(x, 1, True, 9) == 1 + len(zstandard.ZstdCompressor(level=9).compress(shuffled))
    assert classic.screen_bytes(x, 1, False, 3) == 1 + len(zstandard.ZstdCompressor(level=3).compress(raw))
    assert classic.screen_bytes(np.zeros(0, np.int64), 0, False, 9) == 0


@pytest.mark.parametrize("make", SIGNALS)
@pytest.mark.parametrize("order", [-1, 0, 1])
def test_the_window_estimate_is_the_smaller_of_zstd_19_and_bzip2(make, order, monkeypatch):
    # what the window length's choice counts a window: 1 header byte + the smaller of the libraries' zstd -19
    # and bzip2 -9 bodies of the unshuffled values, zstd -19 left out only where bzip2 is smaller anyway
    import bz2
    import zstandard
    runs = _counting(monkeypatch)
    for w in make():
        v = np.cumsum(w) if order == -1 else (np.diff(w, prepend=0) if order == 1 else w)
        width = next(b for b in (1, 2, 4, 8) if -(2 ** (8 * b - 1)) <= v.min() and v.max() < 2 ** (8 * b - 1))
        raw = v.astype(f"<i{width}").tobytes()
        want = 1 + min(len(zstandard.ZstdCompressor(level=19).compress(raw)), len(bz2.compress(raw, 9)))
        assert fallback._fewer_fast(w, order) == want
    assert runs[2] == len(make()) and runs[0] <= len(make())
