"""The look commands: ``unusual``, ``alike`` and ``glance`` (argument parsing and printing only).

Each asks :mod:`tsarchive.index.look` and says what its answer is based on:
the archive's learned index, one computed on opening from the decoded samples
where the archive keeps none (:mod:`tsarchive.index.derived`), or, for long
channels without one, the fallback the archive itself allows.
"""

from __future__ import annotations

import argparse
import json

import numpy as np

from .errors import BadInput

GLANCE_ROWS = 20


def add_commands(sub) -> None:
    """Register the look commands on the CLI's subparsers."""
    un = sub.add_parser("unusual", help="list the segments of a channel that stand out most (from the index)")
    un.add_argument("archive")
    un.add_argument("--channel", metavar="NAME", help="channel (default: the first)")
    un.add_argument("-k", type=_count, default=20, metavar="N", help="how many to list (default 20)")
    un.add_argument("--json", action="store_true", help="print the ranking as JSON")

    al = sub.add_parser("alike", help="list the segments most like a given one (from the index)")
    al.add_argument("archive")
    al.add_argument("segment", type=_number, help="segment number (as 'unusual' lists them; a window number "
                    "where 'unusual' lists windows)")
    al.add_argument("--channel", metavar="NAME", help="channel (default: the first)")
    al.add_argument("-k", type=_count, default=10, metavar="N", help="how many to list (default 10)")
    al.add_argument("--json", action="store_true", help="print the ranking as JSON")

    gl = sub.add_parser("glance", help="an approximate view of a channel from its codes alone (no full decode)")
    gl.add_argument("archive")
    gl.add_argument("--channel", metavar="NAME", help="channel (default: the first)")
    gl.add_argument("--first", type=_number, default=0, metavar="SAMPLE", help="first sample number (default 0)")
    gl.add_argument("--last", type=_number, metavar="SAMPLE", help="sample number to stop before (default: the end)")
    gl.add_argument("--rows", type=_count, default=GLANCE_ROWS, metavar="N",
                    help=f"lines of the summary (default {GLANCE_ROWS})")
    gl.add_argument("--json", action="store_true", help="print the summary as JSON")


HANDLERS = {"unusual": lambda a: _unusual(a), "alike": lambda a: _alike(a), "glance": lambda a: _glance(a)}


def _number(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if v < 0:
        raise argparse.ArgumentTypeError(f"{text!r} is negative; numbers start at 0")
    return v


def _count(text: str) -> int:
    v = _number(text)
    if v == 0:
        raise argparse.ArgumentTypeError("must be at least 1")
    return v


def _open(path: str):
    from .archive import open_archive
    return open_archive(path)


def _print_ranking(r, as_json: bool, arc) -> None:
    if as_json:
        print(json.dumps({"archive": str(arc.path), **r.to_dict()}, indent=1))
        return
    rate = arc.channel(r.channel).rate
    print(f"{r.channel}: {len(r.rows)} {r.unit}s of {r.size} samples")
    print(f"based on {r.based_on}")
    figure = "score" if r.kind == "unusual" else "distance"
    print(f"{'rank':>4}  {r.unit:>8}  {'from (s)':>12}  {figure:>10}  why")
    for i, row in enumerate(r.rows, 1):
        at = f"{row.start / rate:.6g}" if rate > 0 else "-"
        print(f"{i:>4}  {row.number:>8}  {at:>12}  {row.figure:>10.4g}  {row.why}")


def _unusual(args) -> int:
    from .index.look import unusual
    arc = _open(args.archive)
    _print_ranking(unusual(arc, args.channel, args.k), args.json, arc)
    return 0


def _alike(args) -> int:
    from .index.look import alike
    arc = _open(args.archive)
    _print_ranking(alike(arc, args.segment, args.channel, args.k), args.json, arc)
    return 0


def _glance(args) -> int:
    from .index.look import glance
    arc = _open(args.archive)
    if args.last is not None and args.last <= args.first:
        raise BadInput(f"--last {args.last} is not after --first {args.first}; give a later sample number")
    g = glance(arc, args.channel, args.first, args.last)
    parts = np.array_split(np.arange(len(g.values)), min(args.rows, max(len(g.values), 1)))
    rows = [{"first_sample": g.start + int(p[0]), "samples": int(len(p)), "min": float(g.values[p].min()),
             "mean": float(g.values[p].mean()), "max": float(g.values[p].max())} for p in parts if len(p)]
    if args.json:
        print(json.dumps({"archive": str(arc.path), "channel": g.channel, "approximate": True,
                          "worst_error": g.worst, "based_on": g.based_on, "rows": rows}, indent=1))
        return 0
    print(f"{g.channel}: APPROXIMATE, {len(g.values)} samples from sample {g.start}")
    print(f"based on {g.based_on}")
    print(f"{'from sample':>12}  {'samples':>8}  {'min':>11}  {'mean':>11}  {'max':>11}")
    for r in rows:
        print(f"{r['first_sample']:>12}  {r['samples']:>8}  {r['min']:>11.5g}  {r['mean']:>11.5g}  {r['max']:>11.5g}")
    return 0
