"""The index's byte budget: exact, deterministic, honest about what it kept; an explicit segment wins."""

from __future__ import annotations

import numpy as np

import tsarchive
from tsarchive.archive import open_archive
from tsarchive.index import budget, build_channel, look, member


def _channel(n=120_000, seed=3, segment=None):
    rng = np.random.default_rng(seed)
    x = np.sin(np.arange(n) / 7.0) + 0.3 * rng.normal(size=n)
    return build_channel(lambda a, b: x[a:b], "ch", n, segment=segment, try_nonlinear=False)


def test_fits_is_exact_integer_percent():
    # 3 % of the payload, compared as integers: 100 * index <= 3 * payload (common practice (no source))
    assert budget.SHARE_PERCENT == 3
    assert budget.fits(30, 1000) and not budget.fits(31, 1000)
    assert budget.fits(3 * 10 ** 17, 10 ** 19) and not budget.fits(3 * 10 ** 17 + 1, 10 ** 19)


def test_an_index_too_large_is_rebuilt_smaller_and_fits():
    ci = _channel()
    full = len(member.to_bytes([ci]))
    payload = (100 * full) // 3 - 1                          # one byte short of letting the index as built in
    got = budget.fit_index([ci], payload, member.to_bytes)
    assert got, "a coarser rung fits"
    small = len(member.to_bytes(got))
    assert 100 * small <= 3 * payload                        # the budget, checked with integers here
    g = got[0]
    coarser = g.coder.kind == "linear" and int(np.abs(g.coder.basis.astype(int)).max()) <= 15  # 4-bit basis
    assert g.segment > ci.segment or g.coder.code_size < ci.coder.code_size or coarser
    again = budget.fit_index([_channel()], payload, member.to_bytes)          # deterministic: the same bytes again
    assert member.to_bytes(again) == member.to_bytes(got)


def test_a_coarser_basis_spans_nearly_the_same_subspace():
    ci = _channel()
    small = budget.rebuild(ci, 1, None, 4)
    assert int(np.abs(small.coder.basis.astype(int)).max()) <= 15 < int(np.abs(ci.coder.basis.astype(int)).max())
    # principal angles between the two row spaces (numpy SVD of Q1^T Q2): cosines near 1 (Golub & Van Loan 6.4.3)
    q1, _ = np.linalg.qr(ci.coder.rows.T)
    q2, _ = np.linalg.qr(small.coder.rows.T)
    assert np.linalg.svd(q1.T @ q2, compute_uv=False).min() > 0.95
    assert len(member.to_bytes([small])) < len(member.to_bytes([ci]))


def test_facts_only_when_codes_do_not_fit_and_it_says_so(tmp_path):
    ci = _channel()
    facts = budget.rebuild(ci, 4, 0)
    assert facts.coder.kind == "facts" and facts.codes.shape == (facts.n_segments, 0)
    payload = (100 * len(member.to_bytes([facts]))) // 3 + 1
    got = budget.fit_index([ci], payload, member.to_bytes)
    assert got and got[0].coder.kind == "facts"
    member.write(tmp_path, got, fit=False)

    class Arc:
        path = tmp_path
    back = member.read(Arc, "ch")
    assert back.coder.kind == "facts" and np.array_equal(back.facts, got[0].facts)
    assert np.array_equal(back.level, got[0].level)
    assert "facts only" in look.based_on(back, "unusual") and "facts only" in look.based_on(back, "glance")


def test_no_index_when_nothing_fits_and_an_explicit_segment_wins():
    ci = _channel(n=20_000)
    assert budget.fit_index([ci], 10, member.to_bytes) == []
    asked = _channel(n=20_000, segment=128)
    assert budget.fit_index([asked], 10, member.to_bytes) == [asked]          # --segment given: kept as built


def test_a_short_recording_packs_without_an_index_and_the_answers_say_so(tmp_path):
    # the rankings come from an index computed on opening (tsarchive/index/derived.py) and say so
    x = np.sin(np.arange(6000) / 5.0).astype(np.float32)
    np.save(tmp_path / "s.npy", x)
    tsarchive.pack(tmp_path / "s.npy", tmp_path / "s.tsarchive", "1%", rate=10.0, code_size=0)
    arc = open_archive(tmp_path / "s.tsarchive")
    assert not member.has_index(arc)
    r = look.unusual(arc)
    assert r.unit == "segment" and r.based_on.startswith("the index computed on opening")


def test_no_rung_is_built_when_not_even_an_empty_member_fits():
    # a member always carries its schema and footer, so one with rows is at least as large as one without
    # (Parquet footer layout, https://parquet.apache.org/docs/file-format/); below that nothing is encoded
    ci = _channel(n=20_000)
    floor = len(member.to_bytes([]))
    asked = []

    def counting(index):
        asked.append(len(index))
        return member.to_bytes(index)
    payload = (100 * floor) // 3 - 1                          # one byte short of letting an empty member in
    assert budget.fit_index([ci], payload, counting) == []
    assert asked == [0]                                       # only the empty member was measured


def test_when_the_coarsest_rung_does_not_fit_no_other_rung_is_built():
    # an empty member fits but no rung does (a short or very compressible recording's archive): the coarsest
    # rung is the smallest, so it is measured first and nothing else is built or encoded (each rung costs its
    # range-coding tables: most of a one-hour log's pack)
    ci = _channel(n=20_000)
    coarsest = None
    for longer, codes, bits in budget.LADDER:
        if ci.segment * longer <= budget.MAX_SEGMENT and ci.n_samples >= budget.MIN_SEGMENTS * ci.segment * longer:
            coarsest = (longer, codes, bits)
    smallest = len(member.to_bytes([budget.rebuild(ci, *coarsest)]))
    asked = []

    def counting(index):
        asked.append(len(index))
        return member.to_bytes(index)
    payload = (100 * smallest) // 3 - 1                        # one byte short of letting the smallest rung in
    assert budget.fits(len(member.to_bytes([])), payload)     # the empty member fits: the ladder is tried
    assert budget.fit_index([ci], payload, counting) == []
    assert asked == [0, 1]                                     # the empty member, then the coarsest rung only
    # and where the coarsest fits, the first rung that fits is still the one kept (the ladder's order)
    assert budget.fit_index([ci], (100 * smallest) // 3 + 1, member.to_bytes)
