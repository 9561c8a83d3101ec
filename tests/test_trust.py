"""Archives that detect every edit, and packs that survive each other and kill -9.

Outside references: SHA-256 is FIPS 180-4 (hashlib); flock(2) and renameat2(2)
are the Linux man pages' semantics.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import tsarchive
from tsarchive.cli import main
from tsarchive.errors import ArchiveCorrupt, ArchiveExists
from tsarchive.store import schema as S
from tsarchive import verify as verify_archive

from crafting import copy, manifest, pack_small, snapshot, write_manifest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def arc(tmp_path_factory):
    return pack_small(tmp_path_factory.mktemp("trust"))


def _cli(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


# ---------------------------------------------------------------- the binding

def test_doubled_eps_in_the_manifest_fails_a_checksum_only_verify(arc, tmp_path, capsys):
    # eps doubled where format 5 on holds it (the grid; formats 3 and 4 also beside it, with the share of the
    # budget used), the manifest stored back without its digest (format 6: the footer's): only the binding
    # can notice.
    a = copy(arc, tmp_path, "eps.tsa")
    m = manifest(a)
    for ch in m["channels"]:
        ch["grid"]["eps"] *= 2
    write_manifest(a, m, seal=False)
    code, out, _ = _cli(capsys, "verify", a)
    assert code == 1 and "All within budget" not in out and "was edited or damaged" in out
    code, out, err = _cli(capsys, "report", a)
    assert code == 2 and "within budget" not in out and "manifest or footer in windows.parquet was edited" in err
    code, _, err = _cli(capsys, "unpack", a, "-o", tmp_path / "x.npy")
    assert code == 2 and not (tmp_path / "x.npy").exists()


def test_one_digit_rate_edit_is_refused_by_report(arc, tmp_path, capsys):
    a = copy(arc, tmp_path, "rate.tsa")
    m = manifest(a)
    assert m["channel_defaults"]["rate"] == 200.0          # the channels' shared rate
    m["channel_defaults"]["rate"] = 800.0
    write_manifest(a, m, seal=False)
    code, out, err = _cli(capsys, "report", a)
    assert code == 2 and "800" not in out and err.count("\n") == 1 and "was edited" in err
    with pytest.raises(ArchiveCorrupt):
        tsarchive.open(a)


def test_report_does_not_claim_the_budget_for_damaged_data(arc, tmp_path, capsys):
    # Flip one byte in the middle of windows.parquet (same size): report used to read only the manifest.
    a = copy(arc, tmp_path, "data.tsa")
    p = a / S.WINDOWS
    b = bytearray(p.read_bytes())
    b[len(b) // 3] ^= 0x01
    p.write_bytes(bytes(b))
    code, out, _ = _cli(capsys, "report", a)
    assert code == 1 and "within budget" not in out and "SHA-256 differs" in out and "DAMAGED" in out
    code, out, _ = _cli(capsys, "report", a, "--json")
    assert code == 1 and json.loads(out)["within_budget"] is None


def _digit_edits(text: str):
    """Every 3rd single-digit edit (d -> (d + 1) mod 10) of the manifest's text."""
    for i, c in enumerate(text):
        if c.isdigit() and i % 3 == 0:
            yield i, text[:i] + str((int(c) + 1) % 10) + text[i + 1:]


def _same_json(a: str, b: str) -> bool:
    try:
        return json.loads(a) == json.loads(b)
    except ValueError:
        return False


def test_fuzz_single_digit_edits_of_the_manifest_are_detected(arc, tmp_path):
    # Formats 6 and 7 keep the manifest compressed in windows.parquet's footer under the footer's SHA-256: each edit
    # is stored back (recompressed, the digest as it was) and must be refused when the archive is opened.
    a = copy(arc, tmp_path, "fuzz.tsa")
    original = json.dumps(manifest(a), separators=(",", ":"))
    n = same = 0
    for i, edited in _digit_edits(original):
        try:
            value = json.loads(edited)
        except ValueError:
            continue
        if value.get("format_version") != S.FORMAT_VERSION:
            continue                   # a newer version is refused as such (test_crafted.py: newer-version)
        if _same_json(edited, original):
            same += 1                  # the same value (the last of 17 digits of a double): no edit
            continue
        write_manifest(a, value, seal=False)
        n += 1
        with pytest.raises(ArchiveCorrupt):      # the footer digest (or the version first, or a bad field)
            tsarchive.open(a)
        try:
            assert not verify_archive(a).ok     # verify reports the damage ...
        except ArchiveCorrupt:
            pass                                # ... or refuses a manifest it cannot understand
    assert n > 100 and same < 10


def test_an_unbound_version_3_archive_is_read_and_says_so(capsys):
    # The committed golden archive predates the binding: it is read, and report says it is not bound.
    code, out, _ = _cli(capsys, "report", ROOT / "tests" / "golden" / "v3" / "golden.tsa")
    assert code == 0 and "format 3, manifest not bound" in out and "within budget" in out


