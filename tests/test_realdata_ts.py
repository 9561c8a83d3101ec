"""The bench's reader of the UEA/UCR archive's ``.ts`` text format (used for sets shipped inside sktime).

Format as documented with the archive (from memory of timeseriesclassification.com's format notes): ``#``
comment lines, ``@`` header lines ending with ``@data``, then one case per line, dimensions separated by ``:``,
values by ``,``, the class label last.
"""

from __future__ import annotations

import numpy as np

from tsarchive.bench import realdata


def test_ts_cases_reads_dimensions_and_cases_in_order(tmp_path):
    p = tmp_path / "x.ts"
    p.write_text("\ufeff# a comment\n@problemName X\n@univariate false\n@dimensions 2\n@data\n"
                 "1,2,3:4,5,6:walk\n7,8.5,-9E-1:10,11,12:run\n", encoding="utf-8")
    cases = realdata._ts_cases(p)
    assert len(cases) == 2
    np.testing.assert_array_equal(cases[0], [[1, 4], [2, 5], [3, 6]])
    np.testing.assert_array_equal(cases[1], [[7, 10], [8.5, 11], [-0.9, 12]])
    joined, note = realdata._load_ts_joined(p)
    assert joined.shape == (6, 2) and "2 cases" in note


def test_ts_sets_load_when_sktime_ships_them():
    got = realdata.load("motion_sktime")
    if isinstance(got, str):
        import pytest
        pytest.skip(got)
    assert got.data.shape == (4000, 6)          # 40 cases x 100 samples, 6 dimensions (the file's header says so)
