"""End to end through the library API: pack -> archive -> read / verify."""

from crafting import write_manifest
from tsarchive.store.binding import read_manifest
import os
import subprocess
import sys

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import tsarchive
from tsarchive import modelrun, pipeline, windowchoice
from tsarchive.options import DEFAULT_CODE_SIZE
from tsarchive.errors import ArchiveExists, BadInput, BoundViolation, BudgetError, SourceNotFound
from tsarchive.quantize import values_to_bits

from conftest import make_signal


def _pack(tmp_path, x, budget="0.5%", name="a", **kw):
    src = tmp_path / f"{name}.npy"
    np.save(src, x)
    kw.setdefault("rate", 100.0)
    kw.setdefault("window", 32)
    kw.setdefault("code_size", 0)
    out = tmp_path / f"{name}.tsa"
    res = tsarchive.pack(src, out, budget, train_seconds=3, **kw)
    return src, out, res


def _assert_within(x, arc, channels=None):
    for j, meta in enumerate(arc.channels):
        xh = arc.read(meta.name)
        col = x if x.ndim == 1 else x[:, j]
        assert xh.dtype == col.dtype and xh.shape == col.shape
        fin = np.isfinite(col.astype(np.float64))
        err = np.abs(xh.astype(np.float64)[fin] - col.astype(np.float64)[fin])
        assert (err <= meta.eps).all() if meta.eps > 0 else (err == 0).all()
        assert np.array_equal(values_to_bits(xh[~fin]), values_to_bits(col[~fin]))


def test_round_trip_with_autoencoder(small_archive, small_npy):
    arc = tsarchive.open(small_archive)
    x = np.load(small_npy)
    _assert_within(x, arc)
    assert arc.manifest["model"] is not None or arc.manifest["code_size"] == 0
    rep = arc.verify(against=small_npy)
    assert rep.ok and rep.compared and rep.checksums_ok


def test_nan_inf_constant_and_short_tail(tmp_path):
    x = make_signal(1000).astype(np.float64)
    x[5, 0], x[17, 0], x[999, 1] = np.nan, np.inf, -np.inf
    x = np.concatenate([x, np.full((1000, 1), 7.25)], axis=1)  # a constant channel
    src, out, res = _pack(tmp_path, x[:997], budget="0.1%")  # 997 = 31 windows of 32 + a short one
    arc = tsarchive.open(out)
    _assert_within(x[:997], arc)
    assert arc.channels[2].worst_error == 0.0
    assert tsarchive.verify(out, against=src).ok


def test_verbatim_samples_live_in_their_own_member(tmp_path):
    import shutil
    from tsarchive.errors import ArchiveCorrupt
    x = make_signal(1000).astype(np.float64)
    x[5, 0], x[17, 0], x[999, 1] = np.nan, np.inf, -np.inf
    src, out, _ = _pack(tmp_path, x)
    held = pq.read_table(out / "exceptions.parquet").to_pylist()
    # format 5: key = channel << 32 | window (store/lean.py)
    assert [(r["key"] >> 32, r["key"] & 0xFFFFFFFF, r["pos"]) for r in held] == [(0, 0, [5, 17]), (1, 31, [7])]
    assert "code" not in pq.read_schema(out / "windows.parquet").names        # no model, no code column
    clean = _pack(tmp_path, np.nan_to_num(x, posinf=0, neginf=0), name="clean", segment=16)[1]  # segment given: a recording this short gets no index within its byte budget
    assert sorted(p.name for p in clean.iterdir()) == ["index.zst", "windows.parquet"]   # format 6: the manifest inside
    # the manifest lists the member: an archive that lost it is refused, not read without its NaNs
    broken = tmp_path / "broken.tsa"
    shutil.copytree(out, broken)
    (broken / "exceptions.parquet").unlink()
    with pytest.raises(ArchiveCorrupt, match="exceptions.parquet is missing"):
        tsarchive.open(broken)


