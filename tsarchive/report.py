"""Plain-text and JSON renderings of pack results, archives and verify reports."""

from __future__ import annotations

import math
from dataclasses import asdict
from datetime import datetime, timezone

from .budget import within_budget
from .results import PackResult, VerifyReport


def _fmt(x: float) -> str:
    if x is None:
        return "-"
    if isinstance(x, float) and (math.isinf(x) or math.isnan(x)):
        return str(x)
    return f"{x:.4g}"


def _table(header: list[str], rows: list[list[str]]) -> str:
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(header)]
    line = lambda cells: "  ".join(c.rjust(w) if i else c.ljust(w) for i, (c, w) in enumerate(zip(cells, widths)))
    return "\n".join([line(header), line(["-" * w for w in widths]), *(line(r) for r in rows)])


HEADER = ["channel", "unit", "budget", "eps", "worst error", "% used", "ratio~", "bits/sample~"]
USED_NOTE = ("% used: the worst error as a share of the budget; near 100 is the aim (the whole budget spent on "
             "saving space, never exceeded)\n"
             "~ estimates: a channel's ratio and bits/sample charge it its own payload plus a share of the bytes "
             "all channels share (manifest, framing, model); the archive's ratio below is exact")


def pack_table(res: PackResult) -> str:
    rows = [[c.name, c.unit or "-", c.budget, _fmt(c.eps), _fmt(c.worst_error), f"{c.used_pct:.1f}",
             f"{c.ratio:.2f}", f"{c.bits_per_sample:.3f}"] for c in res.channels]
    state = "all samples within budget" if res.within_budget else "OVER BUDGET"
    return "\n".join([
        _table(HEADER, rows), USED_NOTE, "",
        f"archive {res.archive}: {res.archive_bytes} bytes; raw samples {res.raw_bytes} bytes; "
        f"ratio {res.ratio:.2f}; source file {res.source_bytes} bytes; {res.elapsed_s:.1f} s; {state} "
        f"(checked by decoding the archive)"])


