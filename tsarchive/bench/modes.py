"""The long, opt-in bench modes: speed, memory and random access.

* ``speed``: C channels x H hours at 1 kHz float32 (default 8 x 1 h =
  115.2 MB) packed and fully read by tsarchive, and the same array written
  and read as lossless Parquet (BYTE_STREAM_SPLIT + zstd, pyarrow's default
  level), each in its own child process in the same run.
* ``memory``: a ``.npy`` of a chosen size packed by a child process; its
  peak RSS after imports and after the pack.
* ``random access``: one minute of every channel read from the long archive
  at several places, against reading every channel in full.

The long recording is a deterministic synthetic vibration record written in
chunks through a memory map, so the parent never holds it.
"""

from __future__ import annotations

import statistics
from dataclasses import asdict, dataclass, replace
from pathlib import Path
from typing import Callable

import numpy as np

from .child import Job, JobResult
from .runner import spawn
from .stages import stage_line
from .tables import fmt, render

LONG_RATE = 1000.0
CHUNK = 1 << 20


@dataclass(frozen=True)
class LongSpec:
    """Shape of the long synthetic recording."""

    channels: int = 8
    hours: float = 1.0
    rate: float = LONG_RATE
    seed: int = 11

    @property
    def n_samples(self) -> int:
        return int(round(self.hours * 3600 * self.rate))

    @property
    def raw_bytes(self) -> int:
        return 4 * self.n_samples * self.channels


def write_long_npy(path: Path, spec: LongSpec) -> Path:
    """Channel c: ``sin(2 pi f_c t) + 0.3 sin(2 pi 3 f_c t + c) + 0.02 N(0,1)``, f_c = 30 + 7 c Hz, float32."""
    out = np.lib.format.open_memmap(path, mode="w+", dtype=np.float32, shape=(spec.n_samples, spec.channels))
    f = 30.0 + 7.0 * np.arange(spec.channels)
    for k, s in enumerate(range(0, spec.n_samples, CHUNK)):
        e = min(spec.n_samples, s + CHUNK)
        t = (np.arange(s, e, dtype=np.float64) / spec.rate)[:, None]
        rng = np.random.default_rng([spec.seed, k])
        x = np.sin(2 * np.pi * f * t) + 0.3 * np.sin(2 * np.pi * 3 * f * t + np.arange(spec.channels))
        out[s:e] = (x + 0.02 * rng.standard_normal(x.shape)).astype(np.float32)
    out.flush()
    del out
    return path


@dataclass(frozen=True)
class TimedStep:
    """One tool's write and read of the same data."""

    tool: str
    nbytes: int
    raw_bytes: int
    write_s: float | None
    read_s: float | None
    rss_mb: float | None
    ok: bool
    error: str = ""
    setup: tuple[tuple[str, float], ...] = ()   # one-off costs before the clock started (name, seconds)
    stages: tuple[tuple[str, float], ...] = ()  # where the write's time went (bench/stages.py), tsarchive only

    def to_dict(self) -> dict:
        return asdict(self)


def _timed(tool: str, res: JobResult, raw: int) -> TimedStep:
    if not res.ok:
        return TimedStep(tool, 0, raw, None, None, None, False, res.error)
    setup = tuple((k, float(v)) for k, v in (("torch import", res.extra.get("torch_import_s")),
                                             ("numba kernels", res.extra.get("kernels_s"))) if v is not None)
    stages = tuple((str(k), float(v)) for k, v in res.extra.get("stages", ()))
    return TimedStep(tool, res.nbytes, raw, res.step_s, res.read_s, res.rss_step_mb, True, setup=setup, stages=stages)


def setup_note(steps: list[TimedStep]) -> str:
    """What each child did before its clock started (loaded once per process, not per archive)."""
    parts = [f"{s.tool}: " + ", ".join(f"{k} {v:.1f} s" for k, v in s.setup) for s in steps if s.setup]
    if not parts:
        return ""
    return ("before the write clock (once per process; numba compiles its kernels on first use after "
            "installing and loads them from its cache later): " + "; ".join(parts))


def stages_note(steps: list[TimedStep]) -> str:
    """One line per tool that timed its stages (bench/stages.py), and each step's time against Parquet's."""
    lines = [stage_line(s.tool, s.stages) for s in steps if s.stages]
    pq = next((s for s in steps if s.tool.startswith("parquet") and s.ok), None)
    for s in steps:
        if pq is not None and s is not pq and s.ok and pq.write_s and pq.read_s:
            lines.append(f"{s.tool} against Parquet: pack {s.write_s / pq.write_s:.1f}x its write, "
                         f"read {s.read_s / pq.read_s:.1f}x its read")
    return "\n".join(lines)


def speed_table(steps: list[TimedStep]) -> str:
    body = []
    for s in steps:
        mbps = (lambda sec: None if not sec else s.raw_bytes / 1e6 / sec)
        body.append([s.tool, fmt(s.nbytes / 1e6 if s.ok else None), fmt(s.raw_bytes / s.nbytes if s.nbytes else None),
                     fmt(s.write_s), fmt(mbps(s.write_s)), fmt(s.read_s), fmt(mbps(s.read_s)),
                     fmt(s.rss_mb, ".0f"), "ok" if s.ok else f"FAILED: {s.error}"])
    return render(["tool", "MB", "ratio", "write s", "write MB/s", "read s", "read MB/s", "RSS MiB", ""], body)


