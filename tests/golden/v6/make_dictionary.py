"""Make format 6's manifest dictionary, ``tsarchive/store/manifest6.zdict``: ``python tests/golden/v6/make_dictionary.py``
(once; never again after format 6 has shipped: every format-6 manifest is compressed with it, and
``tests/test_store_inside.py`` pins its SHA-256).

A zstd raw-content dictionary is plain text the compressor may copy from (RFC 8878, section 5: "Raw
content" dictionaries).  This one is the manifests of three format-6 archives as compact JSON, packed
from recordings outside every measurement (the sample streams and the bench's real sets are measured
with it): format 5's golden rig log (times, notes, a text column, four channels), an invented
two-channel recording and, last (nearest the data it is matched against), a short single-channel one,
the shape most archives of short test runs have.  Their digests are random to a compressor, so they
are left out.
"""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[2]
OUT = ROOT / "tsarchive" / "store" / "manifest6.zdict"


def _text(arc: Path) -> str:
    from tsarchive.store.binding import read_manifest

    m = read_manifest(arc)
    m["source"]["sha256"] = ""
    m["data"]["sha256"] = ""
    return json.dumps(m, separators=(",", ":"))


def main() -> None:
    import sys
    sys.path.insert(0, str(ROOT))          # this worktree's tsarchive, whatever the install points at
    import tsarchive
    assert Path(tsarchive.__file__).parent == ROOT / "tsarchive", tsarchive.__file__

    texts = []
    with tempfile.TemporaryDirectory() as tmp:
        t = Path(tmp)
        rng = np.random.default_rng(6)
        i = np.arange(20_000)
        two = np.stack([20 + 3 * np.sin(i / 900) + rng.normal(0, 0.05, i.size),
                        np.round(1000 * np.sin(i / 37) + rng.normal(0, 20, i.size))], axis=1).astype(np.float32)
        np.save(t / "two.npy", two)
        np.save(t / "run.npy", (np.sin(i[:3000] / 11) + rng.normal(0, 0.02, 3000)).astype(np.float32))
        for src, budget, rate in ((ROOT / "tests" / "golden" / "v5" / "source.csv", "0.5", None),
                                  (t / "two.npy", "1%", 10.0), (t / "run.npy", "1%", 100.0)):
            tsarchive.pack(src, t / "a.tsarchive", budget, rate=rate, code_size=0, force=True)
            texts.append(_text(t / "a.tsarchive"))
    OUT.write_bytes("\n".join(texts).encode("utf-8"))
    print(f"wrote {OUT} ({OUT.stat().st_size} bytes)")


if __name__ == "__main__":
    main()
