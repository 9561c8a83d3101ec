"""``python -m tsarchive.bench``: compression tables, and the opt-in long modes.

    python -m tsarchive.bench [--quick] [--cases all|synthetic|streams|real|NAME,...]
                              [--budgets 1e-2,1e-3,1e-4] [--json OUT] [--samples N] [--train-seconds S]
                              [--speed] [--random-access] [--long-hours H] [--long-channels C]
                              [--memory [MB]] [--long-budget SPEC] [--no-cases]
    python -m tsarchive.bench --study residuals [--cases real|NAME,...] [--budgets ...]

The exact command is printed at the top of the output.  Exit status: 0 when
every archive met its budget (err/eps <= 1) and every baseline round-tripped
within its bound, 1 otherwise, 2 on a usage error.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shlex
import sys
import tempfile
import time
from importlib import metadata
from pathlib import Path

from tsarchive.errors import TsArchiveError

from . import modes, runner
from . import coder
from .tables import LEGEND, baselines_table, fixed_table, limit_table, main_table, summary_table


def _floats(text: str) -> tuple[float, ...]:
    try:
        vals = tuple(float(t) for t in text.split(",") if t.strip())
    except ValueError:
        raise argparse.ArgumentTypeError(f"cannot read {text!r}; write fractions like 1e-2,1e-3") from None
    if not vals or any(not (0 < v < 1) for v in vals):
        raise argparse.ArgumentTypeError(f"budgets must be fractions of the range in (0, 1), got {text!r}")
    return vals


def _positive(kind):
    def parse(text: str):
        try:
            v = kind(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"cannot read {text!r} as a number") from None
        if not v > 0:
            raise argparse.ArgumentTypeError(f"must be positive, got {text!r}")
        return v
    return parse


def parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="python -m tsarchive.bench", description=__doc__.split("\n")[0])
    p.add_argument("--quick", action="store_true", help="small cases (20k samples) and short training")
    p.add_argument("--cases", default="all", help="comma list of case names or groups (synthetic, streams, real)")
    p.add_argument("--budgets", type=_floats, default=(1e-2, 1e-3, 1e-4),
                   help="budget fractions b: eps = b x channel range (default 1e-2,1e-3,1e-4)")
    p.add_argument("--json", type=Path, help="also write every result to this JSON file")
    p.add_argument("--samples", type=_positive(int), help="samples per synthetic/real case (default 200000, quick 20000; "
                   "real sets are used in full unless quick or this is given)")
    p.add_argument("--train-seconds", type=_positive(float), help="autoencoder time limit per pack (quick: 5 s)")
    p.add_argument("--streams", type=Path, help="folder of sample streams (default: the repo's sample_streams/)")
    p.add_argument("--no-cases", action="store_true", help="skip the case tables (run only the long modes)")
    p.add_argument("--speed", action="store_true", help="long record: tsarchive pack/read vs Parquet write/read")
    p.add_argument("--random-access", action="store_true", help="one minute from the long archive vs full read")
    p.add_argument("--memory", type=_positive(float), nargs="?", const=1000.0, metavar="MB",
                   help="pack a .npy of this many MB (default 1000) and report the child's peak RSS")
    p.add_argument("--long-hours", type=_positive(float), default=1.0, help="length of the long record (default 1 h)")
    p.add_argument("--long-channels", type=_positive(int), default=8, help="channels of the long record (default 8)")
    p.add_argument("--long-budget", default="0.1%", help="budget spec for the long modes (default 0.1%%)")
    p.add_argument("--study", choices=("residuals",),
                   help="instead of the case tables: the residual coders on the real sets (bench/residual_study.py)")
    p.add_argument("--batch", action="store_true", help="batch throughput: files/s with 1, 2 and N jobs (bench/batch.py)")
    p.add_argument("--batch-files", type=_positive(int), default=1000, help="short logs for --batch (default 1000)")
    p.add_argument("--batch-copies", type=int, default=100, help="copies of the sample streams for --batch (default 100)")
    p.add_argument("--batch-dask", action="store_true", help="--batch also on a Dask LocalCluster")
    p.add_argument("--batch-shared", action="store_true", help="--batch also with one model for the batch "
                   "(--shared-model), 1 and N jobs")
    p.add_argument("--injection", action="store_true", help="the learned index against simple baselines: faults "
                   "injected into the real recordings (precision@k), look-alike recall@5, query and preview costs")
    p.add_argument("--injection-seeds", type=_positive(int), default=3, help="seeds per fault kind (default 3)")
    p.add_argument("--injection-sets", help="comma list of real sets (default: every shipped set of >= 4096 samples)")
    p.add_argument("--index-costs", action="store_true", help="only the index's costs of --injection: bytes per "
                   "segment, preview against full decode, a 10-million-segment look-alike query")
    return p


def _versions() -> str:
    names = ("tsarchive", "numpy", "pyarrow", "zstandard", "torch", "constriction")
    out = []
    for n in names:
        try:
            out.append(f"{n} {metadata.version(n)}")
        except metadata.PackageNotFoundError:
            out.append(f"{n} ?")
    return ", ".join(out)


def main(argv: list[str] | None = None) -> int:
    args_list = sys.argv[1:] if argv is None else list(argv)
    args = parser().parse_args(args_list)
    out = print
    log = (lambda msg: print(msg, file=sys.stderr, flush=True))
    command = f"{Path(sys.executable).name} -m tsarchive.bench {shlex.join(args_list)}".rstrip()
    out(f"command: {command}")
    out(f"machine: {platform.platform()}, {os.cpu_count()} cpu, Python {platform.python_version()}; {_versions()}")
    out(f"date: {time.strftime('%Y-%m-%d %H:%M:%S %Z')}")
    train = args.train_seconds if args.train_seconds is not None else (5.0 if args.quick else None)
    report: dict = {"command": command, "budgets": list(args.budgets), "train_seconds": train}
    ok = True
    try:
        if args.study:
            return _study(args, report, out, log)
        if not args.no_cases:
            cfg = runner.BenchConfig(budgets=args.budgets, quick=args.quick,
                                     cases=tuple(t.strip() for t in args.cases.split(",") if t.strip()),
                                     streams_dir=args.streams, train_seconds=train, samples=args.samples)
            rows, about, skipped = runner.run(cfg, log)
            out("\ncases:")
            for line in about:
                out(f"  {line}")
            for line in skipped:
                out(f"  {line}")
            out("\n" + main_table(rows))
            out("\n" + LEGEND)
            out("\nevery lossy baseline (ratio): quantized samples (quant), first (prev) or second (prev2) "
                "differences, through zstd-19, xz -9e or bzip2 -9, with or without byte shuffling:")
            out(baselines_table(rows))
            out("\nwhere the archive's bytes go (bytes; fixed = all but the payload, the entropy-coded residuals; "
                "best / payload = the best classic's bytes over the payload alone):")
            out(fixed_table(rows))
            out("\ntarget 1, ratio against the best classic baseline (the smallest of all the baselines above):")
            out(summary_table(rows))
            if any(r.entropy_bits is not None for r in rows):
                out("\nGaussian-noise limit: H = entropy of N(0, sigma^2) quantized with step 2 eps "
                    "(mean over channels); a reference, not a bound on every coder")
                out(limit_table(rows))
            out("\nentropy coder alone (range coding, one table, windows of 1024) against the order-0 entropy of the "
                "values it codes:")
            crows = coder.run()
            out(coder.coder_table(crows))
            report["coder"] = [c.to_dict() for c in crows]
            for r in rows:
                for n in r.notes:
                    out(f"note {r.case} {r.budget:g}: {n}")
                if r.failure:
                    out(f"FAILED {r.case} {r.budget:g}: {r.failure}")
            bad = [r for r in rows if r.failure or r.err_over_eps is None or r.err_over_eps > 1.0
                   or r.baseline_worst > 1.0]
            ok &= not bad
            report.update(rows=[r.to_dict() for r in rows], cases=about, skipped=skipped)
        if args.batch:
            ok &= _batch_mode(args, report, out, log)
        if args.injection or args.index_costs:
            from .injection import run_all
            report["injection"] = run_all(args, out, log)
        if args.speed or args.random_access or args.memory:
            with tempfile.TemporaryDirectory(prefix="tsbench-long-") as tmp:
                ok &= _long_modes(args, train, Path(tmp), report, out, log)
    except TsArchiveError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    if args.json:
        args.json.write_text(json.dumps(report, indent=1, default=str))
        out(f"\nwrote {args.json}")
    return 0 if ok else 1


def _study(args, report: dict, out, log) -> int:
    from . import realdata, residual_study

    tokens = {t.strip() for t in args.cases.split(",") if t.strip()}
    names = [n for n in realdata.names() if tokens & {"all", "real", n}]
    rows, skipped = residual_study.run(names, args.budgets, log)
    for line in skipped:
        out(f"  {line}")
    out("\nresidual coders on the packer's own residual windows (bits/sample; see tsarchive/bench/residual_study.py):")
    out(residual_study.study_table(rows))
    out(residual_study.summary(rows))
    report["study"] = [r.to_dict() for r in rows]
    if args.json:
        args.json.write_text(json.dumps(report, indent=1, default=str))
        out(f"\nwrote {args.json}")
    return 0
def _batch_mode(args, report: dict, out, log) -> bool:
    from . import batch
    streams = args.streams or runner.default_streams_dir()
    with tempfile.TemporaryDirectory(prefix="tsbench-batch-") as tmp:
        [one] = batch.make_short_logs(Path(tmp) / "one", 1)
        cold, warm = batch.stages(one, Path(tmp)), batch.stages(one, Path(tmp))
        out("\none short log (1 h at 1 Hz, 4 channels) packed as a batch worker packs it:")
        out(batch.stages_table(cold, warm))
        runs = batch.run(args.batch_files, args.batch_copies if streams else 0, streams, Path(tmp), args.batch_dask,
                         log, args.batch_shared)
    out("\nbatch: pack FOLDER --into OUT; 1 job = the bench's own process; same archives = every archive file's "
        "SHA-256 equal to the 1-job run's (shared-model runs: to the 1-job shared-model run's)")
    out(batch.table(runs))
    report["batch"] = [r.to_dict() for r in runs]
    report["batch_stages"] = {"first_file": dict(cold), "next_file": dict(warm)}
    return all(r.failed == 0 and r.identical is not False for r in runs)


def _long_modes(args, train, tmp: Path, report: dict, out, log) -> bool:
    ok = True
    spec = modes.LongSpec(channels=args.long_channels, hours=args.long_hours)
    archive = None
    if args.speed or args.random_access:
        steps, archive = modes.run_speed(spec, args.long_budget, tmp, train, log)
        ok &= all(s.ok for s in steps)
        if args.speed:
            out(f"\nspeed: {spec.channels} channels x {spec.hours:g} h at {spec.rate:g} Hz float32 "
                f"({spec.raw_bytes / 1e6:.1f} MB raw); each tool in its own child process; "
                "write = pack (incl. training and self-check), read = every channel in full; "
                "Parquet: BYTE_STREAM_SPLIT, no dictionary, zstd at pyarrow's default level")
            out(modes.speed_table(steps))
            if modes.setup_note(steps):
                out(modes.setup_note(steps))
            if modes.stages_note(steps):
                out(modes.stages_note(steps))
            report["speed"] = [s.to_dict() for s in steps]
    if args.random_access:
        if archive is None:
            out("\nrandom access: skipped, the long archive could not be packed")
            ok = False
        else:
            ra = modes.run_random_access(archive, spec, tmp, log)
            ok &= ra.ok and ra.spans_equal
            out("\nrandom access: every channel, one minute at 5 evenly spaced places vs every channel in full "
                "(fresh open per read, child process)")
            out(modes.random_access_table(ra))
            report["random_access"] = ra.to_dict()
    if args.memory:
        m = modes.run_memory(args.memory, args.long_budget, tmp, train, log)
        ok &= m.ok
        out(f"\nmemory: {args.memory:g} MB float32 .npy (4 channels at 1 kHz) packed by a child process; "
            "RSS = peak resident set (VmHWM) of that process")
        out(modes.memory_table(m))
        report["memory"] = m.to_dict()
    return ok


if __name__ == "__main__":
    raise SystemExit(main())
