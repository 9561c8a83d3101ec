"""An archive that keeps no index answers ``unusual`` and ``alike`` from one computed on opening (issue 13)."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

import tsarchive
from tsarchive.archive import open_archive
from tsarchive.cli import main
from tsarchive.index import build_channel, derived, look, member

from app_helpers import SPIKE_AT, WINDOW, NotedApp, open_strip, settle, write_stream

RATE = 100.0
N = 16000


def _wave(n: int, seed: int) -> np.ndarray:
    """A pulse-like recording whose beat slowly changes length and height, with a little noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(n)
    phase = 2 * np.pi * np.cumsum(1.0 / (60.0 + 15.0 * np.sin(2 * np.pi * t / 5000.0)))
    return (1.0 + 0.3 * np.sin(2 * np.pi * t / 3100.0)) * (np.sin(phase) + 0.4 * np.sin(2 * phase)) \
        + 0.02 * rng.normal(size=n)


def _pack(folder, name: str, x: np.ndarray, **kw):
    np.save(folder / f"{name}.npy", x.astype(np.float32))
    out = folder / f"{name}.tsarchive"
    tsarchive.pack(folder / f"{name}.npy", out, "1%", rate=RATE, code_size=0, **kw)
    return out


@pytest.fixture(scope="module")
def plain(tmp_path_factory):
    """A short recording packed with default settings (it keeps no index), with a few missing samples."""
    d = tmp_path_factory.mktemp("derived")
    x = _wave(N, 1)
    x[5000:5012] = np.nan
    return _pack(d, "plain", x)


@pytest.fixture
def counted(monkeypatch):
    calls = []

    def counting(*a, **kw):
        calls.append(a[1])
        return build_channel(*a, **kw)
    monkeypatch.setattr(derived, "build_channel", counting)
    return calls


@pytest.mark.parametrize("kind", ["spike", "flatline", "level_shift"])
def test_an_injected_fault_ranks_first_by_segment_on_an_archive_without_an_index(tmp_path, kind):
    x = _wave(15000, 4)
    sigma = float(np.std(x))
    # where the fault goes (the outside truth: these positions); a flatline or a shift fills a whole segment of
    # the default length here (15000 samples: 128, tsarchive/index/segments.py), as the injection bench puts them
    p, L = (7013, 1) if kind == "spike" else (7040, 128)
    if kind == "spike":
        x[p] += 6.0 * sigma
    elif kind == "flatline":
        x[p:p + L] = x[p]
    else:
        x[p:p + L] += 2.0 * sigma
    arc = open_archive(_pack(tmp_path, kind, x))
    assert not member.has_index(arc)                  # default packing kept none (its byte budget)
    r = look.unusual(arc, k=3)
    assert r.unit == "segment" and r.size < arc.window
    top = r.rows[0]
    assert top.start == top.number * r.size
    assert top.start < p + L and p < top.start + r.size    # the top segment holds injected samples


def test_look_alikes_recall_the_exact_nearest_segments(plain):
    arc = open_archive(plain)
    y = np.asarray(arc.read(arc.channels[0].name), dtype=np.float64)
    S = look.unusual(arc, k=1).size
    assert N % S == 0
    rows = np.nan_to_num(y, nan=0.0).reshape(-1, S)          # the builder fills missing samples with 0.0
    rows = rows - rows.mean(axis=1, keepdims=True)
    hits, queries = 0, range(0, len(rows), 5)
    for q in queries:
        # outside reference: numpy brute force, Euclidean distance with means removed; recall@k = |ours & exact| / k
        d = np.sqrt(((rows - rows[q]) ** 2).sum(axis=1))
        d[q] = np.inf
        exact = set(np.lexsort((np.arange(len(d)), d))[:5].tolist())
        got = look.alike(arc, q, k=5)
        assert got.unit == "segment" and got.based_on.startswith("the index computed on opening")
        hits += len(exact & {row.number for row in got.rows})
    assert hits / (5 * len(queries)) >= 0.9


