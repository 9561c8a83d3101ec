"""One file of a batch, as a worker packs it (a local worker process, the main process, or a Dask worker).

:func:`pack_one` never raises for a bad file: it returns an :class:`Outcome`
naming what happened in one line, so the batch goes on.  Its steps:

1. the source's SHA-256;
2. when the archive already exists: skip it if its catalog entry names the
   same source SHA-256, settings and tool version, the archive's manifest
   names the same source and the archive verifies by checksums (member
   SHA-256s and every window's CRC-32); otherwise refuse it unless ``force``;
3. an entry saying "packing" (with the manifest digest of any archive it
   replaces), so that a run killed between pack's commit and the final entry
   is recognised by the next one;
4. :func:`tsarchive.pack` (atomic: the archive appears whole or not at all), with the batch's shared
   models when it has them (:mod:`.shared`);
5. the catalog entry, built from the archive as written.
"""

from __future__ import annotations

import os
import time
from dataclasses import asdict, dataclass
from datetime import datetime, timezone
from pathlib import Path

from ..errors import ArchiveExists, BadInput, TsArchiveError
from .catalog import CHECK_PACKED, CHECK_SUMS, read_entry, write_entry
from .plan import BatchSettings, Job

PACKED, SKIPPED, FAILED = "packed", "already packed", "failed"


@dataclass(frozen=True)
class Outcome:
    """What became of one file: ``status`` is :data:`PACKED`, :data:`SKIPPED` or :data:`FAILED`."""

    rel: str
    source: str
    status: str
    message: str = ""
    ratio: float | None = None
    source_bytes: int = 0
    archive_bytes: int = 0
    elapsed_s: float = 0.0
    model: str = ""          # with shared models: which one this file packed with (Learned.which)

    @property
    def ok(self) -> bool:
        return self.status != FAILED

    def to_dict(self) -> dict:
        return asdict(self)


#: A local worker process's copy of the batch's shared models, handed over once when it starts (:func:`warm`)
#: rather than with every file (an autoencoder's float encoder weighs megabytes).
_worker_learned = None


def warm(threads: int | None = None, learned=None) -> None:
    """A worker process's one-time start: cap its thread pools, keep the batch's shared models (or None) and
    import the packing code once."""
    global _worker_learned
    _worker_learned = learned
    if threads:
        os.environ.setdefault("TSARCHIVE_THREADS", str(threads))
        try:
            from threadpoolctl import threadpool_limits
        except ImportError:      # an optional speed-up: results do not depend on BLAS threads
            pass
        else:
            threadpool_limits(threads)
    import tsarchive.pipeline  # noqa: F401 - paid once per worker, not once per file


def pack_one(job: Job, settings: BatchSettings, out: Path, learned=None) -> Outcome:
    """Pack ``job`` into its archive and catalog entry (see the module doc); never raises for a bad file.
    ``learned``: the batch's shared models (:class:`tsarchive.batch.shared.Learned`), or None: those this
    worker process was started with (:func:`warm`), if any."""
    t0 = time.perf_counter()
    learned = _worker_learned if learned is None else learned
    try:
        return _pack_one(job, settings, Path(out), t0, learned)
    except TsArchiveError as exc:
        message = str(exc)
    except OSError as exc:
        message = f"{exc.strerror or exc} ({exc.filename or job.source}); check the path, permissions and free space"
    except MemoryError:
        message = "out of memory; pack this file alone, or with fewer --jobs"
    except Exception as exc:  # noqa: BLE001 - one file's unforeseen failure must not stop the batch
        message = f"unexpected {type(exc).__name__}: {exc}; please report it with this file"
    return Outcome(job.rel, str(job.source), FAILED, message, elapsed_s=time.perf_counter() - t0)


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def manifest_digest(archive: Path) -> str | None:
    from ..store.inside import identity      # manifest.json's SHA-256, or format 6's footer digest
    return identity(Path(archive))


def _pack_one(job: Job, settings: BatchSettings, out: Path, t0: float, learned) -> Outcome:
    from ..checksum import file_sha256
    from ..store.claim import claim_target

    sha = file_sha256(job.source)
    job.archive.parent.mkdir(parents=True, exist_ok=True)
    # The claim covers the skip check as well as the pack: another run cannot pack the same archive meanwhile,
    # and taking it tidies what a killed run left beside the archive (its claim file and staging folders).
    with claim_target(job.archive):
        return _claimed(job, settings, out, t0, sha, learned)


