"""Batch throughput: files per second packing many short recordings, and identical archives wherever packed.

    python -m tsarchive.bench --no-cases --batch [--batch-files 1000] [--batch-copies 100] [--batch-dask]
                                                [--batch-shared]

Two sets, made by the bench in a temporary folder:

* **short logs**: ``--batch-files`` CSV files of one hour at 1 Hz, four channels
  with two decimals (a slow random walk each, seeded by the file's number),
  ISO 8601 times; the kind of file a lab has thousands of;
* **sample streams**: the repository's sample streams copied ``--batch-copies``
  times into folders of their own (the ``.npy`` packed at its 2 kHz).

Each set is packed with 1 job (in the bench's own process), 2 and N (= cores)
local worker processes, and with ``--batch-dask`` on a Dask LocalCluster of N
(at least 2) worker processes; every run's archives are hashed file by file
and compared with the 1-job run's.  With ``--batch-shared`` the set is packed
again with one model for the batch (``--shared-model``) with 1 and N jobs
(compared with the 1-job shared run), and the ratio column shows what it does
to the archives' size.  One separate ``tsarchive pack`` command per file (a
new process each, the way a shell loop packs a folder) is timed on the first
:data:`SEPARATE` files of each set, for the fixed cost a batch saves.  Every
row keeps the machine's load averages at its end (``os.getloadavg``, what
``uptime`` prints): the figures are only comparable at a like load.

:func:`stages` times one short file's pack stage by stage, as a worker packs it
(hash, ingest, plan, encode, write, self-check, catalog entry).
"""

from __future__ import annotations

import hashlib
import os
import shutil
import subprocess
import sys
import time
from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np

#: Files packed by separate commands (one process each) for the comparison.
SEPARATE = 10


@dataclass(frozen=True)
class BatchRun:
    set: str
    where: str
    files: int
    seconds: float
    source_mb: float
    failed: int
    identical: bool | None      # archives equal to the 1-job run's (None: that is this run)
    ratio: float | None = None  # all the set's raw sample bytes / all its archive bytes (the catalog's)
    load: str = ""              # load averages (1, 5, 15 min) when the run ended

    @property
    def files_per_s(self) -> float:
        return self.files / self.seconds if self.seconds > 0 else float("inf")

    def to_dict(self) -> dict:
        return {**asdict(self), "files_per_s": self.files_per_s}


def make_short_logs(folder: Path, count: int, hours: float = 1.0) -> list[Path]:
    """``count`` logger CSVs of ``hours`` at 1 Hz, four channels (see the module doc)."""
    n = int(hours * 3600)
    secs = np.arange(n)
    stamps = [f"2031-04-02T{6 + s // 3600:02d}:{s // 60 % 60:02d}:{s % 60:02d}Z" for s in secs]
    header = "time,chamber [degC],board [degC],humidity [%RH],pressure [kPa]"
    out = []
    for i in range(count):
        rng = np.random.default_rng(i)
        walk = np.cumsum(rng.integers(-2, 3, (n, 4)), axis=0) / 100 + np.array([22.0, 30.0, 45.0, 101.3])
        body = "\n".join(f"{t},{a:.2f},{b:.2f},{c:.2f},{d:.2f}" for t, (a, b, c, d) in zip(stamps, walk))
        path = folder / f"{i // 100:02d}" / f"log{i:04d}.csv"
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(f"{header}\n{body}\n")
        out.append(path)
    return out


def copy_streams(streams: Path, folder: Path, copies: int) -> list[Path]:
    from ..ingest import SUPPORTED
    files = sorted(p for p in streams.iterdir() if p.suffix.lower() in SUPPORTED)
    out = []
    for k in range(copies):
        for f in files:
            target = folder / f"copy{k:03d}" / f.name
            target.parent.mkdir(parents=True, exist_ok=True)
            shutil.copyfile(f, target)
            out.append(target)
    return out


