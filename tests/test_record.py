"""The verification record (``verify --record``) and the verification kept beside the archive.

Every figure is recomputed here with numpy from the samples this file writes, and every identity with
hashlib and os.stat, never read back through the code that wrote the record.
"""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path

import numpy as np
import pytest

import tsarchive
from tsarchive.cli import main

RATE, N = 10.0, 3000
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # the PNG specification (ISO/IEC 15948, section 5.2): the first 8 bytes


from crafting import archive_identity, manifest as manifest_of  # noqa: E402

def _sha(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()  # hashlib: FIPS 180-4 SHA-256


@pytest.fixture(scope="module")
def packed(tmp_path_factory):
    """A logged CSV (a lossy float channel, a stepped one, a lossless integer counter) and its archive."""
    d = tmp_path_factory.mktemp("rec")
    rng = np.random.default_rng(3)
    k = np.arange(N)
    temp = 25.0 + 0.8 * np.sin(k / 150.0) + 0.05 * rng.standard_normal(N)
    press = np.round(1013.0 + np.cumsum(rng.standard_normal(N)) * 0.02, 3)
    count = (k * 7) % 1000
    t0 = np.datetime64("2026-03-04T08:00:00")
    times = t0 + (k * 100).astype("timedelta64[ms]")
    # repr of a Python float reads back as the same double (Python float repr, shortest round trip)
    rows = [f"{t},{float(a)!r},{float(b)!r},{int(c)}" for t, a, b, c in zip(times, temp, press, count)]
    src = d / "bench log.csv"
    src.write_text("time,temp [degC],press [hPa],count\n" + "\n".join(rows) + "\n", encoding="utf-8")
    arc = d / "bench.tsarchive"
    tsarchive.pack(src, arc, "temp=0.02,press=0.1%,count=lossless")
    return {"dir": d, "src": src, "arc": arc,
            "x": {"temp": temp, "press": press, "count": count}}


def test_record_against_the_source_states_identity_and_figures(packed, capsys):
    out = packed["dir"] / "record-full"
    assert main(["verify", str(packed["arc"]), "--against", str(packed["src"]), "--record", str(out),
                 "--quiet"]) == 0
    rec = json.loads((out / "record.json").read_text(encoding="utf-8"))
    arc, src = packed["arc"], packed["src"]
    manifest = manifest_of(arc)
    assert rec["archive"]["name"] == "bench.tsarchive"
    assert rec["archive"]["bytes"] == sum(p.stat().st_size for p in arc.iterdir() if p.is_file())
    assert rec["archive"]["manifest_sha256"] == archive_identity(arc)
    assert rec["source"] == {"name": "bench log.csv", "bytes": src.stat().st_size, "sha256": _sha(src)}
    assert rec["compared_with"] == {"name": "bench log.csv", "bytes": src.stat().st_size, "sha256": _sha(src),
                                    "is_packed_file": True}
    assert rec["format_version"] == manifest["format_version"] and rec["tool_version"] == tsarchive.__version__
    assert rec["archive"]["written_by"] == manifest["tool_version"]
    assert rec["checked"] == "every sample against the source" and rec["passed"] is True and rec["problems"] == []
    assert rec["written"].endswith("+00:00")                       # ISO 8601 in UTC
    assert any("Keep the original" in c for c in rec["cautions"])
    assert any("quality system" in c and "regulations" in c for c in rec["cautions"])
    assert "mean-removed" in rec["definitions"]["snr_db"]
    opened = tsarchive.open(arc)
    assert [c["name"] for c in rec["channels"]] == ["temp", "press", "count"]
    for c in rec["channels"]:
        meta = opened.channel(c["name"])
        assert (c["budget"], c["eps"], c["unit"]) == (meta.budget, meta.eps, meta.unit)
        x = packed["x"][c["name"]].astype(np.float64)
        xh = opened.read(c["name"]).astype(np.float64)
        e = xh - x
        # RMS and SNR as numpy computes them from their definitions (the record's SNR is on the mean-removed x)
        assert c["n_compared"] == N and c["passed"] is True
        assert c["worst_error"] == pytest.approx(float(np.max(np.abs(e))), rel=1e-12, abs=1e-12)
        assert c["rms_error"] == pytest.approx(float(np.sqrt(np.mean(e ** 2))), rel=1e-9, abs=0)
        if c["eps"] == 0:
            assert c["rms_error"] == 0 and c["snr_db"] is None and set(c["plots"]) == {"errors"}
            assert np.array_equal(opened.read("count"), packed["x"]["count"])   # lossless: the very values
        else:
            assert 0 < c["worst_error"] <= c["eps"]
            snr = 10 * math.log10(np.sum((x - x.mean()) ** 2) / np.sum(e ** 2))
            assert c["snr_db"] == pytest.approx(snr, rel=1e-9)
            assert set(c["plots"]) == {"errors", "worst"}
        for name in c["plots"].values():
            assert (out / name).read_bytes()[:8] == PNG_SIGNATURE
            assert (out / name).read_bytes()[12:16] == b"IHDR"  # first chunk: IHDR (same specification, 11.2.2)
    md = (out / "record.md").read_text(encoding="utf-8")
    assert "**PASSED**" in md and _sha(src) in md and archive_identity(arc) in md
    assert {p.name for p in out.glob("*.png")} == {n for c in rec["channels"] for n in c["plots"].values()}
    assert all(f"]({n})" in md for n in (p.name for p in out.glob("*.png")))
    assert "wrote the verification record" in capsys.readouterr().err


def test_record_without_a_source_says_checksums_only(packed):
    out = packed["dir"] / "record-checksums"
    assert main(["verify", str(packed["arc"]), "--record", str(out), "--quiet"]) == 0
    rec = json.loads((out / "record.json").read_text(encoding="utf-8"))
    manifest = manifest_of(packed["arc"])
    assert rec["checked"] == "checksums only (samples not compared)" and rec["compared_with"] is None
    for c, m in zip(rec["channels"], manifest["channels"]):
        assert c["worst_from"] == "recorded when packed" and c["worst_error"] == m["summary"]["worst_error"]
        assert c["rms_error"] is None and c["snr_db"] is None and c["plots"] == {}
    assert list(out.glob("*.png")) == []
    assert "samples were not compared" in (out / "record.md").read_text(encoding="utf-8")


def test_record_folder_in_use_is_refused_before_any_work(packed, capsys):
    busy = packed["dir"] / "busy"
    busy.mkdir()
    (busy / "notes.txt").write_text("mine")
    kept = packed["dir"] / ".tsarchive-checks"
    before = sorted(kept.iterdir()) if kept.exists() else []
    assert main(["verify", str(packed["arc"]), "--against", str(packed["src"]), "--record", str(busy)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "choose a new folder" in err
    assert sorted(busy.iterdir()) == [busy / "notes.txt"]
    assert (sorted(kept.iterdir()) if kept.exists() else []) == before     # the verify did not even run


def test_report_shows_the_kept_verification_after_a_restart(tmp_path, packed, capsys):
    import shutil
    arc, src = tmp_path / "bench.tsarchive", tmp_path / "bench log.csv"
    shutil.copytree(packed["arc"], arc)
    shutil.copy(packed["src"], src)
    assert main(["report", str(arc)]) == 0
    assert "last check: unverified" in capsys.readouterr().out
    assert main(["verify", str(arc), "--against", str(src), "--quiet"]) == 0
    capsys.readouterr()
    assert main(["report", str(arc)]) == 0                  # a new command: only the kept file remembers
    line = next(s for s in capsys.readouterr().out.splitlines() if s.startswith("last check:"))
    assert line.startswith(f"last check: verified against bench log.csv (SHA-256 {_sha(src)[:12]}…) on ")
    assert main(["report", str(arc), "--json"]) == 0
    last = json.loads(capsys.readouterr().out)["last_check"]
    assert (last["ok"], last["compared"], last["against"], last["against_sha256"]) == \
        (True, True, "bench log.csv", _sha(src))
    assert main(["verify", str(arc), "--quiet"]) == 0       # a later checksums-only pass keeps the comparison
    capsys.readouterr()
    main(["report", str(arc)])
    assert f"last check: verified against bench log.csv (SHA-256 {_sha(src)[:12]}…)" in capsys.readouterr().out


def test_a_checksums_only_check_is_kept_and_a_failure_forgets_a_pass(tmp_path, packed, capsys):
    import shutil
    arc, src = tmp_path / "bench.tsarchive", tmp_path / "bench log.csv"
    shutil.copytree(packed["arc"], arc)
    shutil.copy(packed["src"], src)
    assert main(["verify", str(arc), "--quiet"]) == 0
    capsys.readouterr()
    main(["report", str(arc)])
    assert "last check: checksums matched (samples not compared) on " in capsys.readouterr().out
    assert main(["verify", str(arc), "--against", str(src), "--quiet"]) == 0
    other = tmp_path / "other.csv"                           # same samples but another file
    other.write_bytes(src.read_bytes() + b"\n")
    assert main(["verify", str(arc), "--against", str(other), "--even-if-changed", "--quiet"]) == 0
    capsys.readouterr()
    main(["report", str(arc)])                               # a converted copy: said so, with its own digest
    assert f"last check: verified against other.csv (not the packed file; SHA-256 {_sha(other)[:12]}…) on " \
        in capsys.readouterr().out
    assert main(["verify", str(arc), "--against", str(other), "--quiet"]) == 1
    capsys.readouterr()
    main(["report", str(arc)])
    out = capsys.readouterr().out
    assert "last check: unverified" in out                     # a failure writes nothing and forgets the pass
    assert not any((tmp_path / ".tsarchive-checks").iterdir())


def test_a_format_6_record_names_its_digest_as_the_footers_not_a_manifest_files(packed):
    # format 6 keeps no manifest.json: its identity is the SHA-256 of windows.parquet's footer (DEVELOPERS.md)
    out = packed["dir"] / "record-digest"
    assert main(["verify", str(packed["arc"]), "--record", str(out), "--quiet"]) == 0
    assert not (packed["arc"] / "manifest.json").exists()
    md = (out / "record.md").read_text(encoding="utf-8")
    assert "manifest SHA-256" not in md and "SHA-256 of the windows.parquet footer" in md