def _claimed(job: Job, settings: BatchSettings, out: Path, t0: float, sha: str, learned) -> Outcome:
    import tsarchive

    entry = read_entry(out, job.rel)
    before = None
    if os.path.lexists(job.archive):
        why, finished = _why_not_done(job, settings, sha, entry)
        if why is None:
            arc = tsarchive.open(job.archive)
            write_entry(out, job.rel, catalog_entry(arc, job, settings, CHECK_SUMS,
                                                    packed=entry.get("packed_utc") if finished else None))
            return Outcome(job.rel, str(job.source), SKIPPED, "archive verified by checksums", arc.ratio,
                           job.source.stat().st_size, arc.archive_bytes, time.perf_counter() - t0)
        if not settings.force:
            raise ArchiveExists(f"{job.rel} exists but {why}; pass --force to pack it again")
        before = manifest_digest(job.archive)
    write_entry(out, job.rel, {"state": "packing", "archive": job.rel, "source_sha256": sha, "before": before,
                               "settings_sha256": settings.fingerprint(), "tool_version": tsarchive.__version__})
    opts = settings.pack_options()
    if job.rate is not None:
        opts["rate"] = job.rate
    try:
        tsarchive.pack(job.source, job.archive, force=settings.force, model=learned.models if learned else None,
                       **opts)
    except BaseException:
        if entry is not None and entry.get("state") == "packed" and manifest_digest(job.archive) == before:
            write_entry(out, job.rel, entry)        # the archive it describes is still there, unchanged
        raise
    arc = tsarchive.open(job.archive)
    if arc.manifest.get("source", {}).get("sha256") != sha:
        raise BadInput(f"{job.source.name} changed while it was being packed; pack it again once the logger has "
                       "finished writing it")
    write_entry(out, job.rel, catalog_entry(arc, job, settings, CHECK_PACKED))
    return Outcome(job.rel, str(job.source), PACKED, "", arc.ratio, job.source.stat().st_size, arc.archive_bytes,
                   time.perf_counter() - t0, learned.which(c.name for c in arc.channels) if learned else "")


def _why_not_done(job: Job, settings: BatchSettings, sha: str, entry: dict | None) -> tuple[str | None, bool]:
    """(None, finished) when the existing archive is this file packed with these settings and intact, else
    (the reason in words, False).  ``finished``: the entry was completed (not left at "packing")."""
    import tsarchive
    if entry is None:
        return "the catalog has no entry for it (packed by another run or by hand)", False
    if entry.get("settings_sha256") != settings.fingerprint():
        return "it was packed with other settings", False
    if entry.get("tool_version") != tsarchive.__version__:
        return f"it was packed by tsarchive {entry.get('tool_version')}", False
    if entry.get("source_sha256") != sha:
        return "its source has changed since it was packed", False
    digest = manifest_digest(job.archive)
    finished = entry.get("state") == "packed"
    if finished and entry.get("manifest_sha256") != digest:
        return "the archive has changed since it was catalogued", False
    if not finished and (digest is None or entry.get("before") == digest):
        return "an earlier run stopped before packing it", False
    try:
        arc = tsarchive.open(job.archive)
        if arc.manifest.get("source", {}).get("sha256") != sha:
            return "it was packed from another file", False
        rep = tsarchive.verify(arc)
    except TsArchiveError as exc:
        return f"it cannot be read ({exc})", False
    if not rep.ok:
        return f"it fails its checks ({rep.problems[0] if rep.problems else 'checksums differ'})", False
    return None, finished


def catalog_entry(arc, job: Job, settings: BatchSettings, check: str, packed: str | None = None) -> dict:
    """The catalog row of ``arc`` (see :data:`tsarchive.batch.catalog.SCHEMA`), as a JSON-safe entry."""
    import json
    chans = arc.channels
    src = arc.manifest.get("source", {})
    now = _now()
    first = chans[0].start if chans else None
    return {
        "state": "packed", "archive": job.rel, "source_path": str(job.source), "source_name": src.get("name", ""),
        "source_bytes": int(src.get("bytes", 0)), "source_sha256": src.get("sha256", ""),
        "channels": [c.name for c in chans], "units": [c.unit for c in chans],
        "start": None if first is None else first.isoformat(),
        "duration_s": max((float(c.duration) for c in chans), default=0.0),
        "rate_hz": float(chans[0].rate) if chans else None, "n_samples": max((c.n_samples for c in chans), default=0),
        "budgets": [c.budget for c in chans], "eps": [float(c.eps) for c in chans],
        "worst_errors": [float(c.worst_error) for c in chans],
        "worst_used_pct": max((float(c.used_pct) for c in chans), default=0.0),
        "ratio": float(arc.ratio), "raw_bytes": int(arc.raw_bytes), "archive_bytes": int(arc.archive_bytes),
        "check": check, "checked_utc": now, "packed_utc": packed or now,
        "tool_version": arc.manifest.get("tool_version"), "format_version": arc.manifest.get("format_version"),
        "manifest_sha256": manifest_digest(arc.path), "settings": json.dumps(settings.to_dict(), sort_keys=True),
        "settings_sha256": settings.fingerprint(),
    }
