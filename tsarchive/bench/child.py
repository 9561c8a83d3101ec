"""Work the bench runs in a fresh Python process, so that timings and peak RSS are its own.

Run as ``python -m tsarchive.bench.child JOB.json``: reads a :class:`Job`,
does it, and prints one JSON line (a :class:`JobResult`) on stdout.  Kinds:

``pack``           import torch (untimed), pack ``source`` into ``archive`` at
                   ``budget`` (timed); then (if
                   ``read_back``) open it, read every channel (timed) and
                   compare with the source: ``max |x_hat - x|`` per channel.
``parquet``        write the ``.npy`` at ``source`` as lossless Parquet
                   (BYTE_STREAM_SPLIT, no dictionary, zstd at pyarrow's default
                   level) into ``archive`` and read it back, both timed.
``random_access``  in ``archive``: read ``minutes`` one-minute spans per
                   channel (timed) and the full channels (timed), and check
                   that each span equals the same slice of the full read.

Peak RSS is ``resource.getrusage(RUSAGE_SELF).ru_maxrss`` (KiB on Linux),
reported in MiB after imports, after the main step and at the end.
"""

from __future__ import annotations

import json
import resource
import sys
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from .archive_bytes import breakdown
from .stages import StageClock


@dataclass(frozen=True)
class Job:
    kind: str
    source: str = ""
    archive: str = ""
    budget: str = "0.1%"
    rate: float | None = None
    train_seconds: float | None = None
    read_back: bool = True
    minutes: tuple[float, ...] = ()

    def to_dict(self) -> dict:
        d = asdict(self)
        d["minutes"] = list(self.minutes)
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "Job":
        keep = {k: d[k] for k in cls.__dataclass_fields__ if k in d}
        keep["minutes"] = tuple(keep.get("minutes", ()))
        return cls(**keep)


@dataclass(frozen=True)
class JobResult:
    ok: bool
    error: str = ""
    channels: tuple[str, ...] = ()
    eps: tuple[float, ...] = ()
    max_err: tuple[float, ...] = ()
    nbytes: int = 0
    step_s: float = 0.0
    read_s: float = 0.0
    span_s: tuple[float, ...] = ()
    spans_equal: bool = True
    rss_import_mb: float = 0.0
    rss_step_mb: float = 0.0
    rss_end_mb: float = 0.0
    extra: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict) -> "JobResult":
        keep = {k: d[k] for k in cls.__dataclass_fields__ if k in d}
        for k in ("channels", "eps", "max_err", "span_s"):
            keep[k] = tuple(keep.get(k, ()))
        return cls(**keep)


def rss_mb() -> float:
    """Peak resident set size of this process so far, MiB.

    Linux: ``VmHWM`` from /proc/self/status, the high-water mark of this
    process image.  ``ru_maxrss`` is only the fallback: it survives execve(2),
    so a child forked from a parent that holds a large memory map (the bench
    writes its long inputs through one) would report the parent's size.
    """
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024.0   # kB
    except (OSError, ValueError, IndexError):
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def _dir_bytes(path: Path) -> int:
    return sum(p.stat().st_size for p in path.rglob("*") if p.is_file()) if path.is_dir() else path.stat().st_size


def max_abs_error(x_hat: np.ndarray, x: np.ndarray) -> float:
    """max |x_hat - x| in float64 over finite samples; inf when the NaN/inf positions or lengths differ."""
    a = np.asarray(x_hat, dtype=np.float64)
    b = np.asarray(x, dtype=np.float64)
    if a.shape != b.shape or not np.array_equal(np.isfinite(a), np.isfinite(b)):
        return float("inf")
    if not np.array_equal(a[~np.isfinite(a)], b[~np.isfinite(b)]):
        return float("inf")
    both = np.isfinite(a)
    return float(np.max(np.abs(a[both] - b[both]))) if both.any() else 0.0


def _preload_torch() -> float:
    """Import torch before the clock starts (pack imports it lazily); returns the import time."""
    t0 = time.perf_counter()
    try:
        import torch  # noqa: F401
    except ImportError:
        return 0.0
    return time.perf_counter() - t0


def _preload_kernels() -> float:
    """Load (or, the first time after installing, compile) the numba kernels before the clock starts;
    returns the time it took."""
    import numpy as np

    from tsarchive import entropy
    from tsarchive.predict import lpc

    t0 = time.perf_counter()
    v = np.arange(-8, 8, dtype=np.int64)
    table = entropy.build_table(v)
    entropy.decode_many(entropy.encode_many([v], table), [len(v)], table)
    coefs = lpc.LpcCoefs((1 << (lpc.SHIFT - 1), 1 << (lpc.SHIFT - 2)))
    lv = np.zeros(1, np.int64)
    lpc.reconstruct(lpc.residuals(v[None, :], lv, coefs), lv, coefs)
    from tsarchive.coding.adaptive import AdaptiveCoder
    from tsarchive.index import learn
    from tsarchive.model import exact
    AdaptiveCoder().decode(AdaptiveCoder().encode(v), len(v))
    exact.matmul(np.ones((2, 3)), np.ones((3, 2)))
    learn._orthonormal(np.eye(3))
    return time.perf_counter() - t0


