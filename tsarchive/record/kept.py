"""A kept note of a verification, beside the archive (no Textual; no archive-format change).

After a verification, ``tsarchive verify`` (when it passes; a failure removes the note instead), the
app and ``tsarchive demo`` write a small JSON file to
``.tsarchive-checks/<SHA-256 of the archive's manifest.json>.json`` in the archive's folder.
The note names the archive's manifest by its SHA-256, so a repacked or edited archive no
longer matches it and reads as unverified again.  The note is a past finding (when, against
what), shown as such; it is never read as proof that the data files are unchanged since.
Nothing in the archive folder itself is written.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

FOLDER = ".tsarchive-checks"
MANIFEST = "manifest.json"
MAX_BYTES = 4096


@dataclass(frozen=True)
class CheckRecord:
    ok: bool
    compared: bool
    against: str
    when: str  # ISO 8601, UTC
    against_sha256: str = ""  # of the compared file; "" for a checksums-only check or a note of an older tool
    packed_file: bool | None = None  # whether the compared file is the one packed (None: not known)

    @property
    def state(self) -> str:
        return "verified ok" if self.ok else "failed"

    def line(self) -> str:
        """``verified against run.csv (SHA-256 0a1b2c3d4e5f…) on 2026-12-02 17:40 UTC``."""
        when = f"on {self.when[:16].replace('T', ' ')} UTC"
        if not self.compared:
            return f"{'checksums matched' if self.ok else 'failed verification'} (samples not compared) {when}"
        notes = (["not the packed file"] if self.packed_file is False else []) + \
            ([f"SHA-256 {self.against_sha256[:12]}…"] if self.against_sha256 else [])
        sha = f" ({'; '.join(notes)})" if notes else ""
        return f"{'verified' if self.ok else 'failed verification'} against {self.against}{sha} {when}"


def manifest_sha256(archive: Path) -> str | None:
    try:
        from tsarchive.store.inside import identity     # manifest.json's SHA-256, or format 6's footer digest
        return identity(Path(archive))
    except OSError:
        return None


def record_path(archive: Path) -> Path | None:
    sha = manifest_sha256(archive)
    return None if sha is None else Path(archive).parent / FOLDER / f"{sha}.json"


def _against_sha256(archive: Path, report, against) -> str:
    """The compared file's SHA-256: the manifest's when verify found it to be the packed file, else hashed."""
    if against is None or not report.compared:
        return ""
    if report.source_same:
        try:
            from tsarchive.errors import TsArchiveError
            from tsarchive.store.binding import read_manifest
            src = read_manifest(Path(archive)).get("source", {})
            return str(src.get("sha256") or "")
        except (OSError, ValueError, AttributeError, TsArchiveError):
            return ""
    from tsarchive.checksum import file_sha256
    from tsarchive.errors import TsArchiveError
    try:
        return file_sha256(Path(against))
    except (OSError, TsArchiveError):  # a source that went away: the note simply names no digest
        return ""


def write_record(archive: Path, report, against: Path | None) -> Path | None:
    """Keep ``report`` (a :class:`tsarchive.VerifyReport`) for ``archive``; None when it cannot be written.

    A passing checksums-only check does not replace a kept passing comparison with the source: the
    manifest is the same (the note is named by it), so that comparison still stands and says more.
    """
    path = record_path(archive)
    if path is None:
        return None
    earlier = read_record(archive)
    if report.ok and not report.compared and earlier is not None and earlier.ok and earlier.compared:
        return path
    body = {"archive": Path(archive).name, "ok": bool(report.ok), "compared": bool(report.compared),
            "against": Path(against).name if against is not None else "",
            "against_sha256": _against_sha256(archive, report, against),
            "packed_file": report.source_same if report.compared else None,
            "when": datetime.now(timezone.utc).isoformat(timespec="seconds")}
    try:
        path.parent.mkdir(exist_ok=True)
        tmp = path.with_suffix(".part")
        tmp.write_text(json.dumps(body), encoding="utf-8")
        os.replace(tmp, path)  # whole or not at all
    except OSError:
        return None  # a read-only folder: the finding is simply not kept
    return path


def forget_record(archive: Path) -> None:
    """Remove the kept note of ``archive``, if any (``tsarchive verify`` after a failed check: a past pass
    must not outlive it, and a failing verify writes nothing)."""
    path = record_path(archive)
    try:
        if path is not None:
            path.unlink(missing_ok=True)
    except OSError:
        pass  # a read-only folder: report still hashes the members and says DAMAGED


def read_record(archive: Path) -> CheckRecord | None:
    """The kept verification of this exact archive (same manifest bytes), or None."""
    path = record_path(archive)
    try:
        if path is None or path.stat().st_size > MAX_BYTES:
            return None
        d = json.loads(path.read_text(encoding="utf-8"))
        return CheckRecord(ok=d["ok"] is True, compared=d["compared"] is True, against=str(d["against"]),
                           when=str(d["when"]), against_sha256=str(d.get("against_sha256") or ""),
                           packed_file=d.get("packed_file") if isinstance(d.get("packed_file"), bool) else None)
    except (OSError, ValueError, KeyError, TypeError):
        return None  # no record, or not one of ours: unverified
