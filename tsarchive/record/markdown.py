"""The verification record as Markdown: identity, outcome, per-channel figures, plots, definitions, cautions."""

from __future__ import annotations


def _num(x) -> str:
    return "—" if x is None else f"{x:.6g}"


def _who(d: dict | None) -> str:
    if not d:
        return "—"
    return f"`{d.get('name') or '(unnamed)'}`, {d.get('bytes')} bytes, SHA-256 `{d.get('sha256') or 'not recorded'}`"


def _digest_name(version) -> str:
    """What the archive's identity digest is a SHA-256 of, by format (DEVELOPERS.md, archive format)."""
    if isinstance(version, int) and version >= 6:
        return "digest (SHA-256 of the windows.parquet footer that holds the manifest)"
    return "manifest SHA-256"


def record_markdown(rec) -> str:
    """``rec``: a :class:`tsarchive.record.document.VerificationRecord`."""
    a = rec.archive
    outcome = "PASSED" if rec.passed else "FAILED"
    lines = [
        f"# Verification record: {a['name']}", "",
        f"**{outcome}**: {rec.checked}.", "",
        "| | |", "| --- | --- |",
        f"| archive | `{a['name']}` ({a['path']}), {a['bytes']} bytes, {_digest_name(rec.format_version)} "
        f"`{a['manifest_sha256']}` |",
        f"| packed from | {_who(rec.source)} |",
        f"| compared with | {_who(rec.compared_with)}"
        + ("" if not rec.compared_with else
           {True: " (the packed file)", False: " (NOT the packed file)", None: ""}[rec.compared_with["is_packed_file"]])
        + " |",
        f"| format | tsarchive format {rec.format_version}, written by tsarchive {a['written_by']} |",
        f"| record | written {rec.written} by tsarchive {rec.tool_version} |",
        f"| ratio | {rec.ratio:.4g} (raw sample bytes / archive bytes) |", "",
        "## Channels", "",
        "| channel | unit | budget | ε | worst error | RMS error | SNR (dB) | ratio~ | result |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    for c in rec.channels:
        worst = _num(c.worst_error) + ("" if c.worst_from == "compared with the source" else " (at packing)")
        lines.append(f"| {c.name} | {c.unit or '—'} | {c.budget} | {_num(c.eps)} | {worst} | {_num(c.rms_error)} "
                     f"| {_num(c.snr_db)} | {c.ratio_estimate:.3g} | {'pass' if c.passed else 'FAIL'} |")
    lines.append("")
    if rec.problems:
        lines += ["## Problems", "", *(f"- {p}" for p in rec.problems), ""]
    plotted = [c for c in rec.channels if c.plots]
    if plotted:
        lines += ["## Plots", ""]
        for c in plotted:
            lines += [f"### {c.name}", "", f"![{c.name}: errors against the budget]({c.plots['errors']})", ""]
            if "worst" in c.plots:
                lines += [f"![{c.name}: around the worst error]({c.plots['worst']})", ""]
    else:
        lines += ["No plots: the samples were not compared with the source (pass the original recording to "
                  "compare every sample).", ""]
    lines += ["## Definitions", "", *(f"- {k}: {v}" for k, v in rec.definitions.items()), "",
              "## Cautions", "", *(f"- {c}" for c in rec.cautions), ""]
    return "\n".join(lines)