def _digest(out: Path) -> dict[str, str]:
    """SHA-256 of every file of every archive below ``out`` (the catalog is left out)."""
    return {p.relative_to(out).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(out.glob("**/*.tsarchive/*")) if p.is_file()}


def _plan(folder: Path, out: Path):
    from ..batch import plan_batch
    from ..demo import RATES
    plan = plan_batch([str(folder)], out)
    jobs = tuple(replace(j, rate=RATES.get(j.source.name)) for j in plan.jobs)
    return replace(plan, jobs=jobs)


def _separate(paths: list[Path], tmp: Path) -> float:
    """Seconds for one ``tsarchive pack`` process per file (this checkout's tsarchive)."""
    from ..demo import RATES
    here = str(Path(__file__).resolve().parents[2])
    env = {**os.environ, "PYTHONPATH": here + os.pathsep + os.environ.get("PYTHONPATH", "")}
    tmp.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    for i, p in enumerate(paths):
        rate = RATES.get(p.name)
        cmd = [sys.executable, "-m", "tsarchive", "pack", str(p), "-o", str(tmp / f"s{i}.tsarchive"), "--quiet",
               *(["--rate", str(rate)] if rate else [])]
        subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
    return time.perf_counter() - t0


def _load() -> str:
    return " ".join(f"{v:.2f}" for v in os.getloadavg()) if hasattr(os, "getloadavg") else "?"


def _ratio(out: Path) -> float | None:
    from ..batch import read_catalog
    t = read_catalog(out)
    arc = sum(t.column("archive_bytes").to_pylist())
    return sum(t.column("raw_bytes").to_pylist()) / arc if arc else None


def _places(dask: bool, shared: bool, log):
    """(where, run_batch's options, shared model?) of every run, and the LocalCluster to close (or None)."""
    n_cores = os.cpu_count() or 1
    places = [("1 job", dict(jobs=1), False), ("2 jobs", dict(jobs=2), False)]
    if n_cores > 2:
        places.append((f"{n_cores} jobs", dict(jobs=n_cores), False))
    cluster = None
    if dask:
        try:
            from distributed import LocalCluster
            workers = max(2, n_cores)
            cluster = LocalCluster(n_workers=workers, processes=True, threads_per_worker=1, dashboard_address=None)
            places.append((f"Dask LocalCluster, {workers} workers", dict(scheduler=cluster.scheduler_address), False))
        except ImportError:
            log("batch bench: Dask is not installed (pip install 'tsarchive[cluster]'); its run is skipped")
    if shared:
        places += [("1 job, shared model", dict(jobs=1), True),
                   (f"{max(2, n_cores)} jobs, shared model", dict(jobs=max(2, n_cores)), True)]
    return places, cluster


def run_set(name: str, folder: Path, tmp: Path, dask: bool, log, shared: bool = False) -> list[BatchRun]:
    from ..batch import BatchSettings, run_batch
    sources = sorted(p for p in folder.rglob("*") if p.is_file())
    mb = sum(p.stat().st_size for p in sources) / 1e6
    runs, first = [], {}
    places, cluster = _places(dask, shared, log)
    try:
        for where, how, one_model in places:
            out = tmp / f"out-{name.replace(' ', '-')}-{len(runs)}"
            plan = _plan(folder, out)
            log(f"batch bench: {name}, {len(plan.jobs)} files, {where} (load {_load()})")
            summary = run_batch(plan, BatchSettings(shared_model=one_model), **how)
            digest = _digest(out)
            same = None if one_model not in first else (digest == first[one_model] and len(digest) > 0)
            first.setdefault(one_model, digest)
            runs.append(BatchRun(name, where, len(plan.jobs), summary.elapsed_s, mb, summary.count("failed"), same,
                                 _ratio(out), _load()))
            log(f"batch bench: {runs[-1].files_per_s:.2f} files/s")
            shutil.rmtree(out)
    finally:
        if cluster is not None:
            cluster.close()
    k = min(SEPARATE, len(sources))
    sec = _separate(sources[:k], tmp / f"separate-{name.replace(' ', '-')}")
    runs.append(BatchRun(name, f"separate commands ({k} files)", k, sec, mb * k / max(len(sources), 1), 0, None,
                         load=_load()))
    return runs


