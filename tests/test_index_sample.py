"""The index learns its coder from a sample bounded in samples, not only in segments (tsarchive/index/build.py).

The byte budget's coarser rungs rebuild the index with segments up to 64 times longer; with a bound on the
number of segments alone, a long channel's learning sample was the whole channel in float64 (packing a
2000 MB recording peaked at 2705 MiB resident, `python -m tsarchive.bench --no-cases --memory 2000`).
The bound checked here is the module's own constant; the sample's size is read from what the learner gets."""

from __future__ import annotations

import numpy as np

from tsarchive.index import build, learn


def test_the_learning_sample_is_bounded_in_samples_whatever_the_segment(monkeypatch):
    x = np.sin(np.arange(1 << 16) / 50.0) + np.random.default_rng(1).normal(0, 0.01, 1 << 16)
    seen = []
    choose = learn.choose

    def spy(X, *a, **k):
        seen.append(X.shape)
        return choose(X, *a, **k)

    monkeypatch.setattr(learn, "choose", spy)
    monkeypatch.setattr(build, "LEARN_SAMPLES", 8192)
    ci = build.build_channel(lambda a, b: x[a:b], "ch", x.size, segment=1024)   # 64 segments of 1024
    assert ci.segment == 1024 and len(ci.level) == 64
    (rows, width), = seen
    assert width == 1024 and rows * width <= 8192 and rows == 8     # failed before: all 64 segments