def test_the_derived_index_is_the_packers_index_of_the_decoded_samples_built_once(plain, counted):
    arc = open_archive(plain)
    name = arc.channels[0].name
    look.unusual(arc)
    look.alike(arc, 3)
    look.unusual(arc, name, k=4)
    assert counted == [name]                          # one build for the archive object, however often asked
    got = derived.derive(arc, name)
    y = arc.read(name)
    want = build_channel(lambda a, b: y[a:b], name, len(y), None, 0, 4, try_nonlinear=False)
    assert got.segment == want.segment and got.ref == want.ref and got.level_step == want.level_step
    assert got.worst == want.worst and got.coder.kind == want.coder.kind == "linear"
    for a, b in [(got.level, want.level), (got.codes, want.codes), (got.facts, want.facts),
                 (got.coder.basis, want.coder.basis), (got.coder.shifts, want.coder.shifts)]:
        assert a.dtype == b.dtype and np.array_equal(a, b)
    assert got.coder.step == want.coder.step
    look.unusual(open_archive(plain))
    assert counted == [name, name]                    # a new archive object builds its own


def test_missing_samples_reach_the_builder_as_at_packing(plain):
    arc = open_archive(plain)
    ci = derived.derive(arc, arc.channels[0].name)
    filled = np.nan_to_num(np.asarray(arc.read(arc.channels[0].name), dtype=np.float64), nan=0.0)
    # outside reference: numpy; each segment's mean with the missing samples taken as 0.0, on the level grid
    want = np.rint(filled.reshape(-1, ci.segment).mean(axis=1) / ci.level_step).astype(np.int64)
    assert np.abs(ci.level - want).max() <= 1            # one grid step for summation order
    assert np.isfinite(ci.worst)


def test_above_the_cap_the_window_fallback_is_kept_and_says_so(plain, counted, monkeypatch):
    monkeypatch.setattr(derived, "MAX_SAMPLES", N - 1)
    arc = open_archive(plain)
    r = look.unusual(arc, k=5)
    assert r.unit == "window" and r.based_on == look.BASED_ON_FALLBACK["unusual"]
    assert [row.number for row in r.rows] == arc.outliers(arc.channels[0].name, k=5)
    a = look.alike(arc, 2, k=3)
    assert a.unit == "window" and a.based_on == look.BASED_ON_FALLBACK["alike"]
    assert counted == []


def test_glance_keeps_its_fallback_and_says_so(plain, counted):
    g = look.glance(open_archive(plain))
    assert g.worst is None and "never computes the index" in g.based_on and counted == []