def run_speed(spec: LongSpec, budget: str, workdir: Path, train_seconds: float | None,
              log: Callable[[str], None]) -> tuple[list[TimedStep], Path | None]:
    """tsarchive pack/read vs Parquet write/read of the same long array; returns the steps and the archive."""
    src = workdir / "long.npy"
    if not src.exists():
        log(f"writing {spec.channels} x {spec.n_samples} float32 ({spec.raw_bytes / 1e6:.1f} MB)")
        write_long_npy(src, spec)
    archive = workdir / "long.tsarchive"
    log("speed: tsarchive pack + full read (child process)")
    ours = spawn(Job("pack", str(src), str(archive), budget, rate=spec.rate, train_seconds=train_seconds), workdir)
    log("speed: Parquet write + read (child process)")
    pq = spawn(Job("parquet", str(src), str(workdir / "long.parquet")), workdir)
    steps = [_timed(f"tsarchive {budget}", ours, spec.raw_bytes), _timed("parquet lossless", pq, spec.raw_bytes)]
    worst = max((e / p if p > 0 else (0.0 if e == 0 else float("inf")) for e, p in zip(ours.max_err, ours.eps)),
                default=0.0)
    if ours.ok and (worst > 1.0 or len(ours.max_err) != len(ours.eps)):
        steps[0] = replace(steps[0], ok=False, error=f"err/eps {worst:.3f} > 1 against the archive's eps")
    return steps, archive if ours.ok else None


@dataclass(frozen=True)
class MemoryResult:
    npy_bytes: int
    archive_bytes: int
    rss_import_mb: float
    rss_pack_mb: float
    pack_s: float
    ok: bool
    error: str = ""

    def to_dict(self) -> dict:
        return asdict(self)


def run_memory(size_mb: float, budget: str, workdir: Path, train_seconds: float | None,
               log: Callable[[str], None], channels: int = 4) -> MemoryResult:
    """Pack a ``size_mb`` MB float32 ``.npy`` in a child process and report its peak RSS."""
    hours = size_mb * 1e6 / (4 * channels * LONG_RATE * 3600)
    spec = LongSpec(channels=channels, hours=hours, seed=13)
    src = workdir / "memory.npy"
    log(f"memory: writing {spec.raw_bytes / 1e6:.0f} MB .npy")
    write_long_npy(src, spec)
    log("memory: tsarchive pack (child process, no read-back)")
    res = spawn(Job("pack", str(src), str(workdir / "memory.tsarchive"), budget, rate=spec.rate,
                    train_seconds=train_seconds, read_back=False), workdir)
    return MemoryResult(src.stat().st_size, res.nbytes, res.rss_import_mb, res.rss_step_mb, res.step_s, res.ok, res.error)


def memory_table(m: MemoryResult) -> str:
    return render(["npy MB", "archive MB", "RSS after import MiB", "peak RSS after pack MiB", "pack s", ""],
                  [[fmt(m.npy_bytes / 1e6, ".0f"), fmt(m.archive_bytes / 1e6 if m.ok else None),
                    fmt(m.rss_import_mb, ".0f"), fmt(m.rss_pack_mb if m.ok else None, ".0f"),
                    fmt(m.pack_s if m.ok else None, ".1f"), "ok" if m.ok else f"FAILED: {m.error}"]])


@dataclass(frozen=True)
class RandomAccessResult:
    duration_s: float
    channels: int
    full_read_s: float
    minute_read_s: tuple[float, ...]
    spans_equal: bool
    ok: bool
    error: str = ""

    @property
    def median_minute_s(self) -> float | None:
        return statistics.median(self.minute_read_s) if self.minute_read_s else None

    def to_dict(self) -> dict:
        d = asdict(self)
        d["median_minute_s"] = self.median_minute_s
        return d


def run_random_access(archive: Path, spec: LongSpec, workdir: Path, log: Callable[[str], None],
                      places: int = 5) -> RandomAccessResult:
    """One minute of every channel at ``places`` evenly spaced starts vs the full read (child process)."""
    duration = spec.n_samples / spec.rate
    starts = tuple(float(s) for s in np.linspace(0.0, max(0.0, duration - 60.0), places).round(3))
    log("random access: one-minute reads vs full read (child process)")
    res = spawn(Job("random_access", archive=str(archive), minutes=starts), workdir)
    return RandomAccessResult(duration, spec.channels, res.read_s, res.span_s, res.spans_equal, res.ok, res.error)


def random_access_table(r: RandomAccessResult) -> str:
    med = r.median_minute_s
    return render(["archive length", "channels", "full read s", "1-min read s (median)", "speed-up", "spans exact"],
                  [[f"{r.duration_s / 3600:.2f} h", str(r.channels), fmt(r.full_read_s if r.ok else None, ".3f"),
                    fmt(med if r.ok else None, ".4f"), fmt(r.full_read_s / med if r.ok and med else None, ".0f"),
                    ("yes" if r.spans_equal else "NO") if r.ok else f"FAILED: {r.error}"]])
