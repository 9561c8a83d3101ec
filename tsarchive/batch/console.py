"""What ``tsarchive pack`` prints for a batch, and ``tsarchive report FOLDER`` for a catalog.

A batch prints one status line per file as it finishes (on standard output,
or standard error with ``--json`` so that standard output stays one JSON
document), an overall progress line on a terminal's standard error, and a
summary.  ``--quiet`` keeps only the failures and the summary.
"""

from __future__ import annotations

import json
import sys
import time

from ..names import ARCHIVE_SUFFIX
from ..progress_line import ProgressLine
from ..results import Progress
from .catalog import CHECKS, read_catalog
from .plan import BatchPlan, BatchSettings
from .run import BatchSummary, run_batch
from .work import FAILED, PACKED, Outcome


def status_line(o: Outcome, done: int, total: int) -> str:
    """``[  3/120] packed          2024/run.csv.tsarchive  ratio 7.41  1.2 s`` (or the failure's reason)."""
    head = f"[{done:>{len(str(total))}}/{total}] {o.status:<14}"
    if o.status == FAILED:
        return f"{head} {o.rel.removesuffix(ARCHIVE_SUFFIX)}: {o.message}"
    head += f" {o.rel}"
    return f"{head}  ratio {o.ratio:.2f}  {o.elapsed_s:.1f} s" + (f"  {o.model}" if o.model else "")


def summary_text(s: BatchSummary) -> str:
    failed = s.count(FAILED)
    lines = [f"{len(s.outcomes)} file(s) in {s.elapsed_s:.1f} s on {s.where}: {s.count(PACKED)} packed, "
             f"{len(s.outcomes) - s.count(PACKED) - failed} already packed, {failed} failed; "
             f"catalog {s.out / 'catalog.parquet'}"]
    if s.learned is not None:
        lines.insert(0, f"shared model(s) learned from {s.learned.files} file(s) in {s.learned.seconds:.1f} s"
                     + "".join(f"\n  {n}" for n in s.learned.notes))
    if failed:
        lines.append("the failed files are listed above with their reasons; run the same command again after "
                     "fixing them (finished archives are kept and skipped)")
    return "\n".join(lines)


def dry_run_text(plan: BatchPlan) -> str:
    lines = [f"{len(plan.jobs)} recording(s) -> {plan.out}/ (nothing written):"]
    lines.extend(f"  {j.source} -> {j.rel}" for j in plan.jobs)
    return "\n".join(lines)


def pack_many(plan: BatchPlan, settings: BatchSettings, *, jobs: int | None, scheduler: str | None,
              as_json: bool, quiet: bool) -> BatchSummary:
    """Run the batch with the console's status lines and progress line (see the module doc)."""
    lines = sys.stderr if as_json else sys.stdout
    bar = ProgressLine(enabled=False if quiet else None)
    t0 = time.monotonic()

    def on_outcome(o: Outcome, done: int, total: int) -> None:
        if o.status == FAILED or not quiet:
            bar.close()
            print(status_line(o, done, total), file=sys.stderr if o.status == FAILED else lines, flush=True)
        spent = time.monotonic() - t0
        bar(Progress("batch", done, total, f"{done}/{total} files", eta_s=spent / done * (total - done)))

    try:
        summary = run_batch(plan, settings, jobs=jobs, scheduler=scheduler, on_outcome=on_outcome)
    finally:
        bar.close()
    if as_json:
        print(json.dumps({**summary.to_dict(), "settings": settings.to_dict()}, indent=1))
    else:
        print(summary_text(summary))
    return summary


CATALOG_HEADER = ["archive", "channels", "length", "ratio", "% used", "check", "checked (UTC)"]


def catalog_report(folder, as_json: bool) -> tuple[str, bool]:
    """(the catalog as a table or JSON, whether every row's archive is present and checked)."""
    from pathlib import Path
    from ..report import _table
    table = read_catalog(folder)
    rows = table.to_pylist()
    missing = [r["archive"] for r in rows if not (Path(folder) / r["archive"]).is_dir()]
    ok = not missing and all(r["check"] in CHECKS for r in rows)
    if as_json:
        for r in rows:
            for k in ("checked_utc", "packed_utc"):
                r[k] = r[k].isoformat() if r[k] is not None else None
        return json.dumps({"catalog": str(Path(folder) / "catalog.parquet"), "archives": rows,
                           "missing": missing}, indent=1), ok
    cells = [[r["archive"], str(len(r["channels"])), f"{r['duration_s']:.0f} s", f"{r['ratio']:.2f}",
              f"{r['worst_used_pct']:.1f}", r["check"], r["checked_utc"].strftime("%Y-%m-%d %H:%M")]
             for r in rows]
    total_raw, total_arc = sum(r["raw_bytes"] for r in rows), sum(r["archive_bytes"] for r in rows)
    lines = [_table(CATALOG_HEADER, cells), "",
             f"{len(rows)} archive(s); {total_raw} raw bytes -> {total_arc} archive bytes"
             + (f" (ratio {total_raw / total_arc:.2f})" if total_arc else "")]
    lines.extend(f"missing: {m} is in the catalog but not in the folder" for m in missing)
    return "\n".join(lines), ok