def test_very_short_recording(tmp_path):
    for n in (1, 2, 5):
        x = np.linspace(0, 1, n).astype(np.float32)
        src, out, res = _pack(tmp_path, x, name=f"s{n}", code_size=8)
        arc = tsarchive.open(out)
        assert arc.manifest["model"] is None  # a model would swamp a tiny archive
        _assert_within(x, arc)


def test_budget_forms_and_lossless_decimal_csv(tmp_path):
    src = tmp_path / "soak.csv"
    rng = np.random.default_rng(2)
    temp = np.round(20 + np.cumsum(rng.standard_normal(3000)) * 0.05, 2)
    hum = np.round(45 + np.cumsum(rng.standard_normal(3000)) * 0.1, 1)
    lines = ["time [s],temp [degC],hum [%RH]"] + [f"{i},{t:.2f},{h:.1f}" for i, (t, h) in enumerate(zip(temp, hum))]
    src.write_text("\n".join(lines) + "\n")
    out = tmp_path / "soak.tsa"
    res = tsarchive.pack(src, out, "lossless,hum=0.5", window=64, code_size=0)
    arc = tsarchive.open(out)
    assert [c.unit for c in arc.channels] == ["degC", "%RH"]
    assert arc.channel("temp").eps == 0 and arc.channel("temp").decimals == 2
    np.testing.assert_array_equal(arc.read("temp"), temp)  # bit-exact at the logged resolution
    assert np.abs(arc.read("hum") - hum).max() <= 0.5
    assert res.channels[0].worst_error == 0.0


def test_lossless_needs_a_grid(tmp_path):
    x = np.random.default_rng(0).standard_normal(500)
    with pytest.raises(BudgetError, match="lossless"):
        _pack(tmp_path, x, budget="lossless")
    assert not (tmp_path / "a.tsa").exists()


def test_refuses_overwrite_and_force_replaces(tmp_path):
    x = make_signal(500)
    src, out, _ = _pack(tmp_path, x)
    with pytest.raises(ArchiveExists):
        tsarchive.pack(src, out, rate=100.0, code_size=0)
    tsarchive.pack(src, out, "1%", rate=100.0, code_size=0, window=32, force=True)
    assert tsarchive.open(out).channels[0].budget == "1%"
    (tmp_path / "plain").mkdir()
    with pytest.raises(ArchiveExists):  # never replace a folder that is not an archive
        tsarchive.pack(src, tmp_path / "plain", rate=100.0, force=True)
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_self_check_refuses_to_finish(tmp_path, monkeypatch):
    # Corrupt the decoder's view of the grid: pack must notice through the reader and write nothing.
    import tsarchive.archive as reader
    real = reader._channel_meta

    def skewed(d, window):
        m = real(d, window)
        g = m.grid.__class__(**{**m.grid.to_dict(), "offset": m.grid.offset + 3 * m.grid.eps + 1.0})
        return m.__class__(**{**m.__dict__, "grid": g})

    monkeypatch.setattr(reader, "_channel_meta", skewed)
    with pytest.raises(BoundViolation):
        _pack(tmp_path, make_signal(400))
    assert not (tmp_path / "a.tsa").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_bad_inputs(tmp_path):
    with pytest.raises(SourceNotFound):
        tsarchive.pack(tmp_path / "missing.npy", tmp_path / "x.tsa", rate=1.0)
    np.save(tmp_path / "x.npy", np.zeros(10))
    with pytest.raises(BadInput, match="rate"):
        tsarchive.pack(tmp_path / "x.npy", tmp_path / "x.tsa")
    with pytest.raises(BadInput, match="window"):
        tsarchive.pack(tmp_path / "x.npy", tmp_path / "x.tsa", rate=1.0, window=3)
    assert not (tmp_path / "x.tsa").exists()


def test_time_range_read_and_random_access(small_archive, small_npy):
    arc = tsarchive.open(small_archive)
    x = np.load(small_npy)
    part = arc.read("ch0", start=10.0, end=12.5)
    full = arc.read("ch0")
    np.testing.assert_array_equal(part, full[2000:2500])
    assert np.abs(part.astype(float) - x[2000:2500, 0]).max() <= arc.channels[0].eps


