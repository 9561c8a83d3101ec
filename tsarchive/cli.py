"""Command line: parses arguments and hands off to library functions.

Errors derived from :class:`TsArchiveError` (and bad arguments) print one
line on stderr and exit with code 2; ``verify`` exits 1 when the archive
fails a check (also when the compared file is not the one that was packed), ``report`` when a
member's SHA-256 differs from the manifest.
When the reader of our output goes away (``tsarchive report X | head``),
the command stops quietly with the shell's code for that, 141 (128 + SIGPIPE).
The terminal app (``browse``, or no command) needs a terminal on stdin and
stdout; without one it refuses with exit 2.
"""

from __future__ import annotations

import argparse
import importlib
import json
import os
import sys
from pathlib import Path

from .budget import DEFAULT_SPEC
from .errors import BadInput, TsArchiveError

CAUTION = ("Caution: lossy archiving of measurement records can break a lab's quality or retention rules. "
           "Keep the originals until the archive verifies, and follow your lab's quality system and the "
           "regulations that apply.")

#: Exit status after the reader of stdout went away: 128 + SIGPIPE (13), as the shell reports a killed writer.
BROKEN_PIPE_EXIT = 141


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, exit 2
        raise BadInput(f"{message}; see '{self.prog} --help'")


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="tsarchive", description="Error-bounded archives of data-logger recordings. "
                "With no command, opens the terminal app in the current folder.", epilog=CAUTION)
    p.add_argument("--version", action="store_true", help="print tsarchive's version and stop")
    sub = p.add_subparsers(dest="command", parser_class=_Parser)

    pk = sub.add_parser("pack", help="pack a recording (or many: folders, patterns) into archives", epilog=CAUTION)
    pk.add_argument("source", nargs="+", help="recording: .csv/.txt/.tsv/.dat, .parquet, .wav, .edf/.bdf, or .npy "
                    "(needs --rate); or several, folders (searched below) and quoted patterns such as 'lab/*.csv', "
                    "packed one archive each into --into FOLDER")
    pk.add_argument("-o", "--output", metavar="ARCHIVE", help="archive folder to write (e.g. run.tsarchive)")
    _batch_options(pk)
    pk.add_argument("--budget", default=DEFAULT_SPEC, metavar="SPEC",
                    help=f"error budget per channel: 0.02 (absolute, channel units), 0.1%% (of the channel's "
                         f"range), lossless, or per channel temp=0.05,accel=0.1%% (default: {DEFAULT_SPEC.replace('%', '%%')})")
    pk.add_argument("--rate", type=float, metavar="HZ",
                    help="sample rate, for sources without a time column (.npy); beside a time column it must "
                         "agree with it; for EDF it picks the signals recorded at that rate")
    _source_options(pk)
    pk.add_argument("--window", type=int, metavar="N",
                    help="samples per window (default: 1024 to 8192, whichever is estimated smallest; "
                         "1024 with --code-size K > 0)")
    pk.add_argument("--code-size", type=int, metavar="K",
                    help="autoencoder code length per window (default: auto = 8, and the autoencoder is kept only "
                         "where it saves more than its weights and codes cost; an explicit K always keeps it, "
                         "for browsing by codes; 0 = none)")
    pk.add_argument("--segment", type=int, metavar="N", help="samples per segment of the learned index "
                    "(what unusual, alike and glance list; default 256, fewer on short recordings; 0 = no index)")
    pk.add_argument("--force", action="store_true", help="replace an existing archive")
    pk.add_argument("--json", action="store_true", help="print the result as JSON")
    pk.add_argument("--quiet", action="store_true", help="no progress line (it is shown on a terminal only)")

    up = sub.add_parser("unpack", help="decode an archive (or a time range) to .npy, .csv or .parquet")
    up.add_argument("archive")
    up.add_argument("-o", "--output", required=True, metavar="OUT", help="output file: .npy, .csv or .parquet")
    up.add_argument("--channels", metavar="A,B", help="comma-separated channel names (default: all)")
    up.add_argument("--start", metavar="T", help="first time to include, from the first sample: 12.5, 90s, "
                    "2h1min, 3d, 1:02:03, or ISO 8601 (on the logged times; gaps count)")
    up.add_argument("--end", metavar="T", help="time to stop before (excluded), in the same forms as --start")
    up.add_argument("--force", action="store_true", help="replace an existing file (never the original recording)")
    up.add_argument("--replace-original", metavar="SHA256", dest="replace_original",
                    help="allow replacing the original recording the archive was packed from: give the first 12 "
                         "hex digits of its SHA-256 (shown by 'tsarchive report')")

    vf = sub.add_parser("verify", help="check an archive's checksums, and every sample against its source")
    vf.add_argument("archive")
    vf.add_argument("--against", metavar="SOURCE", help="the original recording to compare with; first checked "
                    "to be the file that was packed (size and SHA-256), else verify fails without comparing samples")
    vf.add_argument("--rate", type=float, metavar="HZ", help="sample rate of a SOURCE that carries none (.npy, a "
                    "table without a time column; default: the archive's rate)")
    vf.add_argument("--even-if-changed", action="store_true", dest="even_if_changed",
                    help="compare the samples of a SOURCE that is not the packed file (a converted copy); "
                         "passes when every sample is within budget")
    vf.add_argument("--record", metavar="FOLDER", help="also write a verification record to this new folder: "
                    "record.md and record.json with per-channel RMS error, SNR and PNG plots (needs matplotlib: "
                    "pip install 'tsarchive[record]')")
    vf.add_argument("--json", action="store_true", help="print the report as JSON")
    vf.add_argument("--quiet", action="store_true", help="no progress line (it is shown on a terminal only)")

    rp = sub.add_parser("report", help="show an archive's channels, budgets, errors and ratios")
    rp.add_argument("archive", help="an archive folder, or a batch's output folder (its catalog.parquet)")
    rp.add_argument("--json", action="store_true", help="print the report as JSON")
    rp.add_argument("--manifest", action="store_true", help="print the archive's manifest as stored (JSON)")

    dm = sub.add_parser("demo", help="pack and verify the bundled sample streams, then open the app on them")
    dm.add_argument("--out", default="demo_archives", metavar="DIR", help="folder for the archives (default demo_archives)")
    dm.add_argument("--samples", metavar="DIR", help="folder of recordings (default: sample_streams/)")
    dm.add_argument("--budget", default=DEFAULT_SPEC, metavar="SPEC", help=f"budget (default {DEFAULT_SPEC.replace('%', '%%')})")
    dm.add_argument("--no-app", action="store_true", help="do not open the app afterwards")

    br = sub.add_parser("browse", help="open the terminal app on an archive or a folder")
    br.add_argument("path", nargs="?", default=".")
    from .cli_look import add_commands
    add_commands(sub)                          # unusual, alike, glance (tsarchive/cli_look.py)
    return p


