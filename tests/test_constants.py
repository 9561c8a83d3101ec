"""The 'measured' size constants that steer packing decisions, measured again on a busy signal.

``BYTES_PER_PARAM`` (a stored decoder parameter), ``BITS_PER_CODE`` (a stored code value) and
``WINDOW_ROW_BYTES`` (a window row's framing) are estimates the pack uses before anything is
written.  This test packs a signal whose codes vary from window to window and measures each in
the written files (Parquet's own column-chunk sizes are the reference).  Margin: each may drift by
up to 50 % of its value before the test fails (they only rank alternatives; common practice, no source).
"""

from __future__ import annotations

import numpy as np
import pyarrow.compute as pc
import pyarrow.parquet as pq

import tsarchive
from tsarchive import modelrun, windowchoice
from tsarchive.store import schema as S

MARGIN = 0.5


def _near(measured: float, constant: float) -> bool:
    return abs(measured - constant) <= MARGIN * constant


def test_measured_size_constants_still_hold(tmp_path):
    rng = np.random.default_rng(3)
    n = 1 << 16
    t = np.arange(n)
    x = np.stack([np.sin(t / (20.0 + 30 * rng.random()) + k) * 10 * (1 + (t // 256 % 7))
                  + 0.5 * rng.standard_normal(n) for k in range(2)], axis=1).astype(np.float32)
    np.save(tmp_path / "m.npy", x)
    out = tmp_path / "m.tsa"
    tsarchive.pack(tmp_path / "m.npy", out, "0.1%", rate=100.0, window=256, code_size=8, train_seconds=0.5)
    arc = tsarchive.open(out)
    meta = pq.ParquetFile(out / S.WINDOWS).metadata
    code_bytes = sum(meta.row_group(g).column(c).total_compressed_size for g in range(meta.num_row_groups)
                     for c in range(meta.num_columns) if meta.row_group(g).column(c).path_in_schema.startswith("code"))
    payload = pc.sum(pc.binary_length(pq.read_table(out / S.WINDOWS, columns=["residual"])["residual"])).as_py()
    rows = meta.num_rows
    per_param = (out / S.MODEL).stat().st_size / arc.decoder.n_params
    per_code = 8 * code_bytes / (rows * arc.decoder.code_size)
    per_row = ((out / S.WINDOWS).stat().st_size - code_bytes - payload) / rows
    measured = {"BYTES_PER_PARAM": (per_param, modelrun.BYTES_PER_PARAM),
                "BITS_PER_CODE": (per_code, modelrun.BITS_PER_CODE),
                "WINDOW_ROW_BYTES": (per_row, windowchoice.WINDOW_ROW_BYTES)}
    drifted = {k: v for k, v in measured.items() if not _near(*v)}
    assert not drifted, f"re-measure and update these constants (measured, constant): {drifted}"
