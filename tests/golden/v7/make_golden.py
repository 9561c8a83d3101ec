"""Make the golden archives of format 7: ``python tests/golden/v7/make_golden.py`` (once; never again after
format 7 has shipped).

The source is format 5's committed ``tests/golden/v5/source.csv`` (the invented bench log of rig 2,
8500 rows): every predictor, several LPC sets, a NaN and a ``-9999`` sentinel held verbatim,
the integer decoder, naive times with a gap and jitter (``time.parquet``), notes, a text column
(``extra.parquet``) and an integer channel beyond 2**53 with an empty cell.  It is packed into
``golden7`` and its decoded samples saved in ``expected.npz``, which ``tests/test_golden_v7.py``
reproduces bit for bit; ``coders7`` (one range-coded and one adaptive-coded channel, no model) with
``expected_coders.npz`` likewise; ``classic7`` (one channel in the classic fallback coder) with
``expected_classic.npz``.

What format 7 adds is frozen too (``store/inside.py``, ``store/slim.py``): the manifest compressed with
``manifest7.zdict`` and stored, like the footer's digest, as 7-bit text under ``tsarchive.manifest`` and
``tsarchive.digest``; every Parquet member's footer without the optional fields ``store/slim.py`` names;
``facts`` stored PLAIN; and what format 6 froze (the 20-byte ``facts`` column, the row groups mapped by the
manifest's ``groups``, the compact manifest).
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[2]
SOURCE = HERE.parent / "v5" / "source.csv"     # format 5's committed source, used as it is


def main() -> None:
    sys.path.insert(0, str(ROOT))          # this worktree's tsarchive, whatever the install points at
    import pyarrow.parquet as pq

    import tsarchive
    from tsarchive.ingest import ReadOptions
    from tsarchive.store.binding import read_manifest
    assert Path(tsarchive.__file__).parent == ROOT / "tsarchive", tsarchive.__file__

    out = HERE / "golden7"
    shutil.rmtree(out, ignore_errors=True)
    # temp within 0.02 (lossless in formats 3 to 6): kept lossless, the classic coder now takes it and no
    # window would use the autoencoder, which this archive freezes
    budget = "strain=0.5,temp=0.02,counts=lossless,serial=3"
    tsarchive.pack(SOURCE, out, budget, window=32, code_size=4, train_seconds=5, seed=2,
                   read_options=ReadOptions.build(missing="-9999"), segment=64)
    arc = tsarchive.open(out)
    stored = read_manifest(out)
    meta = pq.ParquetFile(out / "windows.parquet").metadata
    rows = [meta.row_group(g).num_rows for g in range(meta.num_row_groups)]
    frozen = {   # what this archive must freeze -> whether it does
        "several LPC sets": len(arc.channel("strain").lpc) > 1,
        # ae+prev is frozen by golden6: the classic fallback (format 6 on) now takes the two integer channels
        # where it was chosen, and codes every window of theirs with prev
        "every predictor but ae+prev (else try another seed)": {m for c in arc.channels for m, k in c.modes if k} == {
            "prev", "prev2", "ae", "lpc"},
        "the classic fallback on an integer channel": "classic" in {(c.get("coder") or {}).get("id")
                                                                    for c in stored["channels"]},
        "every optional member": {"time.parquet", "extra.parquet", "exceptions.parquet", "model.parquet",
                                  "index.zst"} <= set(arc.manifest["members"]),
        "no manifest.json": not (out / "manifest.json").exists(),
        "a row group of one channel": 256 in rows,
        "a row group shared by channels": any(n == 32 for n in rows),
        "the compact manifest": "channel_defaults" in stored,
        "a step grid without its step": any(c["grid"]["kind"] == "step" and "step" not in c["grid"]
                                            for c in stored["channels"]),
        "footers without created_by": all(not pq.read_metadata(p).created_by for p in out.glob("*.parquet")),
    }
    missing = [what for what, ok in frozen.items() if not ok]
    assert not missing, f"the golden archive does not freeze: {missing}"
    _expect(arc, "expected.npz", times=arc.times().values)
    coders()
    classic()


def _expect(arc, name: str, **more) -> None:
    """The archive's decoded samples (data and masks) saved beside it for the bit-for-bit test."""
    x = {c.name: arc.read(c.name) for c in arc.channels}
    np.savez_compressed(HERE / name, **{n: np.ma.getdata(v) for n, v in x.items()},
                        **{f"{n}.mask": np.ma.getmaskarray(v) for n, v in x.items()}, **more)
    print(f"wrote {arc.path} ({arc.archive_bytes} bytes) and {name}")


def coders() -> None:
    """The small archive whose channels are range coded and adaptive coded (the packer's own choice,
    tests/coder_kit.py), with its decoded samples in ``expected_coders.npz``."""
    import tsarchive
    sys.path.insert(0, str(HERE.parents[1]))
    from coder_kit import coder_ids, pack_with_coders

    out = HERE / "coders7"
    shutil.rmtree(out, ignore_errors=True)
    pack_with_coders(out, 20_000, segment=256)
    out.with_suffix(".npy").unlink()
    assert set(coder_ids(out)) == {None, "adaptive"}, "the coders archive does not freeze both coders"
    _expect(tsarchive.open(out), "expected_coders.npz")


def classic() -> None:
    """The small archive whose first channel is coded by the classic fallback (a pattern repeated exactly:
    the compressors' long matches find it) and whose second is not (white noise), with its decoded
    samples in ``expected_classic.npz`` (tests/test_classic_channel.py's recording, no model, no index)."""
    import tsarchive
    sys.path.insert(0, str(HERE.parents[1]))
    from coder_kit import coder_ids
    from test_classic_channel import BUDGET, repetitive_and_noise

    out = HERE / "classic7"
    shutil.rmtree(out, ignore_errors=True)
    src = out.with_suffix(".npy")
    np.save(src, repetitive_and_noise(20_000))
    tsarchive.pack(src, out, BUDGET, rate=100.0, window=4096, code_size=0, segment=0)
    src.unlink()
    ids = coder_ids(out)
    assert ids[0] == "classic" and ids[1] != "classic", f"the classic archive does not freeze the coder: {ids}"
    from tsarchive.store.binding import read_manifest
    assert read_manifest(out)["channels"][0]["coder"].get("tail") == 1, "the short last window does not join its block"
    _expect(tsarchive.open(out), "expected_classic.npz")


if __name__ == "__main__":
    main()
