"""The optional index member: written by pack, listed in the binding, read back exactly, refused when damaged."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pytest
import zstandard

import tsarchive
from tsarchive.errors import ArchiveCorrupt
from tsarchive.index import build_channel, derived, look, member
from tsarchive.index.query import preview
from tsarchive.archive import open_archive

RATE = 100.0


def _source(tmp_path, n=30000, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(n) / RATE
    x = np.sin(2 * np.pi * 1.3 * t) + 0.05 * rng.normal(size=n)
    x[(12345 * n) // 30000] += 6.0                             # one spike
    p = tmp_path / "rig.npy"
    np.save(p, x.astype(np.float32))
    return p, x.astype(np.float32).astype(np.float64)


@pytest.fixture(scope="module")
def packed(tmp_path_factory):
    d = tmp_path_factory.mktemp("idx")
    src, x = _source(d)
    out = d / "rig.tsarchive"
    # an explicit segment keeps the index as built (a short recording's index does not fit the byte budget)
    tsarchive.pack(src, out, "0.5%", rate=RATE, code_size=0, segment=256)
    return out, x


def test_pack_writes_the_index_and_lists_it(packed):
    out, x = packed
    arc = open_archive(out)
    assert member.has_index(arc) and member.NAME in arc.manifest["members"]
    arc.check_members()                                       # its SHA-256 is bound like every member
    assert arc.verify(against=None).ok


def test_round_trip_equals_what_was_built(tmp_path):
    _, x = _source(tmp_path, n=5000)
    ci = build_channel(lambda a, b: x[a:b], "ch", len(x), try_nonlinear=False)
    member.write(tmp_path, [ci], fit=False)

    class Arc:
        path = tmp_path
    back = member.read(Arc, "ch")
    assert back.segment == ci.segment and back.n_samples == ci.n_samples and back.ref == ci.ref
    assert np.array_equal(back.codes, ci.codes) and np.array_equal(back.facts, ci.facts)
    assert np.array_equal(back.level, ci.level) and back.level_step == ci.level_step
    assert np.array_equal(back.coder.basis, ci.coder.basis) and back.coder.step == ci.coder.step
    assert back.worst == ci.worst


def test_preview_is_within_the_stored_worst_error(packed):
    out, x = packed
    arc = open_archive(out)
    g = look.glance(arc)
    assert len(g.values) == len(x) and g.worst is not None
    assert np.max(np.abs(g.values - x)) <= g.worst * (1 + 1e-6)    # numpy against the source samples
    part = look.glance(arc, start=1000, end=1500)
    assert np.array_equal(part.values, g.values[1000:1500])


def test_pack_with_segment_zero_has_no_index_and_longer_channels_fall_back(tmp_path, monkeypatch):
    monkeypatch.setattr(derived, "MAX_SAMPLES", 3999)      # this channel counts as too long to derive an index
    src, _ = _source(tmp_path, n=4000)
    out = tmp_path / "plain.tsarchive"
    tsarchive.pack(src, out, "0.5%", rate=RATE, code_size=0, segment=0)
    arc = open_archive(out)
    assert not member.has_index(arc) and not (out / member.NAME).exists()
    r = look.unusual(arc, k=5)
    assert r.unit == "window" and r.based_on.startswith("no learned index")
    assert [row.number for row in r.rows] == arc.outliers(arc.channels[0].name, k=5)
    g = look.glance(arc)
    assert g.worst is None and "no learned index" in g.based_on


def test_a_segment_length_is_kept(tmp_path):
    src, _ = _source(tmp_path, n=4000)
    out = tmp_path / "s.tsarchive"
    tsarchive.pack(src, out, "0.5%", rate=RATE, code_size=0, segment=50)
    ci = member.read(open_archive(out), "ch0")
    assert ci.segment == 50 and ci.n_segments == 80


def _damaged(packed, tmp_path, edit):
    out, _ = packed
    copy = tmp_path / "copy.tsarchive"
    shutil.copytree(out, copy)
    p = copy / member.NAME            # format 6: one zstd frame of <4-byte LE length> <JSON> <blobs>
    raw = zstandard.ZstdDecompressor().decompress(p.read_bytes())
    n = int.from_bytes(raw[:4], "little")
    meta = json.loads(raw[4:4 + n])
    edit(meta)
    text = json.dumps(meta).encode()
    p.write_bytes(zstandard.ZstdCompressor().compress(len(text).to_bytes(4, "little") + text + raw[4 + n:]))
    return open_archive(copy, strict=False)


@pytest.mark.parametrize("edit", [
    lambda m: m["channels"][0].update(kind="other"),
    lambda m: m["channels"][0].update(code_size=99),
    lambda m: m["channels"][0].update(n_samples=7),
    lambda m: m["channels"][0]["basis"].update(payload="!!"),
    lambda m: m["channels"][0]["basis"].update(shape=[1, 2, 3]),
    lambda m: m.update(version=99),
])
def test_a_damaged_index_is_refused_with_one_line(packed, tmp_path, edit):
    arc = _damaged(packed, tmp_path, edit)
    with pytest.raises(ArchiveCorrupt, match="index"):
        member.read(arc, arc.channels[0].name)


def test_a_nonlinear_coder_round_trips(tmp_path):
    import dataclasses
    from tsarchive.index import learn
    x = np.sin(np.arange(40 * 64) / 3.0) * np.repeat(np.linspace(0.5, 2.0, 40), 64)
    ci = build_channel(lambda a, b: x[a:b], "ch", len(x), segment=64, try_nonlinear=False)
    rows = x.reshape(40, 64)
    X = (rows - rows.mean(axis=1, keepdims=True)) / ci.ref
    old = learn.AE_WORK
    try:
        learn.AE_WORK = 2e7                                    # a small model is enough for the round trip
        non = learn.fit_nonlinear(X, 2)
    finally:
        learn.AE_WORK = old
    ci = dataclasses.replace(ci, coder=non, codes=non.encode(X))
    member.write(tmp_path, [ci], fit=False)

    class Arc:
        path = tmp_path
    back = member.read(Arc, "ch")
    assert back.coder.kind == "nonlinear" and np.array_equal(back.codes, ci.codes)
    a, b = non.decoder.to_arrays(), back.coder.decoder.to_arrays()
    assert a.keys() == b.keys() and all(np.array_equal(a[k], b[k]) for k in a)
    assert np.array_equal(preview(back), preview(ci))          # the integer decoder: the same bits


def test_byte_flips_in_the_index_are_refused_or_read(packed, tmp_path):
    # a flipped bit anywhere in index.parquet: reading it raises ArchiveCorrupt (one line) or succeeds
    # (verify reports the member's SHA-256 mismatch either way); nothing else escapes
    out, _ = packed
    copy = tmp_path / "flip.tsarchive"
    shutil.copytree(out, copy)
    p = copy / member.NAME
    data = p.read_bytes()
    refused = 0
    for at in range(0, len(data), max(1, len(data) // 40)):
        flipped = bytearray(data)
        flipped[at] ^= 0x10
        p.write_bytes(bytes(flipped))
        arc = open_archive(copy, strict=False)
        try:
            member.read(arc, "ch0")
        except ArchiveCorrupt:
            refused += 1
    assert refused > 0