def test_plain_pyarrow_can_read_the_codes(small_archive):
    # Any Parquet reader: pyarrow alone, no tsarchive code.
    t = pq.read_table(small_archive / "windows.parquet")
    assert t.column_names == ["facts", "code", "residual"]               # format 6 (lean6.py)
    codes = np.stack(t.column("code").to_pylist())
    assert codes.dtype.kind == "i" and codes.shape[0] == t.num_rows
    raw = np.frombuffer(t["facts"].combine_chunks().buffers()[1], np.uint8)[:20 * t.num_rows].reshape(-1, 20)
    worst = raw[:, 16]                                     # facts: crc32 u32, level i64, score f32, worst u8, ...
    assert t["facts"].type == pa.binary(20) and 0 < worst.max() <= 250    # 1/250ths of eps
    m = pq.read_table(small_archive / "model.parquet").to_pydict()
    assert set(m) == {"name", "shape", "values"}
    manifest = read_manifest(small_archive)
    assert manifest["layout"].startswith("facts=crc32:u32,level:i64,score:f32,worst:u8")   # DEVELOPERS.md
    assert manifest["format"] == "tsarchive" and manifest["channel_defaults"]["unit"] == ""   # shared: stored once
    assert pq.ParquetFile(small_archive / "windows.parquet").metadata.row_group(0).column(0).compression == "ZSTD"