def _batch_options(pk: argparse.ArgumentParser) -> None:
    """Packing many recordings (see tsarchive.batch)."""
    pk.add_argument("--into", metavar="FOLDER", help="output folder for several recordings: one archive each, "
                    "mirroring their folders, and a catalog.parquet; files already packed alike are skipped")
    pk.add_argument("--jobs", type=int, metavar="N", help="worker processes packing side by side (default: one "
                    "per core)")
    pk.add_argument("--scheduler", metavar="ADDRESS", help="run the batch on a Dask cluster (tcp://HOST:8786; "
                    "default: $TSARCHIVE_SCHEDULER); its workers must see the same paths")
    pk.add_argument("--shared-model", action="store_true", help="learn one model (autoencoder and index coders) "
                    "from a sample of the batch's files and pack every file with the same channels with it; each "
                    "archive stores it, so it stays self-contained")


def _source_options(pk: argparse.ArgumentParser) -> None:
    """How to read the source (see tsarchive.ingest.options.ReadOptions)."""
    pk.add_argument("--zone", metavar="OFFSET", help="offset the source's naive times were logged in, e.g. +01:00 "
                    "(default: they stay naive, as logged)")
    pk.add_argument("--without-time", action="store_true",
                    help="ignore the source's time column and take the samples as regular at --rate "
                         "(the logged times, gaps and jitter are then lost)")
    pk.add_argument("--missing", metavar="A,B", help="extra cell values meaning 'no measurement': words become "
                    "missing (NaN), numbers such as -9999 are kept exactly as sentinels")
    pk.add_argument("--skip-text", action="store_true", help="leave out non-numeric columns (default: kept as text)")
    pk.add_argument("--names", metavar="A,B", help="channel names, one per column (.npy, .wav)")
    pk.add_argument("--units", metavar="U,V", help="channel units, one per column (.npy, .wav)")
    pk.add_argument("--dry-run", action="store_true",
                    help="show what was found in the source (columns, units, timing, encoding) and write nothing")