def run(files: int, copies: int, streams: Path, tmp: Path, dask: bool, log, shared: bool = False) -> list[BatchRun]:
    short = tmp / "short"
    log(f"batch bench: writing {files} short logs")
    make_short_logs(short, files)
    runs = run_set("short logs", short, tmp, dask, log, shared) if files else []
    shutil.rmtree(short)
    if copies:
        copied = tmp / "streams"
        copy_streams(streams, copied, copies)
        runs += run_set("sample streams", copied, tmp, dask, log, shared)
        shutil.rmtree(copied)
    return runs


def table(runs: list[BatchRun]) -> str:
    from .tables import render
    rows = [[r.set, r.where, str(r.files), f"{r.seconds:.1f}", f"{r.files_per_s:.2f}",
             f"{r.source_mb / r.seconds:.2f}" if r.seconds else "-", "-" if r.ratio is None else f"{r.ratio:.3f}",
             str(r.failed), {None: "-", True: "yes", False: "NO"}[r.identical], r.load] for r in runs]
    return render(["set", "where", "files", "s", "files/s", "source MB/s", "ratio", "failed", "same archives",
                   "load 1/5/15 min"], rows)


def stages(src: Path, tmp: Path) -> list[tuple[str, float]]:
    """Seconds of each step of packing ``src`` as a batch worker packs it (see :mod:`tsarchive.batch.work`):
    hash, then pack's stages on its main thread (from its progress events: each lasts from its first event
    to the next stage's first; ``read`` is ingest, grids, window and sample, ``encode`` planning and
    encoding, ``write`` the model, index and manifest, ``check`` the self-check; the training thread runs
    beside them and is left out), then opening the archive and writing its catalog entry."""
    main = {"read": "read", "encode": "encode", "write": "write", "check": "check", "verify": "check"}
    import tsarchive
    from ..batch.plan import BatchSettings, Job
    from ..batch.catalog import write_entry
    from ..batch.work import CHECK_PACKED, catalog_entry
    from ..checksum import file_sha256
    out = tmp / f"stages-{time.perf_counter_ns()}"
    out.mkdir(parents=True)
    job = Job(src, out / "x.tsarchive", "x.tsarchive")
    t0 = time.perf_counter()
    file_sha256(src)
    t1 = time.perf_counter()
    first: dict[str, float] = {}
    tsarchive.pack(src, job.archive, progress=lambda p: p.stage in main and first.setdefault(main[p.stage],
                                                                                              time.perf_counter()))
    t2 = time.perf_counter()
    write_entry(out, job.rel, catalog_entry(tsarchive.open(job.archive), job, BatchSettings(), CHECK_PACKED))
    t3 = time.perf_counter()
    shutil.rmtree(out)
    marks = sorted(first.items(), key=lambda kv: kv[1])
    ends = [t for _, t in marks[1:]] + [t2]
    return [("hash", t1 - t0), ("pack: start", (marks[0][1] if marks else t2) - t1),
            *((f"pack: {name}", end - t) for (name, t), end in zip(marks, ends)), ("open + catalog entry", t3 - t2)]


def stages_table(cold: list[tuple[str, float]], warm: list[tuple[str, float]]) -> str:
    from .tables import render
    w = dict(warm)
    rows = [[name, f"{s * 1000:.0f}", f"{w.get(name, float('nan')) * 1000:.0f}"] for name, s in cold]
    rows.append(["total", f"{sum(s for _, s in cold) * 1000:.0f}", f"{sum(w.values()) * 1000:.0f}"])
    return render(["step", "first file of a process (ms)", "next file (ms)"], rows)
