"""Batch throughput: files per second packing many short recordings, and identical archives wherever packed.

    python -m tsarchive.bench --no-cases --batch [--batch-files 1000] [--batch-copies 100] [--batch-dask]

Two sets, made by the bench in a temporary folder:

* **short logs**: ``--batch-files`` CSV files of one hour at 1 Hz, four channels
  with two decimals (a slow random walk each, seeded by the file's number),
  ISO 8601 times; the kind of file a lab has thousands of;
* **sample streams**: the repository's sample streams copied ``--batch-copies``
  times into folders of their own (the ``.npy`` packed at its 2 kHz).

Each set is packed with 1 job (in the bench's own process), 2 and N (= cores)
local worker processes, and with ``--batch-dask`` on a Dask LocalCluster of N
worker processes; every run's archives are hashed file by file and compared
with the 1-job run's.  One separate ``tsarchive pack`` command per file (a new
process each, the way a shell loop packs a folder) is timed on the first
:data:`SEPARATE` files of each set, for the fixed cost a batch saves.
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


def run_set(name: str, folder: Path, tmp: Path, dask: bool, log) -> list[BatchRun]:
    from ..batch import BatchSettings, run_batch
    n_cores = os.cpu_count() or 1
    sources = sorted(p for p in folder.rglob("*") if p.is_file())
    mb = sum(p.stat().st_size for p in sources) / 1e6
    settings = BatchSettings()
    runs, first = [], None
    places = [("1 job", dict(jobs=1)), ("2 jobs", dict(jobs=2))]
    if n_cores > 2:
        places.append((f"{n_cores} jobs", dict(jobs=n_cores)))
    cluster = None
    if dask:
        try:
            from distributed import LocalCluster
            cluster = LocalCluster(n_workers=n_cores, processes=True, threads_per_worker=1, dashboard_address=None)
            places.append((f"Dask LocalCluster, {n_cores} workers", dict(scheduler=cluster.scheduler_address)))
        except ImportError:
            log("batch bench: Dask is not installed (pip install 'tsarchive[cluster]'); its run is skipped")
    try:
        for where, how in places:
            out = tmp / f"out-{name}-{len(runs)}"
            plan = _plan(folder, out)
            log(f"batch bench: {name}, {len(plan.jobs)} files, {where}")
            summary = run_batch(plan, settings, **how)
            digest = _digest(out)
            same = None if first is None else (digest == first and len(digest) > 0)
            first = digest if first is None else first
            runs.append(BatchRun(name, where, len(plan.jobs), summary.elapsed_s, mb, summary.count("failed"), same))
            shutil.rmtree(out)
    finally:
        if cluster is not None:
            cluster.close()
    k = min(SEPARATE, len(sources))
    sec = _separate(sources[:k], tmp / f"separate-{name.replace(' ', '-')}")
    runs.append(BatchRun(name, f"separate commands ({k} files)", k, sec, mb * k / max(len(sources), 1), 0, None))
    return runs


def run(files: int, copies: int, streams: Path, tmp: Path, dask: bool, log) -> list[BatchRun]:
    short = tmp / "short"
    log(f"batch bench: writing {files} short logs")
    make_short_logs(short, files)
    runs = run_set("short logs", short, tmp, dask, log)
    shutil.rmtree(short)
    if copies:
        copied = tmp / "streams"
        copy_streams(streams, copied, copies)
        runs += run_set("sample streams", copied, tmp, dask, log)
        shutil.rmtree(copied)
    return runs


def table(runs: list[BatchRun]) -> str:
    from .tables import render
    rows = [[r.set, r.where, str(r.files), f"{r.seconds:.1f}", f"{r.files_per_s:.2f}",
             f"{r.source_mb / r.seconds:.2f}" if r.seconds else "-", str(r.failed),
             {None: "-", True: "yes", False: "NO"}[r.identical]] for r in runs]
    return render(["set", "where", "files", "s", "files/s", "source MB/s", "failed", "same archives"], rows)