def test_the_commands_answer_in_segments_with_the_derived_label(plain, capsys):
    assert main(["unusual", str(plain), "-k", "2", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["unit"] == "segment" and d["based_on"].startswith("the index computed on opening")
    assert d["rows"][0]["start_sample"] == d["rows"][0]["segment"] * d["samples_per_unit"]
    assert main(["alike", str(plain), "4", "-k", "2", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["unit"] == "segment" and "this archive keeps none" in d["based_on"] and len(d["rows"]) == 2


def test_deriving_imports_neither_torch_nor_textual(plain):
    code = ("import sys\nfrom tsarchive.archive import open_archive\nfrom tsarchive.index import look\n"
            f"a = open_archive({str(plain)!r})\n"
            "assert look.unusual(a).unit == 'segment' and look.alike(a, 1).unit == 'segment'\n"
            "print(','.join(sorted(m for m in sys.modules if m.split('.')[0] in ('torch', 'textual'))))\n")
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=600)
    assert run.returncode == 0, run.stderr[-2000:]
    assert run.stdout.strip() == ""


async def test_the_shortlist_names_the_derived_index_and_ranks_segments(tmp_path):
    folder = tmp_path / "shelf"
    folder.mkdir()
    write_stream(folder / "bench_log.csv")
    tsarchive.pack(folder / "bench_log.csv", folder / "bench_log.tsarchive", "0.5%", window=WINDOW, code_size=0)
    (folder / "bench_log.csv").unlink()
    assert not member.has_index(tsarchive.open(folder / "bench_log.tsarchive"))
    app = NotedApp(folder)
    async with app.run_test(size=(100, 40)) as pilot:
        strip = await open_strip(app, pilot, row=1)
        await pilot.press("u")
        await settle(app, pilot)
        about = str(app.screen.query_one("#shortlist-about").render())
        assert "the index computed on opening from the decoded samples" in about
        heads = [str(c.label) for c in app.screen.query_one("#shortlist-table").columns.values()]
        assert "Segment" in heads
        want = look.unusual(tsarchive.open(folder / "bench_log.tsarchive"), "accel", k=20)
        assert want.unit == "segment" and want.rows[0].start <= SPIKE_AT < want.rows[0].start + want.size
        await pilot.press("l")
        await settle(app, pilot)
        assert "segment #" in str(app.screen.query_one("#shortlist-title").render())
        assert "the index computed on opening" in str(app.screen.query_one("#shortlist-about").render())
        await pilot.press("u")
        await settle(app, pilot)
        await pilot.press("enter")
        await settle(app, pilot)
        assert app.screen is strip and strip.current == want.rows[0].start // WINDOW


def test_the_packed_bench_counts_precision_in_segments_and_in_windows():
    from tsarchive.bench.injection_packed import segment_precision, unit_precision
    # precision@k = share of the top k that are relevant (common practice (no source)); hand-counted cases:
    # 100 samples in segments of 10, faulty segments 2 and 7 (samples 20..29 and 70..79)
    truth = np.array([2, 7])
    assert segment_precision(10, 100, truth, 10, [20, 70, 0]) == 1.0
    assert segment_precision(10, 100, truth, 10, [20, 0, 70]) == 0.5
    assert segment_precision(10, 100, truth, 40, [40, 0]) == 0.0          # window 40..79 points at 4, 5 first
    assert segment_precision(10, 100, truth, 20, [60, 20]) == 0.5         # 6, 7 first
    spans = [(20, 30), (70, 80)]                                           # windows of 40: 0, 40 faulty; 80 not
    assert unit_precision(100, 40, spans, [40, 80, 0]) == 0.5
    assert unit_precision(100, 40, spans, [0, 40, 80]) == 1.0


def test_a_masked_integer_channel_is_indexed_as_its_samples_with_nan_where_missing(tmp_path):
    rng = np.random.default_rng(0)
    v = (1000 * np.sin(np.arange(6000) / 9.0)).astype(int) + rng.integers(-5, 5, 6000)
    cells = [f"{i / 10},{'' if 3000 <= i < 3020 else v[i]}" for i in range(6000)]      # 20 empty cells
    (tmp_path / "c.csv").write_text("time,count\n" + "\n".join(cells) + "\n")
    tsarchive.pack(tmp_path / "c.csv", tmp_path / "c.tsarchive", "lossless", code_size=0)
    arc = open_archive(tmp_path / "c.tsarchive")
    y = arc.read("count")
    assert isinstance(y, np.ma.MaskedArray) and np.ma.count_masked(y) == 20 and not member.has_index(arc)
    z = np.where(y.mask, np.nan, y.data.astype(np.float64))                    # numpy: NaN where missing
    want = build_channel(lambda a, b: z[a:b], "count", len(z), None, 0, 8, try_nonlinear=False)
    got = derived.derive(arc, "count")
    for a, b in [(got.level, want.level), (got.codes, want.codes), (got.facts, want.facts)]:
        assert np.array_equal(a, b)
    r = look.unusual(arc, "count", k=1)
    assert r.rows[0].start < 3020 and 3000 < r.rows[0].start + r.size        # the gap's segment ranks first


def test_a_stored_index_of_facts_only_gives_way_to_a_derived_one(tmp_path, monkeypatch):
    # a stored facts-only index (no codes fitted the byte budget) at a coarse segment: the spike is found in a
    # segment of the default length from a derived index instead, and the label says why (the outside truth:
    # the injected position)
    x = _wave(15000, 4)
    p = 7013
    x[p] += 6.0 * float(np.std(x))
    arc = open_archive(_pack(tmp_path, "facts", x))
    decoded = np.ma.filled(np.ma.asarray(arc.read(arc.channels[0].name), np.float64), np.nan)
    facts = build_channel(lambda a, b: decoded[a:b], arc.channels[0].name, len(decoded), 2048,
                          try_nonlinear=False, max_codes=0)
    assert facts.coder.kind == "facts" and facts.segment == 2048
    monkeypatch.setattr(member, "has_index", lambda a: True)
    monkeypatch.setattr(member, "read", lambda a, name, facts=True, ci=facts: ci)
    r = look.unusual(arc, k=3)
    assert r.size < 2048 and r.based_on.startswith(look.DERIVED_OVER_FACTS)
    top = r.rows[0]
    assert top.start <= p < top.start + r.size
    assert look.alike(arc, top.number, k=3).size == r.size
