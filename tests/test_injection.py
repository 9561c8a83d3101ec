"""The injection bench, small: the metric against a hand-computed case, the faults, one set and one seed."""

from __future__ import annotations

import numpy as np
import pytest

from tsarchive.bench import injection as I
from tsarchive.bench import realdata


def test_precision_at_k_by_hand():
    score = np.array([0.1, 0.9, 0.3, 0.8, 0.2, 0.7])
    # k = 3 injected {1, 2, 5}; the 3 highest are 1 (0.9), 3 (0.8), 5 (0.7): 2 of 3 are injected
    assert I.precision_at_k(score, np.array([1, 2, 5])) == pytest.approx(2 / 3)
    assert I.precision_at_k(np.zeros(4), np.array([0, 1])) == 1.0   # ties go by position
    assert I.precision_at_k(np.zeros(4), np.array([2, 3])) == 0.0


def test_faults_change_only_their_segment():
    rng = np.random.default_rng(0)
    x = np.sin(np.arange(64 * 10) / 5.0) + 1.0
    for kind in I.KINDS:
        for sev in I.SEVERITIES:
            y = x.copy()
            I.inject(y, 4, 64, kind, sev, float(np.std(x)), rng)
            changed = np.flatnonzero(y != x)
            assert len(changed) and changed.min() >= 4 * 64 and changed.max() < 5 * 64, (kind, sev)
    picks = I.pick_segments(50, 6, np.random.default_rng(1))
    assert len(picks) == 6 and np.all(np.diff(picks) > 1) and picks.min() > 0 and picks.max() < 49


def test_baselines_by_definition():
    rows = np.array([[0.0, 1, 0, 1], [0.0, 0, 0, 0], [0.0, 2, 0, 2]])
    # first-difference RMS 1, 0, 2 -> median 1 -> |r - 1| = 0, 1, 1
    assert np.allclose(I.baseline_diff_rms(rows), [0.0, 1.0, 1.0])


def test_small_bench_runs_on_one_set():
    got = realdata.load("ppg_heartpy")
    if isinstance(got, str):
        pytest.skip(got)
    res = I.run(["ppg_heartpy"], seeds=1, kinds=("spike", "flatline"), severities=("strong",))
    assert res.sets == ["ppg_heartpy"]
    for kind in ("spike", "flatline"):
        for m in I.METHODS:
            v = res.precision[(kind, "strong", m)]
            assert len(v) == 1 and 0.0 <= v[0] <= 1.0
    assert 0.0 <= res.recall["ppg_heartpy"] <= 1.0
    assert any(line.startswith("spike        strong") for line in I.table(res).splitlines())


def test_reported_seeds_never_include_the_tuning_seeds():
    # common practice (no source): figures are reported on data the design was not chosen on
    for n in (1, 3, 10, 200):
        assert not set(I.reported_seeds(n)) & set(I.TUNING_SEEDS) and len(I.reported_seeds(n)) == n


def test_tuning_runs_on_the_tuning_seeds_only():
    got = realdata.load("ppg_heartpy")
    if isinstance(got, str):
        pytest.skip(got)
    res = I.run(["ppg_heartpy"], kinds=("clipping",), severities=("strong",), tuning=True)
    assert len(res.precision[("clipping", "strong", "index")]) == len(I.TUNING_SEEDS)