def _read_options(args):
    from .ingest.options import ReadOptions
    return ReadOptions.build(rate=args.rate, zone=args.zone, without_time=args.without_time, missing=args.missing,
                             skip_text=args.skip_text, names=args.names, units=args.units)


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    try:
        args = _parser().parse_args(argv)
        if args.version:
            from .version import __version__
            print(f"tsarchive {__version__}")
            return 0
        if args.command is None:
            return _app(Path("."))
        from .cli_look import HANDLERS
        code = {"pack": _pack, "unpack": _unpack, "verify": _verify, "report": _report, "demo": _demo,
                "browse": lambda a: _app(Path(a.path)), **HANDLERS}[args.command](args)
        sys.stdout.flush()  # a closed pipe shows up here, inside the handler, not at interpreter exit
        return code
    except BrokenPipeError:
        return _reader_gone()
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


def _reader_gone() -> int:
    """stdout's reader closed the pipe: stop quietly (no message, no traceback at exit)."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())  # the interpreter's final flush then goes nowhere
        os.close(devnull)
    except (OSError, ValueError, AttributeError):  # no real file descriptor (an in-process capture)
        pass
    return BROKEN_PIPE_EXIT


def _caution_if_lossy(lossy: bool, to_stderr: bool = False) -> None:
    if lossy:
        print(CAUTION, file=sys.stderr if to_stderr else sys.stdout)


def _pack(args) -> int:
    from .batch.plan import is_batch
    if is_batch(args.source, args.into):
        return _pack_batch(args)
    if args.jobs is not None or args.scheduler or args.shared_model:
        raise BadInput("--jobs, --scheduler and --shared-model are for several recordings: add --into FOLDER")
    args.source = args.source[0]
    from .options import PackOptions
    from .pipeline import pack
    options = _read_options(args)
    settings = PackOptions.parse(args.budget, args.window, args.code_size,    # checked before the source is read
                                 segment=args.segment)
    if args.dry_run:
        from .ingest.survey import survey_source
        survey = survey_source(args.source, options=options)
        print(json.dumps(survey.to_dict(), indent=1) if args.json else survey.to_text())
        return 0
    if not args.output:
        raise BadInput("pack: -o ARCHIVE is required (the archive folder to write); or pass --dry-run to only "
                       "look at the source")
    from .progress_line import ProgressLine
    line = ProgressLine(enabled=False if args.quiet else None)
    try:
        res = pack(args.source, args.output, rate=args.rate, force=args.force, read_options=options,
                   progress=line, options=settings)
    finally:
        line.close()
    lossy = any(c.eps > 0 for c in res.channels)
    if args.json:
        from .report import identity
        from .archive import open_archive
        print(json.dumps({**res.to_dict(), "identity": identity(open_archive(res.archive))}, indent=1))
        _caution_if_lossy(lossy, to_stderr=True)  # stdout stays one JSON document
        return 0
    from .report import pack_table
    print(pack_table(res))
    _caution_if_lossy(lossy)
    return 0


def _pack_batch(args) -> int:
    from .batch.plan import BatchSettings, plan_batch
    from .batch.run import SCHEDULER_ENV
    if args.output:
        raise BadInput("several recordings are packed into a folder: give it with --into FOLDER instead of -o")
    if not args.into:
        raise BadInput("several recordings (or a folder, or a pattern) need an output folder: add --into FOLDER")
    if args.jobs is not None and args.jobs < 1:
        raise BadInput(f"--jobs {args.jobs}: give a whole number of at least 1")
    from .options import PackOptions
    PackOptions.parse(args.budget, args.window, args.code_size)   # the command's error, not each file's
    plan = plan_batch(args.source, args.into)
    from .batch.console import dry_run_text, pack_many
    if args.dry_run:
        print(dry_run_text(plan))
        return 0
    settings = BatchSettings(budget=args.budget, rate=args.rate, window=args.window, code_size=args.code_size,
                             read_options=_read_options(args), force=args.force, shared_model=args.shared_model)
    scheduler = args.scheduler or os.environ.get(SCHEDULER_ENV, "").strip() or None
    try:
        summary = pack_many(plan, settings, jobs=args.jobs, scheduler=scheduler, as_json=args.json, quiet=args.quiet)
    except KeyboardInterrupt:
        print("tsarchive: interrupted; the archives finished so far are kept: run the same command again to "
              "pack the rest", file=sys.stderr)
        return 2
    _caution_if_lossy(str(args.budget).strip().lower() != "lossless", to_stderr=args.json)
    return 0 if summary.ok else 1


def _unpack(args) -> int:
    from .archive import open_archive
    from .timespec import parse_offset
    arc = open_archive(args.archive)
    arc.check_members()                     # a full unpack reads every member anyway; hashing costs little
    start0 = arc.channels[0].start if arc.channels else None
    tl = arc.timeline
    ns0 = int(tl.values(0, 1)[0]) if tl.kind == "datetime" and tl.n else None   # exact, where start0 has µs
    start = None if args.start is None else parse_offset(args.start, start0, ns0)
    end = None if args.end is None else parse_offset(args.end, start0, ns0)
    if ns0 is None:  # a seconds axis holds the logged times as doubles: a typed 1.92 is the double logged as 1.92
        start, end = (None if x is None else float(x) for x in (start, end))
    chans = None if not args.channels else [c.strip() for c in args.channels.split(",") if c.strip()]
    out = arc.export(args.output, channels=chans, start=start, end=end, force=args.force,
                     replace_original=args.replace_original)
    metas = [arc.channel(n) for n in chans] if chans else list(arc.channels)
    lossy = [m for m in metas if m.eps > 0]
    print(f"wrote {out}")
    if lossy:
        bounds = ", ".join(f"{m.name} ±{m.eps:g}{' ' + m.unit if m.unit else ''}" for m in lossy)
        print(f"a reconstruction, not the original recording: values within {bounds} of it")
    else:
        print("a reconstruction with every value exactly as packed")
    _caution_if_lossy(bool(lossy))
    return 0


def _verify(args) -> int:
    from .progress_line import ProgressLine
    from .archive import open_archive
    from .verifier import verify_archive
    if args.record:
        from .record.document import check_record_folder
        check_record_folder(args.record)                 # refused before the long work, not after it
    arc = open_archive(args.archive, strict=False)      # opened once: verified, then named in the JSON
    line = ProgressLine(enabled=False if args.quiet else None)
    try:
        rep = verify_archive(arc, against=args.against, rate=args.rate, even_if_changed=args.even_if_changed,
                             progress=line)
    finally:
        line.close()
    from .record.kept import forget_record, write_record
    if rep.ok:      # kept beside the archive: report and the app show it later
        write_record(arc.path, rep, args.against)
    else:           # a failure writes nothing, and no earlier pass outlives it
        forget_record(arc.path)
    if args.record:
        from .record import write_verification_record
        write_verification_record(arc, args.record, against=args.against, rate=args.rate, report=rep)
        print(f"wrote the verification record {args.record}", file=sys.stderr)
    if args.json:
        from .report import identity
        print(json.dumps({**rep.to_dict(), "against": args.against, "identity": identity(arc)}, indent=1))
    else:
        from .report import verify_text
        print(verify_text(rep))
    return 0 if rep.ok else 1


def _report(args) -> int:
    from .batch.catalog import has_catalog
    from .store.inside import is_archive
    if Path(args.archive).is_dir() and not is_archive(Path(args.archive)) and has_catalog(args.archive):
        from .batch.console import catalog_report
        text, ok = catalog_report(args.archive, args.json)
        print(text)
        return 0 if ok else 1
    from .report import archive_dict, archive_table
    from .archive import open_archive
    arc = open_archive(args.archive)
    if args.manifest:                     # as stored (format 6: inside windows.parquet, store/inside.py)
        from .store.binding import read_manifest
        print(json.dumps(read_manifest(arc.path), indent=1))
        return 0
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
    _require("textual", "app", "the terminal app")
    _require("textual_plotext", "app", "the terminal app")
    from .app import run_app
    return run_app(path) or 0


def _require(module: str, extra: str, what: str) -> None:
    """One line naming the extra to install when an optional dependency is missing."""
    try:
        importlib.import_module(module)
    except ImportError:
        raise BadInput(f"{what} needs {module}, which is not installed; install it with "
                       f"pip install 'tsarchive[{extra}]'") from None


if __name__ == "__main__":
    raise SystemExit(main())
