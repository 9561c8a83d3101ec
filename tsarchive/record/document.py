"""A verification record a lab can attach to its files: ``record.json``, ``record.md`` and PNG plots.

``write_verification_record(archive, folder, against=SOURCE)`` verifies the archive (or takes a
report already made), works out each channel's figures (:mod:`.stats`), draws its plots
(:mod:`.plots`) and writes the folder whole or not at all: into a staging folder beside it, renamed
into place at the end.  The folder must not exist yet (or be empty).  Without a source the record
says that only checksums were checked and gives the worst errors recorded when the archive was packed.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import tempfile
from dataclasses import asdict, dataclass
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from ..errors import BadInput
from . import kept, plots
from .markdown import record_markdown
from .stats import RMS_DEFINITION, SNR_DEFINITION, error_figures, segment

CAUTIONS = (
    "Keep the original recordings until the archive has verified against them.",
    "This record is evidence for your lab's own review: defer to your lab's quality system and to the "
    "regulations that apply to your records on whether a lossy archive may stand in for an original.",
)


@dataclass(frozen=True)
class ChannelRecord:
    name: str
    unit: str
    budget: str
    eps: float
    worst_error: float | None
    worst_from: str                 # "compared with the source" | "recorded when packed"
    rms_error: float | None
    snr_db: float | None
    n_compared: int
    ratio_estimate: float
    passed: bool
    plots: dict                     # {"errors": file name, "worst": file name} for a compared channel


@dataclass(frozen=True)
class VerificationRecord:
    written: str
    tool_version: str
    format_version: int | None
    archive: dict
    source: dict
    compared_with: dict | None
    checked: str
    passed: bool
    problems: tuple[str, ...]
    ratio: float
    definitions: dict
    channels: tuple[ChannelRecord, ...]
    cautions: tuple[str, ...] = CAUTIONS

    def to_dict(self) -> dict:
        d = asdict(self)
        d["problems"], d["cautions"] = list(self.problems), list(self.cautions)
        d["channels"] = [{k: _finite(v) for k, v in asdict(c).items()} for c in self.channels]
        return d


def _finite(v):
    """JSON has no NaN or infinity: a non-finite figure (a sample missing on one side) is written as null."""
    return None if isinstance(v, float) and not np.isfinite(v) else v


def write_verification_record(archive, folder, *, against=None, rate: float | None = None,
                              even_if_changed: bool = False, report=None) -> Path:
    """Write the record of ``archive`` (a path or an open Archive) to the new ``folder``; returns it."""
    import tsarchive
    from ..archive import Archive

    folder = check_record_folder(folder)
    arc = archive if isinstance(archive, Archive) else tsarchive.open(archive)
    if report is None:
        report = tsarchive.verify(arc, against=against, rate=rate, even_if_changed=even_if_changed)
    folder.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{folder.name}.staging-", dir=folder.parent))
    mask = os.umask(0)
    os.umask(mask)
    os.chmod(stage, 0o777 & ~mask)  # an ordinary folder once in place (mkdtemp makes it private)
    try:
        rec = _build(arc, report, against, rate, stage)
        (stage / "record.json").write_text(json.dumps(rec.to_dict(), indent=1, allow_nan=False) + "\n",
                                           encoding="utf-8")
        (stage / "record.md").write_text(record_markdown(rec), encoding="utf-8")
        if folder.exists():
            folder.rmdir()          # empty (checked above)
        os.rename(stage, folder)
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    return folder


def check_record_folder(folder) -> Path:
    """Refuse, before any work, a folder that holds something already, or a missing matplotlib."""
    folder = Path(folder)
    if folder.exists() and (not folder.is_dir() or any(folder.iterdir())):
        raise BadInput(f"{folder} already exists and is not an empty folder; choose a new folder for the record")
    plots.require_matplotlib()
    return folder


def _build(arc, report, against, rate, stage: Path) -> VerificationRecord:
    import tsarchive
    from ..checksum import file_sha256
    src = dict(arc.manifest.get("source", {}))
    compared = None
    if report.compared and against is not None:
        p = Path(against)
        compared = {"name": p.name, "bytes": p.stat().st_size, "sha256": file_sha256(p),
                    "is_packed_file": report.source_same}
    figures = _channels(arc, report, _load(arc, against, rate) if compared else None, stage)
    return VerificationRecord(
        written=datetime.now(timezone.utc).isoformat(timespec="seconds"), tool_version=tsarchive.__version__,
        format_version=arc.manifest.get("format_version"),
        archive={"name": arc.path.name, "path": str(arc.path.resolve()), "bytes": arc.archive_bytes,
                 "manifest_sha256": kept.manifest_sha256(arc.path), "written_by": arc.manifest.get("tool_version")},
        source={"name": src.get("name"), "bytes": src.get("bytes"), "sha256": src.get("sha256")},
        compared_with=compared,
        checked="every sample against the source" if compared else "checksums only (samples not compared)",
        passed=bool(report.ok), problems=tuple(report.problems), ratio=float(arc.ratio),
        definitions={"error": "x' - x, reconstruction minus original", "rms_error": RMS_DEFINITION,
                     "snr_db": SNR_DEFINITION, "ratio_estimate": "the channel's share of the archive's bytes "
                     "(shared bytes apportioned by samples); the archive's ratio is exact"},
        channels=tuple(figures))


def _load(arc, against, rate):
    """The source as pack read it (its read options), at ``rate`` or the archive's when it carries none."""
    from ..ingest import ReadOptions, read_recording
    options = ReadOptions.from_dict(arc.manifest.get("read_options") or {})
    own = rate if rate is not None else (arc.channels[0].rate if arc.channels else None)
    try:
        return read_recording(against, rate=rate, options=options)
    except BadInput:
        return read_recording(against, rate=own, options=options)