def run_pack(job: Job) -> JobResult:
    import tsarchive

    torch_s = _preload_torch()
    kernels_s = _preload_kernels()
    rss0 = rss_mb()
    kwargs = {"rate": job.rate, "budget": job.budget, "force": True}
    if job.train_seconds is not None:
        kwargs["train_seconds"] = job.train_seconds
    clock = StageClock()
    t0 = time.perf_counter()
    res = tsarchive.pack(job.source, job.archive, progress=clock, **kwargs)
    pack_s = time.perf_counter() - t0
    stages = clock.stages(t0 + pack_s - clock.t0)
    rss1 = rss_mb()
    arc = tsarchive.open(job.archive)
    names = tuple(c.name for c in arc.channels)
    eps = tuple(float(c.eps) for c in arc.channels)
    read_s, errs = 0.0, ()
    if job.read_back:
        t0 = time.perf_counter()
        arc = tsarchive.open(job.archive)
        back = list(arc.read_many(names).values())
        read_s = time.perf_counter() - t0
        rec = tsarchive.inspect_source(job.source, rate=job.rate)
        errs = tuple(max_abs_error(back[j], rec.column(j)) for j in range(len(names)))
    return JobResult(True, channels=names, eps=eps, max_err=errs, nbytes=int(res.archive_bytes),
                     step_s=pack_s, read_s=read_s, rss_import_mb=rss0, rss_step_mb=rss1, rss_end_mb=rss_mb(),
                     extra={"ratio_reported": float(res.ratio), "raw_bytes": int(getattr(res, "raw_bytes", 0)),
                            "torch_import_s": torch_s, "kernels_s": kernels_s, "payload_bytes": payload_bytes(Path(job.archive)),
                            "stages": stages,
                            "bytes": breakdown(Path(job.archive)).to_dict()})


def payload_bytes(archive: Path) -> int:
    """Bytes of the entropy-coded residuals alone (the rest of the archive is metadata and framing)."""
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    col = pq.read_table(archive / "windows.parquet", columns=["residual"])["residual"]
    return int(pc.sum(pc.binary_length(col)).as_py() or 0)


def run_parquet(job: Job) -> JobResult:
    import pyarrow as pa
    import pyarrow.parquet as pq

    rss0 = rss_mb()
    data = np.load(job.source, mmap_mode="r")
    data = data[:, None] if data.ndim == 1 else data
    names = [f"c{j}" for j in range(data.shape[1])]
    t0 = time.perf_counter()
    table = pa.table({n: np.ascontiguousarray(data[:, j]) for j, n in enumerate(names)})
    pq.write_table(table, job.archive, compression="zstd", use_dictionary=False,
                   column_encoding={n: "BYTE_STREAM_SPLIT" for n in names})
    write_s = time.perf_counter() - t0
    del table
    rss1 = rss_mb()
    t0 = time.perf_counter()
    back = pq.read_table(job.archive)
    cols = [back.column(n).to_numpy() for n in names]
    read_s = time.perf_counter() - t0
    equal = all(np.array_equal(cols[j], data[:, j]) for j in range(len(names)))
    return JobResult(equal, "" if equal else "Parquet read-back differs from the source",
                     channels=tuple(names), nbytes=_dir_bytes(Path(job.archive)), step_s=write_s, read_s=read_s,
                     rss_import_mb=rss0, rss_step_mb=rss1, rss_end_mb=rss_mb())


def run_random_access(job: Job) -> JobResult:
    import tsarchive

    rss0 = rss_mb()
    arc = tsarchive.open(job.archive)
    names = tuple(c.name for c in arc.channels)
    spans, equal = [], True
    for t_start in job.minutes:
        arc = tsarchive.open(job.archive)
        t0 = time.perf_counter()
        parts = [arc.read(n, start=t_start, end=t_start + 60.0) for n in names]
        spans.append(time.perf_counter() - t0)
        rate = arc.channel(names[0]).rate
        first = int(np.floor(t_start * rate + 1e-9))
        if job.read_back:
            full0 = arc.read(names[0])
            equal &= bool(np.array_equal(parts[0], full0[first:first + len(parts[0])]))
    arc = tsarchive.open(job.archive)
    t0 = time.perf_counter()
    for n in names:
        arc.read(n)
    full_s = time.perf_counter() - t0
    return JobResult(equal, "" if equal else "a one-minute read differs from the same slice of the full read",
                     channels=names, nbytes=_dir_bytes(Path(job.archive)), read_s=full_s, span_s=tuple(spans),
                     spans_equal=equal, rss_import_mb=rss0, rss_step_mb=rss_mb(), rss_end_mb=rss_mb())


_RUNNERS = {"pack": run_pack, "parquet": run_parquet, "random_access": run_random_access}


def main(argv: list[str] | None = None) -> int:
    args = sys.argv[1:] if argv is None else argv
    job = Job.from_dict(json.loads(Path(args[0]).read_text()))
    try:
        result = _RUNNERS[job.kind](job)
    except Exception as exc:  # reported to the parent as a failed row, not swallowed
        result = JobResult(False, error=f"{type(exc).__name__}: {exc}".splitlines()[0][:300], rss_end_mb=rss_mb())
    print(json.dumps(result.to_dict()))
    return 0 if result.ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
