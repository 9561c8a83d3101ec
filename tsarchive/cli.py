"""Command line: parses arguments and hands off to library functions.

Errors derived from :class:`TsArchiveError` (and bad arguments) print one
line on stderr and exit with code 2; ``verify`` exits 1 when the archive
fails a check, ``report`` when a member's SHA-256 differs from the manifest.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from .budget import DEFAULT_SPEC
from .errors import BadInput, TsArchiveError

CAUTION = ("Caution: lossy archiving of measurement records can break a lab's quality or retention rules. "
           "Keep the originals until the archive verifies, and follow your lab's quality system and the "
           "regulations that apply.")


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, exit 2
        raise BadInput(f"{message}; see '{self.prog} --help'")


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="tsarchive", description="Error-bounded archives of data-logger recordings. "
                "With no command, opens the terminal app in the current folder.", epilog=CAUTION)
    sub = p.add_subparsers(dest="command", parser_class=_Parser)

    pk = sub.add_parser("pack", help="pack a recording into an archive", epilog=CAUTION)
    pk.add_argument("source", help="recording: .npy (needs --rate), .csv or .parquet")
    pk.add_argument("-o", "--output", required=True, metavar="ARCHIVE", help="archive folder to write (e.g. run.tsa)")
    pk.add_argument("--budget", default=DEFAULT_SPEC, metavar="SPEC",
                    help=f"error budget per channel: 0.02 (absolute, channel units), 0.1%% (of the channel's "
                         f"range), lossless, or per channel temp=0.05,accel=0.1%% (default: {DEFAULT_SPEC.replace('%', '%%')})")
    pk.add_argument("--rate", type=float, metavar="HZ", help="sample rate (required for .npy)")
    pk.add_argument("--window", type=int, metavar="N",
                    help="samples per window (default: 1024 to 8192, whichever is estimated smallest; "
                         "1024 with --code-size K > 0)")
    pk.add_argument("--code-size", type=int, metavar="K",
                    help="autoencoder code length per window (default: auto = 8, and the autoencoder is kept only "
                         "where it saves more than its weights and codes cost; an explicit K always keeps it, "
                         "for browsing by codes; 0 = none)")
    pk.add_argument("--force", action="store_true", help="replace an existing archive")
    pk.add_argument("--json", action="store_true", help="print the result as JSON")

    up = sub.add_parser("unpack", help="decode an archive (or a time range) to .npy, .csv or .parquet")
    up.add_argument("archive")
    up.add_argument("-o", "--output", required=True, metavar="OUT", help="output file: .npy, .csv or .parquet")
    up.add_argument("--channels", metavar="A,B", help="comma-separated channel names (default: all)")
    up.add_argument("--start", metavar="T", help="seconds from the recording start, or ISO 8601")
    up.add_argument("--end", metavar="T", help="seconds from the recording start, or ISO 8601")

    vf = sub.add_parser("verify", help="check an archive's checksums, and every sample against its source")
    vf.add_argument("archive")
    vf.add_argument("--against", metavar="SOURCE", help="the original recording to compare with")
    vf.add_argument("--json", action="store_true", help="print the report as JSON")

    rp = sub.add_parser("report", help="show an archive's channels, budgets, errors and ratios")
    rp.add_argument("archive")
    rp.add_argument("--json", action="store_true", help="print the report as JSON")

    dm = sub.add_parser("demo", help="pack and verify the bundled sample streams, then open the app on them")
    dm.add_argument("--out", default="demo_archives", metavar="DIR", help="folder for the archives (default demo_archives)")
    dm.add_argument("--samples", metavar="DIR", help="folder of recordings (default: sample_streams/)")
    dm.add_argument("--budget", default=DEFAULT_SPEC, metavar="SPEC", help=f"budget (default {DEFAULT_SPEC.replace('%', '%%')})")
    dm.add_argument("--no-app", action="store_true", help="do not open the app afterwards")

    br = sub.add_parser("browse", help="open the terminal app on an archive or a folder")
    br.add_argument("path", nargs="?", default=".")
    return p


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    try:
        args = _parser().parse_args(argv)
        if args.command is None:
            return _app(Path("."))
        return {"pack": _pack, "unpack": _unpack, "verify": _verify, "report": _report, "demo": _demo,
                "browse": lambda a: _app(Path(a.path))}[args.command](args)
    except TsArchiveError as exc:
        print(f"tsarchive: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("tsarchive: interrupted; nothing was written", file=sys.stderr)
        return 2
    except OSError as exc:  # disk full, permissions: still one line and exit 2
        print(f"tsarchive: error: {exc.strerror or exc} ({exc.filename or ''}); check the path and free space",
              file=sys.stderr)
        return 2


def _pack(args) -> int:
    from .pipeline import pack
    res = pack(args.source, args.output, args.budget, rate=args.rate, window=args.window,
               code_size=args.code_size, force=args.force)
    if args.json:
        print(json.dumps(res.to_dict(), indent=1))
        return 0
    from .report import pack_table
    print(pack_table(res))
    return 0


def _unpack(args) -> int:
    from .store.reader import open_archive
    from .timespec import parse_time
    arc = open_archive(args.archive)
    arc.check_members()                     # a full unpack reads every member anyway; hashing costs little
    start0 = arc.channels[0].start if arc.channels else None
    start = None if args.start is None else parse_time(args.start, start0)
    end = None if args.end is None else parse_time(args.end, start0)
    chans = None if not args.channels else [c.strip() for c in args.channels.split(",") if c.strip()]
    out = arc.export(args.output, channels=chans, start=start, end=end)
    print(f"wrote {out}")
    return 0


def _verify(args) -> int:
    from .verifier import verify_archive
    rep = verify_archive(args.archive, against=args.against)
    if args.json:
        print(json.dumps(rep.to_dict(), indent=1))
    else:
        from .report import verify_text
        print(verify_text(rep))
    return 0 if rep.ok else 1


def _report(args) -> int:
    from .report import archive_dict, archive_table
    from .store.reader import open_archive
    arc = open_archive(args.archive)
    d = archive_dict(arc)
    print(json.dumps(d, indent=1) if args.json else archive_table(arc, d))
    return 1 if d["problems"] else 0


def _demo(args) -> int:
    from .demo import run_demo
    print(CAUTION)
    results = run_demo(args.out, args.samples, args.budget)
    ok = all(rep.ok for _, rep in results)
    print(f"\n{len(results)} archive(s) in {args.out}/: " + ("all verified against their sources" if ok else "SOME FAILED"))
    if ok and not args.no_app and sys.stdout.isatty() and sys.stdin.isatty():
        return _app(Path(args.out))
    return 0 if ok else 1


def _app(path: Path) -> int:
    try:
        from .app import run_app
    except ImportError as exc:
        raise BadInput(f"the terminal app is unavailable ({exc}); install tsarchive with its dependencies") from None
    return run_app(path) or 0


if __name__ == "__main__":
    raise SystemExit(main())
