"""Figures the app shows that combine several library values (no Textual, no codec logic).

Everything here is arithmetic on fields the library already reports
(``ChannelMeta``, ``WindowTable``, ``VerifyReport``); nothing is decoded or recomputed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tsarchive.budget import within_budget

UNVERIFIED, VERIFIED_OK, FAILED = "unverified", "verified ok", "failed"
USED_HELP = ("Used: the worst error as a share of the budget. Near 100 % is the aim: the whole budget is "
             "spent on saving space, and never exceeded")


def archive_duration(channels) -> float | None:
    return max((float(ch.duration) for ch in channels), default=None)


def over_budget(channels) -> list[str]:
    """Names of channels whose stored worst error exceeds their budget."""
    return [ch.name for ch in channels if not within_budget(ch.worst_error, ch.eps)]


def window_at(starts: np.ndarray, second: float) -> int:
    """Row of the window containing ``second`` (``starts`` ascending, in seconds)."""
    row = int(np.searchsorted(starts, second, side="right")) - 1
    return min(max(row, 0), max(len(starts) - 1, 0))


@dataclass(frozen=True)
class CheckLines:
    """What the Contents screen's check panel says about a :class:`VerifyReport`."""

    state: str
    headline: str
    details: tuple[str, ...]


def check_lines(report, source_name: str | None, window_starts: dict[str, np.ndarray] | None = None) -> CheckLines:
    """Plain sentences for a report; failing windows are named with their start time."""
    window_starts = window_starts or {}
    details: list[str] = [report.source_check] if getattr(report, "source_same", None) is False else []
    if report.ok and getattr(report, "source_same", None) is not False:
        against = (f"every sample was compared with {source_name} and lies within its budget"
                   if report.compared else "no original was at hand, so samples were not compared")
        return CheckLines(VERIFIED_OK, f"Verified ok: checksums match; {against}.", ())
    for ch in report.channels:
        bad = tuple(ch.bad_windows) + tuple(ch.bad_checksums)
        if ch.n_bad == 0 and not bad:
            continue
        starts = window_starts.get(ch.name)
        names = []
        for w in sorted(set(bad))[:8]:
            if starts is not None and 0 <= w < len(starts):
                names.append(f"#{w} (at {starts[w]:.2f} s)")
            else:
                names.append(f"#{w}")
        more = f" and {len(set(bad)) - 8} more" if len(set(bad)) > 8 else ""
        details.append(f"{ch.name}: {ch.n_bad} samples over its budget {ch.eps:g}; "
                       f"failing windows {', '.join(names) or 'none named'}{more}")
    details.extend(report.problems)
    head = "Verification FAILED" + ("" if report.checksums_ok else " (checksums do not match)")
    return CheckLines(FAILED, head + ": keep the original recording; do not rely on this archive.", tuple(details))
