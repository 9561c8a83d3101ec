"""Make the golden archive of format 5: ``python tests/golden/v5/make_golden.py`` (once; never again after
format 5 has shipped).

The source is format 4's invented bench log of rig 2 (its generator in
``tests/golden/v4``), 8500 rows long: every predictor, several LPC sets, a
NaN and a ``-9999`` sentinel held verbatim, the integer decoder, naive times
with a gap and jitter (``time.parquet``), notes, a text column
(``extra.parquet``) and an integer channel beyond 2**53 with an empty cell.
It is packed into ``golden5`` and its decoded samples saved in
``expected.npz``, which ``tests/test_golden_v5.py`` reproduces bit for bit.

What format 5 adds is frozen too (``store/lean.py``, ``store/compact.py``):
the ``key``/``facts`` window rows, in full per-channel row groups and one
group shared by the channels' last windows (264 windows a channel in
windows of 32), the lean ``exceptions.parquet`` and the compact manifest
(``channel_defaults``, ε in the grid only).
"""

from __future__ import annotations

import importlib.util
import json
import shutil
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
N = 8500                         # rows of the format-4 source generator (tests/golden/v4), longer


def write_source(path: Path) -> None:
    """Format 4's source (the same rig, gap, jitter, sentinel, text column), with ``N`` rows."""
    spec = importlib.util.spec_from_file_location("make_golden_v4", HERE.parent / "v4" / "make_golden.py")
    v4 = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(v4)
    v4.N = N
    v4.write_source(path)


def main() -> None:
    import pyarrow.parquet as pq

    import tsarchive
    from tsarchive.ingest import ReadOptions

    write_source(HERE / "source.csv")
    out = HERE / "golden5"
    shutil.rmtree(out, ignore_errors=True)
    budget = "strain=0.5,temp=lossless,counts=lossless,serial=3"
    tsarchive.pack(HERE / "source.csv", out, budget, window=32, code_size=4, train_seconds=5, seed=2,
                   read_options=ReadOptions.build(missing="-9999"), segment=64)
    arc = tsarchive.open(out)
    meta = pq.ParquetFile(out / "windows.parquet").metadata
    keys = [meta.row_group(g).column(0).statistics for g in range(meta.num_row_groups)]
    frozen = {   # what this archive must freeze -> whether it does
        "several LPC sets": len(arc.channel("strain").lpc) > 1,
        "every predictor (else try another seed)": {m for c in arc.channels for m, k in c.modes if k} == {
            "prev", "prev2", "ae", "ae+prev", "lpc"},
        "every optional member": {"time.parquet", "extra.parquet", "exceptions.parquet", "model.parquet",
                                  "index.parquet"} <= set(arc.manifest["members"]),
        "a row group of one channel": any(k.min >> 32 == k.max >> 32 for k in keys),
        "a row group shared by channels": any(k.min >> 32 < k.max >> 32 for k in keys),
        "the compact manifest": "channel_defaults" in json.loads((out / "manifest.json").read_text()),
    }
    missing = [what for what, ok in frozen.items() if not ok]
    assert not missing, f"the golden archive does not freeze: {missing}"
    x = {c.name: arc.read(c.name) for c in arc.channels}
    np.savez(HERE / "expected.npz", **{n: np.ma.getdata(v) for n, v in x.items()},
             **{f"{n}.mask": np.ma.getmaskarray(v) for n, v in x.items()}, times=arc.times().values)
    print(f"wrote {out} ({arc.archive_bytes} bytes) and expected.npz")
    coders()


def coders() -> None:
    """A second, small golden archive whose channels are range coded and adaptive coded (the packer's own
    choice on exact byte counts, tests/coder_kit.py), with its decoded samples in ``expected_coders.npz``."""
    import sys

    import tsarchive
    sys.path.insert(0, str(HERE.parents[1]))
    from coder_kit import coder_ids, pack_with_coders

    out = HERE / "coders5"
    shutil.rmtree(out, ignore_errors=True)
    pack_with_coders(out, 20_000, segment=256)
    out.with_suffix(".npy").unlink()
    ids = coder_ids(out)
    assert None in ids and "adaptive" in ids, f"the coders archive does not freeze both coders: {ids}"
    assert "index.parquet" in tsarchive.open(out).manifest["members"]
    arc = tsarchive.open(out)
    np.savez_compressed(HERE / "expected_coders.npz", **{c.name: arc.read(c.name) for c in arc.channels})
    print(f"wrote {out} ({arc.archive_bytes} bytes, coders {ids}) and expected_coders.npz")


if __name__ == "__main__":
    main()
