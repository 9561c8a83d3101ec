"""The look commands in process (``main(argv)``): unusual, alike, glance, with and without an index."""

from __future__ import annotations

import json

import numpy as np
import pytest

import tsarchive
from tsarchive.cli import main
from tsarchive.index import derived, look
from tsarchive.archive import open_archive

RATE = 50.0


@pytest.fixture(scope="module")
def archives(tmp_path_factory):
    d = tmp_path_factory.mktemp("look")
    rng = np.random.default_rng(2)
    t = np.arange(20000)
    x = np.sin(2 * np.pi * t / 64.0) + 0.05 * rng.normal(size=len(t))
    x[150 * 64 + 9] += 5.0                                     # a spike in segment 75 (segments of 128)
    src = d / "probe.npy"
    np.save(src, x.astype(np.float32))
    with_index = d / "probe.tsarchive"
    tsarchive.pack(src, with_index, "0.5%", rate=RATE, code_size=0, segment=128)
    without = d / "plain.tsarchive"
    tsarchive.pack(src, without, "0.5%", rate=RATE, code_size=0, segment=0)
    return with_index, without


def _json(capsys, argv):
    assert main(argv) == 0
    return json.loads(capsys.readouterr().out)


def test_unusual_json_lists_the_spike_first(archives, capsys):
    d = _json(capsys, ["unusual", str(archives[0]), "-k", "3", "--json"])
    assert d["unit"] == "segment" and d["samples_per_unit"] == 128 and "learned index" in d["based_on"]
    assert d["rows"][0]["segment"] == (150 * 64 + 9) // 128 and len(d["rows"]) == 3
    assert d["rows"][0]["start_sample"] == d["rows"][0]["segment"] * 128


def test_alike_json_matches_the_library(archives, capsys):
    d = _json(capsys, ["alike", str(archives[0]), "10", "-k", "4", "--json"])
    want = look.alike(open_archive(archives[0]), 10, None, 4)
    assert [r["segment"] for r in d["rows"]] == [r.number for r in want.rows]
    assert 10 not in [r["segment"] for r in d["rows"]]


def test_glance_says_approximate_with_its_worst_error(archives, capsys):
    d = _json(capsys, ["glance", str(archives[0]), "--rows", "4", "--json"])
    assert d["approximate"] is True and d["worst_error"] > 0 and len(d["rows"]) == 4
    assert sum(r["samples"] for r in d["rows"]) == 20000
    main(["glance", str(archives[0]), "--rows", "2"])
    text = capsys.readouterr().out
    assert "APPROXIMATE" in text and "within ±" in text


def test_without_an_index_the_answers_say_so(archives, capsys, monkeypatch):
    monkeypatch.setattr(derived, "MAX_SAMPLES", 19999)     # the 20000-sample channel counts as too long to derive
    d = _json(capsys, ["unusual", str(archives[1]), "--json"])
    assert d["unit"] == "window" and d["based_on"].startswith("no learned index")
    d = _json(capsys, ["glance", str(archives[1]), "--json"])
    assert d["worst_error"] is None and "no learned index" in d["based_on"]


@pytest.mark.parametrize("argv, words", [
    (["alike", "{a}", "999999"], "out of range"),
    (["unusual", "{a}", "--channel", "nope"], "no channel"),
    (["unusual", "{a}", "-k", "0"], "at least 1"),
    (["glance", "{a}", "--first", "10", "--last", "5"], "not after"),
    (["alike", "{a}", "-3"], ""),
])
def test_bad_input_is_one_line_and_exit_2(archives, capsys, argv, words):
    assert main([w.format(a=archives[0]) for w in argv]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("tsarchive: error:") and words in err[0]


def test_pack_segment_option(tmp_path, capsys):
    src = tmp_path / "s.npy"
    np.save(src, np.sin(np.arange(3000) / 5.0).astype(np.float32))
    out = tmp_path / "s.tsarchive"
    assert main(["pack", str(src), "-o", str(out), "--rate", "50", "--code-size", "0", "--segment", "0",
                 "--quiet"]) == 0
    assert not (out / "index.parquet").exists()
    capsys.readouterr()
    bad = tmp_path / "bad.tsarchive"
    assert main(["pack", str(src), "-o", str(bad), "--rate", "50", "--code-size", "0", "--segment", "1",
                 "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "segment 1" in err[0]
    assert not bad.exists() and [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


def test_segment_samples_equal_the_full_decode(archives):
    arc = open_archive(archives[0])
    ci = look.member.read(arc, arc.channels[0].name)
    ids = np.array([156, 0, 3, 4, 60, 61, 62, ci.n_segments - 1, 3])     # repeats, runs, the short last one
    got = look.segment_samples(arc, arc.channels[0].name, ci, ids)
    full = np.asarray(arc.read(arc.channels[0].name), dtype=np.float64)  # the reader's whole-channel decode
    S = ci.segment
    for row, s in zip(got, ids.tolist()):
        own = full[s * S:(s + 1) * S]
        assert np.array_equal(row[:len(own)], own) and np.all(row[len(own):] == own[-1])


def test_alike_text_names_the_widened_shortlist(archives, capsys):
    d = _json(capsys, ["alike", str(archives[0]), "10", "-k", "4", "--json"])
    assert "by how much the code misses" in d["based_on"] and "up to 512" in d["based_on"]


def test_an_index_packed_before_the_edge_fact_says_it_lacks_it():
    # tests/golden/v5/coders5 was packed before the "edge" column existed: it reads as zeros and the
    # ranking's text says the fact is not in this archive's index
    from pathlib import Path
    arc = open_archive(Path(__file__).parent / "golden" / "v5" / "coders5")
    name = arc.channels[1].name
    ci = look.member.read(arc, name)
    assert not ci.fact("edge").any() and ci.fact("slope").any()
    assert "not in this archive's index" in look.unusual(arc, name, k=3).based_on
