"""Make format 6's manifest dictionary, ``tsarchive/store/manifest6.zdict``: ``python tests/golden/v6/make_dictionary.py``
(once; never again after format 6 has shipped: every format-6 manifest is compressed with it, and
``tests/test_store_inside.py`` pins its SHA-256).

A zstd raw-content dictionary is plain text the compressor may copy from (RFC 8878, section 5: "Raw
content" dictionaries).  This one is the two format-5 golden manifests (``tests/golden/v5``), put in
format 6's shape (version 6, the layout line, no ``windows.parquet`` among the members), as compact
JSON: the long one with every optional field first, the short one last (the shape most archives
have, nearest the data it is matched against).
"""

from __future__ import annotations

import json
from pathlib import Path

HERE = Path(__file__).resolve().parent
V5 = HERE.parent / "v5"
OUT = HERE.parents[2] / "tsarchive" / "store" / "manifest6.zdict"


def v6_shape(m: dict) -> dict:
    from tsarchive.store.lean import LAYOUT

    m = dict(m, format_version=6, layout=LAYOUT.decode("ascii"))
    m["members"] = {k: v for k, v in m["members"].items() if k != "windows.parquet"}
    return m


def main() -> None:
    texts = [json.dumps(v6_shape(json.loads((V5 / name / "manifest.json").read_text())), separators=(",", ":"))
             for name in ("golden5", "coders5")]
    OUT.write_bytes("\n".join(texts).encode("utf-8"))
    print(f"wrote {OUT} ({OUT.stat().st_size} bytes)")


if __name__ == "__main__":
    main()