def test_reading_imports_neither_torch_nor_textual(small_archive):
    code = ("import sys, tsarchive; a = tsarchive.open(sys.argv[1]); a.read('ch0'); a.verify(); "
            "a.windows('ch0'); a.preview('ch0'); a.similar('ch0', 0); "
            "print('torch' in sys.modules, 'textual' in sys.modules, 'pickle' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code, str(small_archive)], capture_output=True, text=True, check=True)
    assert out.stdout.split()[:2] == ["False", "False"]


@pytest.mark.parametrize("threads", ["1", "2"])
def test_decoding_is_identical_across_thread_counts(small_archive, threads, tmp_path):
    code = ("import sys, hashlib, tsarchive; a = tsarchive.open(sys.argv[1]); r = a.read_many(); "
            "print(hashlib.sha256(b''.join(r[c.name].tobytes() for c in a.channels)).hexdigest())")
    env = dict(os.environ, OMP_NUM_THREADS=threads, OPENBLAS_NUM_THREADS=threads, MKL_NUM_THREADS=threads,
               TSARCHIVE_THREADS=threads)
    out = subprocess.run([sys.executable, "-c", code, str(small_archive)], capture_output=True, text=True,
                         env=env, check=True).stdout.strip()
    ref = tsarchive.open(small_archive)
    import hashlib
    assert out == hashlib.sha256(b"".join(ref.read(c.name).tobytes() for c in ref.channels)).hexdigest()


@pytest.mark.parametrize("workers", [1, 2, 3])
def test_reading_channels_on_threads_gives_the_same_samples(small_archive, workers):
    arc = tsarchive.open(small_archive)
    ref = {c.name: tsarchive.open(small_archive).read(c.name, 0.5, 9.0) for c in arc.channels}
    got = arc.read_many(start=0.5, end=9.0, workers=workers)
    assert list(got) == list(ref) and len(ref) > 1
    for name in ref:
        assert got[name].dtype == ref[name].dtype and np.array_equal(got[name], ref[name], equal_nan=True)


def test_long_reads_in_steps_give_the_same_samples(small_archive, monkeypatch):
    from tsarchive import archive as reader
    arc = tsarchive.open(small_archive)
    meta = arc.channels[0]
    spans = [(None, None), (0.013, None), (None, meta.duration * 0.7), (0.5, 9.0), (3.0, 3.01)]
    whole = [arc.read(meta.name, a, b) for a, b in spans]
    monkeypatch.setattr(reader, "READ_SAMPLES", 3 * meta.window + 5)   # a step of 3 windows
    for (a, b), ref in zip(spans, whole):
        got = tsarchive.open(small_archive).read(meta.name, a, b)
        assert got.dtype == ref.dtype and np.array_equal(got, ref, equal_nan=True), (a, b)


def test_thread_setting(monkeypatch):
    from tsarchive.workers import workers
    monkeypatch.setenv("TSARCHIVE_THREADS", "1")
    assert workers(8) == 1
    monkeypatch.setenv("TSARCHIVE_THREADS", "3")
    assert workers(8) == 3 and workers(2) == 2
    monkeypatch.setenv("TSARCHIVE_THREADS", "many")            # ignored, not fatal
    assert workers(8) == min(8, os.cpu_count() or 1)


def test_torch_and_numpy_inference_paths_agree(small_archive):
    arc = tsarchive.open(small_archive)
    if arc.decoder is None:
        pytest.skip("archive has no model")
    from tsarchive.model.torch_infer import predict_torch
    codes = arc.windows("ch0").codes
    np.testing.assert_array_equal(arc.decoder.predict(codes), predict_torch(arc.decoder, codes))


def test_outliers_and_similar(small_archive):
    arc = tsarchive.open(small_archive)
    w = arc.windows("ch0")
    top = arc.outliers("ch0", k=3)
    assert w.score[top[0]] == w.score.max()
    sim = arc.similar("ch0", 5, k=4)
    assert len(sim) == 4 and 5 not in [i for i, _ in sim]
    assert all(a[1] <= b[1] for a, b in zip(sim, sim[1:]))


def test_model_left_out_when_it_does_not_pay(tmp_path):
    # White noise has no shape to learn: the autoencoder cannot save what its weights cost.
    x = np.random.default_rng(4).standard_normal(40000).astype(np.float32)
    src, out, res = _pack(tmp_path, x, budget="1%", window=256, code_size=None)
    arc = tsarchive.open(out)
    assert arc.manifest["model"] is None and "left out" in arc.manifest["model_note"]
    assert arc.windows("ch0").codes.shape[1] == 0
    sim = arc.similar("ch0", 3, k=2)  # falls back to decoded window shapes
    assert len(sim) == 2 and all(np.isfinite(d) for _, d in sim)
    _assert_within(x, arc)


def test_a_scout_decides_before_the_probe_and_a_long_training(tmp_path, monkeypatch):
    # With a long training budget and no explicit code size, only a short scout trains on white noise: no
    # model can predict it, so the probe does not run either (it did before the scout: 3 times the work).
    import tsarchive.model.train as train
    works = []
    real = train.train_autoencoder
    monkeypatch.setattr(train, "train_autoencoder", lambda *a, **kw: works.append(kw["work"]) or real(*a, **kw))
    x = np.random.default_rng(5).standard_normal(40000).astype(np.float32)
    src = tmp_path / "x.npy"
    np.save(src, x[:, None])
    events = []
    tsarchive.pack(src, tmp_path / "x.tsa", "1%", rate=100.0, window=256, train_seconds=600,
                   progress=events.append)
    arc = tsarchive.open(tmp_path / "x.tsa")
    assert arc.manifest["model"] is None
    assert f"after a {modelrun.SCOUT_SECONDS:g} s probe" in arc.manifest["model_note"]
    assert works == [modelrun.SCOUT_SECONDS * modelrun.TRAIN_WORK_PER_SECOND]
    assert not any("training it fully" in e.message or "training the probe" in e.message for e in events)


@pytest.mark.parametrize("probe", [False, True])
def test_a_model_that_pays_replaces_the_speculative_archive(tmp_path, monkeypatch, probe):
    # Without an explicit code size the channels are encoded without a model while it trains; when the
    # model turns out to pay (forced here through the account), that staging is dropped and the channels
    # are encoded again with it (after the full training when the first run was a probe).
    real = modelrun._model_account
    monkeypatch.setattr(modelrun, "_model_account",
                        lambda model, plans, nwin, K: (1e12, real(model, plans, nwin, K)[1]) if model else (0.0, 0.0))
    monkeypatch.setattr(modelrun, "PROBE_SECONDS", 1.0)
    x = np.sin(np.arange(60000) / 7.0).astype(np.float32)[:, None]
    src = tmp_path / "s.npy"
    np.save(src, x)
    events = []
    tsarchive.pack(src, tmp_path / "s.tsa", "1%", rate=100.0, window=256, train_seconds=3.0 if probe else 1.0,
                   progress=events.append)
    arc = tsarchive.open(tmp_path / "s.tsa")
    assert arc.manifest["model"] is not None and "kept" in arc.manifest["model_note"]
    assert arc.windows("ch0").codes.shape[1] == DEFAULT_CODE_SIZE
    assert any("training it fully" in e.message for e in events) == probe
    finals = [e for e in events if e.stage == "encode" and e.total > 1 and e.done == e.total]
    assert len(finals) == 2                               # encoded twice: speculatively, then with the model
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.npy", "s.tsa"]   # no staging left behind
    _assert_within(x, arc)


def test_a_failing_plan_stops_the_training_thread(tmp_path, monkeypatch):
    seen = []
    real_train = modelrun._train

    def spy(rec, xs, W, K, emit, *a, **kw):
        seen.append(emit)
        return real_train(rec, xs, W, K, emit, *a, **kw)

    def broken(*a, **kw):
        raise BadInput("planning failed on purpose")

    monkeypatch.setattr(modelrun, "_train", spy)
    monkeypatch.setattr(modelrun, "plan_channel", broken)
    x = np.random.default_rng(6).standard_normal(30000).astype(np.float32)
    src = tmp_path / "n.npy"
    np.save(src, x)
    with pytest.raises(BadInput, match="on purpose"):
        tsarchive.pack(src, tmp_path / "n.tsa", "1%", rate=100.0, window=256, code_size=4, train_seconds=600)
    assert seen and seen[0].is_set()                      # the trainer's cancel flag was raised
    assert sorted(p.name for p in tmp_path.iterdir()) == ["n.npy"]


def _steps(n=200_000, seed=8):
    rng = np.random.default_rng(seed)
    levels = np.repeat(rng.integers(0, 20, n // 2000 + 1), 2000)[:n].astype(np.float64)
    return (levels + 0.001 * rng.standard_normal(n)).astype(np.float32)


def test_window_length_is_chosen_where_longer_windows_pay(tmp_path):
    # Piecewise-constant levels at a coarse budget: the residuals cost almost nothing, so each window
    # row's framing dominates and a longer window must be chosen, and make the smaller archive.
    x = _steps()
    events = []
    _, out, res = _pack(tmp_path, x, budget="1%", window=None, progress=events.append)
    arc = tsarchive.open(out)
    assert arc.window in windowchoice.WINDOW_CHOICES and arc.window > pipeline.DEFAULT_WINDOW
    assert any(e.message.startswith(f"window {arc.window} (estimated") for e in events)
    _, _, fixed = _pack(tmp_path, x, budget="1%", window=pipeline.DEFAULT_WINDOW, name="fixed")
    assert res.archive_bytes < fixed.archive_bytes
    _assert_within(x, arc)


def test_window_length_stays_short_on_noise_and_when_given(tmp_path):
    x = np.random.default_rng(9).standard_normal(200_000).astype(np.float32)
    _, out, _ = _pack(tmp_path, x, budget="0.1%", window=None)
    assert tsarchive.open(out).window == pipeline.DEFAULT_WINDOW     # the saving is inside the margin
    _, out, _ = _pack(tmp_path, _steps(), budget="1%", window=512, name="given")
    assert tsarchive.open(out).window == 512                         # an explicit window is kept
    _, out, _ = _pack(tmp_path, _steps(), budget="1%", window=None, code_size=4, name="coded")
    assert tsarchive.open(out).window == pipeline.DEFAULT_WINDOW     # codes asked for: finer segments
    events = []
    _, out, _ = _pack(tmp_path, x[:20_000], window=None, name="short", progress=events.append)
    assert tsarchive.open(out).window == pipeline.DEFAULT_WINDOW
    assert any("too short a recording" in e.message for e in events)


def test_no_training_when_even_a_perfect_model_could_not_pay(tmp_path):
    # Piecewise-constant levels at 1 %: all the residuals together cost less than a quarter of what the
    # model's weights and codes would, so the trainer is stopped before it runs an epoch.
    x = _steps()
    src = tmp_path / "s.npy"
    np.save(src, x)
    events = []
    tsarchive.pack(src, tmp_path / "s.tsa", "1%", rate=100.0, train_seconds=600, progress=events.append)
    arc = tsarchive.open(tmp_path / "s.tsa")
    assert arc.manifest["model"] is None
    assert arc.manifest["model_note"].startswith("autoencoder not trained: at most")
    assert not any(e.stage == "train" and e.message.startswith("epoch") for e in events)
    last_train = [e for e in events if e.stage == "train"][-1]       # progress ends on why, as the manifest
    assert last_train.message == arc.manifest["model_note"]
    assert modelrun._payload_ceiling([modelrun.ChannelPlan((), None, None, 0.0, 8.0e3)], 100, 10) == 1.0e4
    _assert_within(x, arc)


def test_logged_resolution_multiplier_is_found_and_kept_exact(tmp_path):
    # An ADC with 0.005 mV steps logged with three decimals: every value is 5 units of 0.001, so the lossless
    # grid counts in steps of 0.005 (q = x * 1000 / 5) and still gives back the very doubles.
    rng = np.random.default_rng(8)
    k = np.cumsum(rng.integers(-20, 21, 20000))
    x = np.round(k * 5) / 1000.0            # the doubles a decimal parser returns for k*0.005
    src, out, res = _pack(tmp_path, x, budget="lossless", window=256, code_size=0)
    arc = tsarchive.open(out)
    g = arc.channels[0].grid
    assert (g.kind, g.decimals, g.mult) == ("decimal", 3, 5)
    np.testing.assert_array_equal(values_to_bits(arc.read("ch0")), values_to_bits(x))


def test_damaged_entropy_table_in_the_manifest_is_named(tmp_path):
    from tsarchive.errors import ArchiveCorrupt
    x = np.random.default_rng(9).standard_normal(5000).astype(np.float32)
    src, out, res = _pack(tmp_path, x, budget="1%", window=256)
    m = read_manifest(out)
    assert not (out / "tables.parquet").exists() and m["channels"][0]["tables"]
    m["channels"][0]["tables"][0]["freqs"] = "not base64!"
    write_manifest(out, m)
    with pytest.raises(ArchiveCorrupt, match="entropy table entry is malformed"):
        tsarchive.open(out).read("ch0")


def test_sampled_windows_are_gathered_exactly():
    # Sparse samples are read window by window, runs of neighbours together: the result must equal plain indexing.
    from tsarchive.modelrun import _gather
    from tsarchive.recording import ChannelInfo, Recording
    x = np.arange(100 * 8 * 2, dtype=np.float32).reshape(-1, 2)
    rec = Recording(data=x, rate=1.0, channels=(ChannelInfo("a", "", "float32", None), ChannelInfo("b", "", "float32", None)),
                    start=None, source=None, shape=x.shape)
    idx = np.array([0, 1, 2, 5, 9, 10, 99])
    got = _gather(rec, idx, 8)       # one (windows, W) array per channel
    for j in range(2):
        np.testing.assert_array_equal(got[j], x.reshape(100, 8, 2)[idx][:, :, j])


@pytest.mark.parametrize("dtype", ["float32", "float64", "int16"])
def test_finite_ranges_match_a_masked_numpy_reference(monkeypatch, dtype):
    # chunks without NaN/Inf take a mask-free path; the result must not depend on which path ran
    from tsarchive import ranges
    from tsarchive.recording import ChannelInfo, Recording
    monkeypatch.setattr(ranges, "CHUNK_SAMPLES", 64)
    rng = np.random.default_rng(11)
    x = np.round(rng.normal(0, 50, size=(400, 4)), 2).astype(dtype)
    if dtype != "int16":
        x[:70, 1] = np.nan                 # the first finite value of channel 1 is in the second chunk
        x[130, 2] = np.inf
        x[300, 2] = -np.inf
        x[:, 3] = np.nan                    # no finite value at all
    chans = tuple(ChannelInfo(f"c{j}", "", dtype, 2 if j == 0 and dtype != "int16" else None) for j in range(4))
    rec = Recording(data=x, rate=1.0, channels=chans)
    got = ranges.finite_ranges(rec)
    x64 = x.astype(np.float64)
    fin = np.isfinite(x64)
    for j in range(4):
        col = x64[fin[:, j], j]
        want = (col.max() - col.min(), col[0]) if len(col) else (0.0, 0.0)   # no finite value: zeros
        assert (got[j].span, got[j].anchor) == want
    assert [r.mult for r in got] == [1, 1, 1, 1]     # two-decimal normal noise has no common step but 0.01


def test_quick_gain_estimate_counts_with_and_without_the_model_on_the_same_windows():
    # the probe's saving is judged on every k-th sampled window: the bits without the model must be
    # counted on those same windows, not taken from the plan over all of them
    from tsarchive.budget import parse_budget_spec
    from tsarchive.encoder import _tables, plan_channel
    from tsarchive.windowcodec import predict_windows as predict_batch
    from tsarchive.model.train import train_autoencoder
    from tsarchive.recording import ChannelInfo, Recording
    W, nw = 64, 200
    t = np.arange(W * nw)
    x = (np.sin(t / 3.0) + 0.3 * np.sin(t / 17.0) + 0.01 * np.random.default_rng(2).standard_normal(t.size))
    rec = Recording(data=x.astype(np.float32)[:, None], rate=100.0, channels=(ChannelInfo("a", "", "float32"),))
    grids = pipeline._grids(rec, parse_budget_spec("0.5%"))[0]
    sampled = modelrun._gather(rec, np.arange(nw), W)
    scales, xs = modelrun._training_set(sampled, grids, W, 1)
    model = train_autoencoder(np.concatenate(xs), 4, max_epochs=5, seed=0)
    full = plan_channel(sampled[0], None, nw, grids[0], W, None, scales[0])
    part = sampled[0][::4]
    quick = plan_channel(part, None, nw, grids[0], W, model, scales[0], full, subset=True)
    q, _, _, lv, _, _ = predict_batch(part, grids[0], W, None, scales[0])
    alone_bits = _tables([(q, lv, None)], full.lpc, use_ae=False)[1]   # those windows alone, same LPC sets
    assert quick.plain_bits == alone_bits                             # same windows, same LPC sets
    assert quick.ae_gain_bits >= 0                                    # the model only adds candidates
    mixed = plan_channel(part, None, nw, grids[0], W, model, scales[0], full)   # the mistake this guards
    assert mixed.ae_gain_bits - quick.ae_gain_bits == pytest.approx(
        (full.plain_bits - alone_bits) * nw / len(part))


def test_unpack_writes_what_read_gives(small_archive, tmp_path):
    # numpy's own .npy reader is the reference for the file unpack writes
    out = tsarchive.unpack(small_archive, tmp_path / "back.npy")
    arc = tsarchive.open(small_archive)
    got = np.load(out)
    want = np.stack([arc.read(c.name) for c in arc.channels], axis=1)
    assert got.dtype == want.dtype and np.array_equal(got.reshape(want.shape), want, equal_nan=True)


def test_spread_picks_evenly_with_one_rounding():
    from tsarchive.windows import spread
    # by hand: 0..9 in 4 steps of 3; 0..10 in 4 steps of 10/3 = 3.33 -> 0, 3, 7, 10 (nearest); all of a short range
    assert spread(10, 4).tolist() == [0, 3, 6, 9]
    assert spread(11, 4).tolist() == [0, 3, 7, 10]
    assert spread(3, 8).tolist() == [0, 1, 2] and spread(0, 5).tolist() == [] and spread(5, 0).tolist() == []


def test_members_are_handed_out_by_name(small_archive):
    # pyarrow's own reader of the file is the reference; an unlisted name is no member
    arc = tsarchive.open(small_archive)
    got = arc.member_table("windows.parquet", columns=["facts"])
    assert got.equals(pq.read_table(small_archive / "windows.parquet", columns=["facts"]))
    assert arc.member_table("absent.parquet") is None and arc.member_table("../windows.parquet") is None