def _written_utc(arc) -> str | None:
    """When the archive was written: stored by archives of earlier versions, else its manifest's file time
    (archives carry no clock reading, so that packing the same input twice gives the same bytes)."""
    if arc.manifest.get("created_utc"):
        return str(arc.manifest["created_utc"])
    try:
        t = (arc.path / ("manifest.json" if arc.format_version < 6 else "windows.parquet")).stat().st_mtime
    except (OSError, TypeError):
        return None
    return datetime.fromtimestamp(t, timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def identity(arc) -> dict:
    """What a lab system files with a result: the archive, its source, the tools and the channels' units and start."""
    from .version import __version__
    first = arc.channels[0].start if arc.channels else None
    return {"archive": str(arc.path.resolve()), "source": dict(arc.manifest.get("source", {})),
            "format_version": arc.manifest.get("format_version"), "written_by": arc.manifest.get("tool_version"),
            "read_by": __version__, "start": None if first is None else first.isoformat(),
            "times": arc.timeline.describe(),
            "channels": [{"name": c.name, "unit": c.unit, "rate": c.rate, "n_samples": c.n_samples}
                         for c in arc.channels]}


def archive_dict(arc) -> dict:
    """The archive's facts; its members are hashed first, and the budget is claimed only for intact members."""
    from .record.kept import read_record
    from .store.members import member_problems
    problems = member_problems(arc.path, arc.members)
    kept = read_record(arc.path)
    return {
        "archive": str(arc.path), "source": arc.manifest.get("source", {}),
        "created_utc": _written_utc(arc), "tool_version": arc.manifest.get("tool_version"),
        "format_version": arc.manifest.get("format_version"), "window": arc.window,
        "archive_bytes": arc.archive_bytes, "raw_bytes": arc.raw_bytes, "ratio": arc.ratio,
        "bound": arc.bound, "problems": problems,
        "within_budget": None if problems else all(within_budget(c.worst_error, c.eps) for c in arc.channels),
        "times": arc.timeline.describe(), "notes": list(arc.notes), "identity": identity(arc),
        "last_check": None if kept is None else {**asdict(kept), "line": kept.line()},
        "channels": [{"name": c.name, "unit": c.unit, "rate": c.rate, "n_samples": c.n_samples,
                      "duration_s": c.duration, "dtype": c.dtype, "budget": c.budget, "eps": c.eps,
                      "decimals": c.decimals, "worst_error": c.worst_error, "used_pct": c.used_pct,
                      "ratio": c.ratio, "bits_per_sample": c.bits_per_sample, "exceptions": c.n_exceptions,
                      "predictors": dict(c.modes), "note": c.note} for c in arc.channels],
    }


def archive_table(arc, d: dict | None = None) -> str:
    d = archive_dict(arc) if d is None else d
    rows = [[c["name"], c["unit"] or "-", c["budget"], _fmt(c["eps"]), _fmt(c["worst_error"]),
             f"{c['used_pct']:.1f}", f"{c['ratio']:.2f}", f"{c['bits_per_sample']:.3f}"] for c in d["channels"]]
    src = d["source"]
    first = arc.channels[0] if arc.channels else None
    return "\n".join([
        f"archive {d['archive']} (format {d['format_version']}" + ("" if d["bound"] else ", manifest not bound")
        + f", written {d['created_utc']} by tsarchive {d['tool_version']})",
        f"source {src.get('name', '?')}: {src.get('bytes', 0)} bytes, sha256 {src.get('sha256', '')[:16]}…",
        f"{len(rows)} channel(s)" + (f" at {first.rate:g} Hz, {first.duration:g} s" if first else ""),
        arc.timeline.describe(), *(f"logger note: {s}" for s in arc.notes),
        "", _table(HEADER, rows), USED_NOTE, *[f"note: {c['name']}: {c['note']}" for c in d["channels"] if c["note"]], "",
        *[f"problem: {p}" for p in d["problems"]],
        "last check: " + (d["last_check"]["line"] if d["last_check"] else "unverified (no verification kept beside "
                          "this archive; run tsarchive verify ARCHIVE --against SOURCE)"),
        f"ratio {d['ratio']:.2f} ({d['raw_bytes']} raw bytes -> {d['archive_bytes']} archive bytes); "
        + {True: "within budget (member checksums match)", False: "OVER BUDGET",
           None: "DAMAGED: the errors above are not trustworthy; run tsarchive verify"}[d["within_budget"]]])


#: First words of verify's last line: every sample compared and within budget (exit 0), checksums only
#: (exit 0), something wrong (exit 1).
VERIFY_PASSED, VERIFY_CHECKSUMS, VERIFY_FAILED = "All within budget:", "Checksums match:", "FAILED:"


def _channel_line(c) -> str:
    """One channel's outcome in words, with its figures."""
    bound = "lossless" if c.eps == 0 else f"±{_fmt(c.eps)}"
    if c.worst_error is None:  # nothing compared: only the stored checksums speak
        state = (f"checksum differs in window(s) {', '.join(map(str, c.bad_checksums))}" if c.bad_checksums
                 else "checksums match (samples not compared)")
        return f"{c.name}: {state}"
    share = f", {100 * c.worst_error / c.eps:.1f} % of the budget" if c.eps > 0 else ""
    if c.n_bad:
        beyond = "differ from the original (lossless)" if c.eps == 0 else f"beyond {bound}"
        state = (f"out of budget: {c.n_bad} sample(s) {beyond} in window(s) "
                 f"{', '.join(map(str, c.bad_windows))}; worst error {_fmt(c.worst_error)}")
    else:
        state = f"within budget: worst error {_fmt(c.worst_error)} of {bound}{share}"
    if c.bad_checksums:
        state += f"; checksum differs in window(s) {', '.join(map(str, c.bad_checksums))}"
    return f"{c.name}: {state}"


def verify_text(rep: VerifyReport) -> str:
    """``verify``'s report: the source check, one line per channel, problems, and the outcome."""
    lines = [f"source: {rep.source_check}"] if rep.source_check else []
    lines.extend(_channel_line(c) for c in rep.channels)
    lines.extend(f"problem: {p}" for p in rep.problems)
    if not rep.ok:
        lines.append(f"{VERIFY_FAILED} see the problems above")
    elif rep.compared:
        same = " (but the compared file is not the one that was packed)" if rep.source_same is False else ""
        lines.append(f"{VERIFY_PASSED} every sample within its budget and every checksum matches{same}")
    else:
        lines.append(f"{VERIFY_CHECKSUMS} every window decodes to its stored checksum")
        lines.append("(samples not compared; pass --against SOURCE to compare every sample with the original)")
    return "\n".join(lines)