def test_binding_is_required_from_its_version_on(tmp_path, monkeypatch):
    a = copy(ROOT / "tests" / "golden" / "v3" / "golden.tsa", tmp_path, "g4.tsa")
    m = manifest(a)
    m["format_version"] = S.BOUND_FROM_VERSION
    write_manifest(a, m)
    monkeypatch.setattr(S, "FORMAT_VERSION", S.BOUND_FROM_VERSION)
    with pytest.raises(ArchiveCorrupt, match="does not carry the manifest's digest"):
        tsarchive.open(a)


# ---------------------------------------------------------------- claiming the target

_HOLD = """
import sys
from tsarchive.store.claim import claim_target
with claim_target(sys.argv[1]):
    print("held", flush=True)
    sys.stdin.readline()
"""


def test_a_second_pack_to_a_claimed_target_is_refused(tmp_path, capsys):
    target = tmp_path / "busy.tsa"
    holder = subprocess.Popen([sys.executable, "-c", _HOLD, str(target)], stdin=subprocess.PIPE,
                              stdout=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        assert holder.stdout.readline().strip() == "held"
        np.save(tmp_path / "s.npy", np.zeros(500, np.float32))
        code, _, err = _cli(capsys, "pack", tmp_path / "s.npy", "-o", target, "--rate", 1, "--code-size", 0)
        assert code == 2 and "being written by another tsarchive run" in err
        assert not target.exists()
    finally:
        holder.communicate("\n", timeout=30)
    assert holder.returncode == 0 and not list(tmp_path.glob(".*"))


def test_two_packs_racing_to_one_target_one_wins(tmp_path):
    # Started together without --force: exactly one may write the target (the other is refused, exit 2).
    src = tmp_path / "s.npy"
    np.save(src, np.sin(np.arange(20000) / 7.0).astype(np.float32))
    argv = [sys.executable, "-m", "tsarchive", "pack", str(src), "-o", str(tmp_path / "race.tsa"), "--rate", "100",
            "--window", "64", "--code-size", "0", "--budget", "0.1%", "--json"]
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    procs = [subprocess.Popen(argv, cwd=ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for _ in range(2)]
    results = [p.communicate(timeout=120) + (p.returncode,) for p in procs]
    assert sorted(r[2] for r in results) == [0, 2], results
    winner = next(r for r in results if r[2] == 0)
    assert json.loads(winner[0])["archive_bytes"] == sum(p.stat().st_size for p in (tmp_path / "race.tsa").iterdir())
    assert verify_archive(tmp_path / "race.tsa").ok and not list(tmp_path.glob(".*"))


def test_commit_never_replaces_an_archive_that_appeared_meanwhile(arc, tmp_path):
    from tsarchive.store.writer import ArchiveWriter
    target = tmp_path / "late.tsa"
    with pytest.raises(ArchiveExists, match="appeared while packing"):
        with ArchiveWriter(target, []) as w:
            w.finalize({"format": "tsarchive"})
            copy(arc, tmp_path, "late.tsa")        # another program put an archive there
            w.commit()
    assert verify_archive(target).ok and not list(tmp_path.glob(".*"))


def test_force_onto_a_symlinked_archive_is_refused_and_leaves_nothing(arc, tmp_path, capsys):
    real = copy(arc, tmp_path, "real.tsa")
    link = tmp_path / "link.tsa"
    link.symlink_to(real, target_is_directory=True)
    before = snapshot(tmp_path)
    np.save(tmp_path / "s.npy", np.zeros(500, np.float32))
    code, _, err = _cli(capsys, "pack", tmp_path / "s.npy", "-o", link, "--rate", 1, "--code-size", 0, "--force")
    assert code == 2 and "symbolic link" in err
    (tmp_path / "s.npy").unlink()
    assert snapshot(tmp_path) == before


def test_leftovers_of_killed_runs_are_cleaned_and_an_aside_archive_restored(arc, tmp_path):
    from tsarchive.store.claim import claim_target
    target = tmp_path / "r.tsa"
    copy(arc, tmp_path, ".r.tsa.replaced-0000dead")           # killed between the fallback's two renames
    (tmp_path / ".r.tsa.staging-0000dead").mkdir()
    (tmp_path / ".r.tsa.staging-0000dead" / "windows.parquet").write_bytes(b"partial")
    (tmp_path / ".other.tsa.staging-00000001").mkdir()        # another target's: not ours to remove
    with claim_target(target):
        pass
    assert verify_archive(target).ok
    assert sorted(p.name for p in tmp_path.iterdir()) == [".other.tsa.staging-00000001", "r.tsa"]


# ---------------------------------------------------------------- kill -9

_KILL = """
import os, signal, sys
import tsarchive.store.writer as writer
try:
    import tsarchive.store.claim as claim
except ImportError:                            # a tsarchive from before the claim: the writer renames itself
    claim = writer
point = sys.argv[3]
def die(*a, **k):
    os.kill(os.getpid(), signal.SIGKILL)
if point == "encoding":
    writer.ArchiveWriter.add_windows = die
elif point == "staged":
    writer.ArchiveWriter.commit = die
elif point == "exchanged":
    claim.shutil.rmtree = die                  # after the exchange, before the old archive is removed
elif point == "aside":
    claim._renameat2 = lambda *a: False        # the fallback: old archive aside, then killed
    real = os.rename
    def rename(src, dst):
        real(src, dst)
        if ".replaced-" in str(dst):
            die()
    claim.os.rename = rename
import tsarchive
tsarchive.pack(sys.argv[1], sys.argv[2], "1%", rate=100.0, window=64, code_size=0, force=True)
"""


def test_kill_9_at_any_point_leaves_the_old_archive_or_none(tmp_path):
    import hashlib
    src = tmp_path / "s.npy"
    np.save(src, np.sin(np.arange(4000) / 7.0).astype(np.float32))
    points = ["encoding", "staged", "exchanged", "aside"]
    for p in points:
        d = tmp_path / p
        d.mkdir()
        assert main(["pack", str(src), "-o", str(d / "old.tsa"), "--rate", "100", "--window", "64",
                     "--code-size", "0", "--budget", "0.1%"]) == 0
    old = {p: hashlib.sha256((tmp_path / p / "old.tsa" / S.WINDOWS).read_bytes()).hexdigest() for p in points}
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    procs = {p: subprocess.Popen([sys.executable, "-c", _KILL, str(src), str(tmp_path / p / "old.tsa"), p],
                                 cwd=ROOT, env=env, stderr=subprocess.PIPE) for p in points}
    for p, proc in procs.items():
        proc.wait(timeout=120)
        assert proc.returncode == -9, (p, proc.stderr.read())
    for p in points:
        target = tmp_path / p / "old.tsa"
        if p != "aside":                       # renameat2 exchange: the target always holds an archive
            assert verify_archive(target).ok
        else:                                  # the fallback's gap: old archive aside, none at the target
            assert not target.exists() and list(target.parent.glob(".old.tsa.replaced-*"))
        from tsarchive.store.claim import claim_target
        with claim_target(target):             # what the next pack to this target does first
            pass
        assert verify_archive(target).ok
        # killed after the exchange: the new archive (1 %) was already in place; else the old one (0.1 %)
        assert manifest(target)["budget_spec"] == ("1%" if p == "exchanged" else "0.1%"), p
        if p != "exchanged":
            assert hashlib.sha256((target / S.WINDOWS).read_bytes()).hexdigest() == old[p], p
        assert sorted(x.name for x in target.parent.iterdir()) == ["old.tsa"], p


def test_byte_flips_in_any_member_are_caught_or_harmless(tmp_path):
    # One flipped bit at evenly spaced places of each member: verify always fails; the reader either refuses
    # (ArchiveCorrupt) or returns exactly the original samples (a flip in a column the CRC does not cover).
    from conftest import make_signal
    x = make_signal(3000).astype(np.float32)
    x[100, 0] = np.nan                                  # a verbatim sample: exceptions.parquet exists
    np.save(tmp_path / "s.npy", x)
    arc = tmp_path / "f.tsa"
    tsarchive.pack(tmp_path / "s.npy", arc, "0.5%", rate=200.0, window=64, code_size=2, train_seconds=1,
                   segment=16)  # segment given: a recording this short gets no index within its byte budget
    assert {p.name for p in arc.iterdir()} == {S.WINDOWS, S.EXCEPTIONS, S.MODEL, "index.zst"}   # format 6
    original = {k: v.copy() for k, v in tsarchive.open(arc).read_many(workers=1).items()}
    for name in [p.name for p in arc.iterdir() if p.name != S.MANIFEST]:
        p = arc / name
        data = p.read_bytes()
        for at in range(0, len(data), max(1, len(data) // 24)):
            flipped = bytearray(data)
            flipped[at] ^= 0x10
            p.write_bytes(bytes(flipped))
            try:       # format 6: a flip that garbles windows.parquet's footer takes the manifest with it
                assert not verify_archive(arc).ok, (name, at)
            except ArchiveCorrupt:
                continue
            try:
                got = tsarchive.open(arc).read_many(workers=1)
            except ArchiveCorrupt:
                continue
            for k, v in original.items():       # bit for bit (NaN included), numpy's byte view
                assert got[k].tobytes() == v.tobytes(), (name, at)
        p.write_bytes(data)
    assert verify_archive(arc).ok