def _channels(arc, report, rec, stage: Path) -> list[ChannelRecord]:
    checks = {c.name: c for c in report.channels}
    seconds = _seconds(arc) if rec is not None else None
    names = [c.name for c in rec.channels] if rec is not None else []
    out = []
    for j, meta in enumerate(arc.channels):
        check = checks.get(meta.name)
        passed = bool(check is not None and not check.n_bad and not check.bad_checksums and report.ok)
        common = dict(name=meta.name, unit=meta.unit, budget=meta.budget, eps=meta.eps,
                      ratio_estimate=float(meta.ratio), passed=passed)
        if rec is None:
            out.append(ChannelRecord(**common, worst_error=float(meta.worst_error), worst_from="recorded when packed",
                                     rms_error=None, snr_db=None, n_compared=0, plots={}))
            continue
        x = rec.column(names.index(meta.name) if meta.name in names else j)
        xh = arc.read(meta.name)
        fig = error_figures(x, xh)
        files = _plots(stage, j, meta, x, xh, fig, seconds)
        worst = check.worst_error if check is not None and check.worst_error is not None else None
        out.append(ChannelRecord(**common, worst_error=worst, worst_from="compared with the source",
                                 rms_error=None if fig.n_compared == 0 else fig.rms_error, snr_db=fig.snr_db,
                                 n_compared=fig.n_compared, plots=files))
    return out


def _seconds(arc) -> np.ndarray:
    """Seconds of every sample from the first (on the logged time axis)."""
    t = arc.times()
    v = np.asarray(t.values)
    if t.kind == "datetime":
        return (v - v[0]).astype(np.float64) / 1e9 if v.size else v.astype(np.float64)
    return v - v[0] if v.size else v


def _plots(stage: Path, j: int, meta, x, xh, fig, seconds) -> dict:
    stem = f"{j + 1:02d}-" + (re.sub(r"[^A-Za-z0-9_.-]+", "_", meta.name).strip("._") or "channel")
    files = {"errors": f"{stem}-errors.png"}
    plots.error_histogram(stage / files["errors"], fig.errors, meta.eps, meta.name, meta.unit)
    if fig.worst_index >= 0:
        a, b = segment(len(xh), fig.worst_index)
        files["worst"] = f"{stem}-worst.png"
        plots.worst_segment(stage / files["worst"], seconds[a:b], x[a:b], xh[a:b], meta.name, meta.unit,
                            float(seconds[fig.worst_index]))
    return files
