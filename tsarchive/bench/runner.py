"""The bench's cases and its main loop: ours and the baselines on the same data and budget.

A :class:`Case` is a recording held in memory (for the baselines) plus the
file that tsarchive packs: the repo's sample streams are packed as given,
synthetic and real sets are written to a temporary ``.npy`` first.  For each
budget fraction ``b`` the per-channel budget is ``eps = b x (max - min)`` of
the channel's finite values, and tsarchive is given the same budget as the
spec ``"<100 b>%"``; the eps the archive reports is checked against ours.
"""

from __future__ import annotations

import inspect
import json
import os
import shutil
import subprocess
import sys
import tempfile
import uuid
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Callable

import numpy as np

from tsarchive.errors import BadInput

from . import baselines, realdata, signals
from .archive_bytes import PARTS, ArchiveBytes
from .child import Job, JobResult
from .tables import CaseRow, fmt

STREAM_SUFFIXES = (".npy", ".csv", ".parquet")
# .npy files store no rate; the sample-stream README gives the shaker's.
STREAM_RATES = {"shaker_run.npy": 2000.0}
GROUPS = ("synthetic", "streams", "real")


@dataclass(frozen=True)
class Case:
    """One recording to bench: ``data`` is (n_samples, n_channels) in its source dtype.

    ``noise_sigma`` is set only when Gaussian noise is the case's only
    randomness (then the quantized-noise entropy is its reference limit).
    """

    name: str
    kind: str
    data: np.ndarray
    rate: float
    source: Path | None = None
    noise_sigma: float | None = None
    about: str = ""
    pack_rate: float | None = None


@dataclass(frozen=True)
class BenchConfig:
    """What one bench run measures."""

    budgets: tuple[float, ...] = (1e-2, 1e-3, 1e-4)
    quick: bool = False
    cases: tuple[str, ...] = ("all",)
    streams_dir: Path | None = None
    train_seconds: float | None = None
    workdir: Path | None = None
    samples: int | None = None

    @property
    def synthetic_n(self) -> int:
        return self.samples or (signals.QUICK_N if self.quick else signals.DEFAULT_N)

    @property
    def real_max(self) -> int | None:
        return self.samples or (signals.QUICK_N if self.quick else None)


def default_streams_dir() -> Path | None:
    """``sample_streams/`` beside the tsarchive package (a source checkout), else in the cwd."""
    import tsarchive

    for cand in (Path(tsarchive.__file__).resolve().parents[1] / "sample_streams", Path.cwd() / "sample_streams"):
        if cand.is_dir():
            return cand
    return None


def stream_files(directory: Path | None) -> list[Path]:
    if directory is None or not directory.is_dir():
        return []
    return sorted(p for p in directory.iterdir() if p.suffix in STREAM_SUFFIXES and p.is_file())


def known_names(streams_dir: Path | None) -> dict[str, str]:
    """Every selectable case name and its group."""
    out = {n: "synthetic" for n in signals.FAMILIES}
    out.update({p.stem: "streams" for p in stream_files(streams_dir)})
    out.update({n: "real" for n in realdata.names()})
    return out


def select(tokens: tuple[str, ...], streams_dir: Path | None) -> list[str]:
    """Case names for ``--cases`` tokens (names, group names or ``all``), in table order."""
    known = known_names(streams_dir)
    wanted: set[str] = set()
    for tok in tokens:
        if tok == "all":
            wanted.update(known)
        elif tok in GROUPS:
            wanted.update(n for n, g in known.items() if g == tok)
        elif tok in known:
            wanted.add(tok)
        else:
            raise BadInput(f"unknown case {tok!r}; choose from all, {', '.join(GROUPS)}, {', '.join(known)}")
    return [n for n in known if n in wanted]


def load_case(name: str, cfg: BenchConfig) -> Case | str:
    """The case ``name``, or a one-line note saying why it is skipped."""
    if name in signals.FAMILIES:
        s = signals.make(name, cfg.synthetic_n)
        return Case(name, "synthetic", s.data, s.rate, noise_sigma=s.noise_sigma if s.noise_limited else None,
                    about=s.formula, pack_rate=s.rate)
    if name in realdata.names():
        r = realdata.load(name, cfg.real_max)
        if isinstance(r, str):
            return r
        about = f"{r.spec.package} {r.version}: {r.spec.path}" + (f" ({r.note})" if r.note else "")
        return Case(name, "real", r.data, r.spec.rate, about=about, pack_rate=r.spec.rate)
    for path in stream_files(cfg.streams_dir):
        if path.stem == name:
            import tsarchive

            rate = STREAM_RATES.get(path.name, 1.0) if path.suffix == ".npy" else None
            rec = tsarchive.inspect_source(path, rate=rate)
            return Case(name, "streams", np.asarray(rec.data), rec.rate, source=path, about=path.name, pack_rate=rate)
    return f"unknown case {name!r}"


def channel_eps(data: np.ndarray, b: float) -> np.ndarray:
    """``b x (max - min)`` per channel over finite values (``b x max(1, |x|max)`` for a constant channel)."""
    x = np.asarray(data, dtype=np.float64)
    out = []
    for j in range(x.shape[1]):
        col = x[:, j][np.isfinite(x[:, j])]
        span = float(col.max() - col.min()) if col.size else 0.0
        out.append(b * span if span > 0 else b * max(1.0, float(np.max(np.abs(col))) if col.size else 1.0))
    return np.asarray(out)


def logging_grid(source: Path, rate: float | None) -> np.ndarray:
    """Per-channel logging resolution as tsarchive detects it (``10**-decimals``; NaN when on no grid).

    The classic baselines get the same knowledge (see :func:`baselines.quantize`).
    """
    import tsarchive

    rec = tsarchive.inspect_source(source, rate=rate)
    return np.array([np.nan if c.decimals is None else 10.0 ** (-c.decimals) for c in rec.channels])


def spawn(job: Job, workdir: Path) -> JobResult:
    """Run ``job`` in a fresh interpreter (``python -m tsarchive.bench.child``) and parse its JSON line."""
    import tsarchive

    job_file = workdir / f"job-{uuid.uuid4().hex[:8]}.json"
    job_file.write_text(json.dumps(job.to_dict()))
    env = dict(os.environ)
    root = str(Path(tsarchive.__file__).resolve().parents[1])
    env["PYTHONPATH"] = root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    proc = subprocess.run([sys.executable, "-m", "tsarchive.bench.child", str(job_file)],
                          capture_output=True, text=True, env=env, check=False)
    job_file.unlink(missing_ok=True)
    lines = [ln for ln in proc.stdout.splitlines() if ln.startswith("{")]
    if lines:
        return JobResult.from_dict(json.loads(lines[-1]))
    tail = (proc.stderr.strip().splitlines() or ["no output"])[-1]
    return JobResult(False, error=f"child exited {proc.returncode}: {tail[:300]}")


def _pack_kwargs_ok() -> bool:
    import tsarchive

    return "train_seconds" in inspect.signature(tsarchive.pack).parameters


def _eps_notes(archive_eps: tuple[float, ...], eps: np.ndarray) -> list[str]:
    """Say when the archive's eps differs from ours (tighter is fine: e.g. exact integers)."""
    a = np.asarray(archive_eps, dtype=np.float64)
    show = (lambda v: [f"{e:.4g}" for e in v])
    if a.shape != eps.shape:
        return [f"archive has {a.size} channels, the source {eps.size}"]
    if np.any(a > eps * (1 + 1e-9)):
        return [f"archive eps {show(a)} is LOOSER than the bench eps {show(eps)}"]
    if not np.allclose(a, eps, rtol=1e-6, atol=0):
        return [f"archive eps {show(a)} is tighter than the bench eps {show(eps)} (exact where 0); "
                "err/eps uses the bench eps"]
    return []


def _parts(res: JobResult) -> tuple[tuple[str, int], ...]:
    """The archive's bytes by part, as the pack child measured them (empty when it failed)."""
    if not res.ok or not res.extra.get("bytes"):
        return ()
    b = ArchiveBytes.from_dict(res.extra["bytes"])
    if b.total != res.nbytes:
        raise BadInput(f"archive parts add up to {b.total} bytes, the archive has {res.nbytes}; "
                       "report this bench defect")
    return tuple((k, getattr(b, k)) for k in PARTS)


def run_case(case: Case, cfg: BenchConfig, workdir: Path, log: Callable[[str], None]) -> list[CaseRow]:
    """All budgets of one case: a pack child per budget, the baselines in this process."""
    data = case.data if case.data.ndim == 2 else case.data[:, None]
    finite = np.isfinite(data.astype(np.float64)) if data.dtype.kind == "f" else np.ones(data.shape, bool)
    notes = [] if finite.all() else ["non-finite samples set to 0 for the baselines"]
    base_data = data if finite.all() else np.where(finite, data, 0).astype(data.dtype)
    source = case.source
    if source is None:
        source = workdir / f"{case.name}.npy"
        np.save(source, np.ascontiguousarray(data))
    raw = 4 * data.shape[0] * data.shape[1]
    grid = logging_grid(source, case.pack_rate)
    lossless = {b.id: baselines.run(b, base_data, 0.0) for b in baselines.BASELINES if b.lossless}
    train_s = cfg.train_seconds if _pack_kwargs_ok() else None
    rows = []
    for b in cfg.budgets:
        eps = channel_eps(base_data, b)
        log(f"  {case.name} budget {b:g}: baselines")
        results = dict(lossless)
        results.update({bl.id: baselines.run(bl, base_data, eps, grid)
                        for bl in baselines.BASELINES if not bl.lossless})
        worst_base = max(r.worst_ratio for r in results.values())
        log(f"  {case.name} budget {b:g}: tsarchive pack + read (child process)")
        job = Job("pack", str(source), str(workdir / f"{case.name}-{b:g}.tsarchive"), f"{100 * b:.12g}%",
                  rate=case.pack_rate, train_seconds=train_s)
        res = spawn(job, workdir)
        shutil.rmtree(job.archive, ignore_errors=True)
        row_notes = notes + (_eps_notes(res.eps, eps) if res.ok else [])
        worst = None
        if res.ok and res.max_err:
            worst = float(np.max(np.asarray(res.max_err) / eps)) if len(res.max_err) == len(eps) else float("inf")
        entropy = None
        if case.noise_sigma is not None:
            entropy = float(np.mean([signals.quantized_gaussian_entropy(e, case.noise_sigma) for e in eps]))
        rows.append(CaseRow(
            case=case.name, kind=case.kind, n_samples=data.shape[0], n_channels=data.shape[1], budget=b,
            eps=tuple(float(e) for e in eps), raw_f32_bytes=raw,
            baseline_bytes=tuple((k, results[k].nbytes) for k in (bl.id for bl in baselines.BASELINES)),
            baseline_worst=worst_base,
            ours_bytes=res.nbytes if res.ok else None,
            payload_bytes=int(res.extra.get("payload_bytes", 0)) if res.ok and res.extra else None,
            err_over_eps=worst,
            pack_s=res.step_s if res.ok else None, unpack_s=res.read_s if res.ok else None,
            peak_rss_mb=res.rss_step_mb if res.ok else None, entropy_bits=entropy, noise_sigma=case.noise_sigma,
            failure="" if res.ok else res.error, notes=tuple(row_notes), parts=_parts(res)))
        row = rows[-1]
        if not res.ok:
            log(f"  {case.name} budget {b:g}: tsarchive failed: {res.error}")
        else:
            log(f"  {case.name} budget {b:g}: ratio {row.ours_ratio:.2f} (best classic "
                f"{row.ratio(row.best_classic_bytes):.2f}), err/eps {fmt(row.err_over_eps, '.4f')}, "
                f"pack {res.step_s:.1f} s")
    return rows


def run(cfg: BenchConfig, log: Callable[[str], None]) -> tuple[list[CaseRow], list[str], list[str]]:
    """Every selected case at every budget: ``(rows, case descriptions, skip notes)``."""
    if cfg.streams_dir is None:
        cfg = replace(cfg, streams_dir=default_streams_dir())
    names = select(cfg.cases, cfg.streams_dir)
    rows, about, skipped = [], [], []
    with tempfile.TemporaryDirectory(prefix="tsbench-", dir=cfg.workdir) as tmp:
        for name in names:
            case = load_case(name, cfg)
            if isinstance(case, str):
                skipped.append(case)
                log(case)
                continue
            log(f"{case.name} ({case.kind}, {case.data.shape[0]} x {case.data.shape[-1] if case.data.ndim > 1 else 1})")
            about.append(f"{case.name} [{case.kind}] {case.rate:g} Hz: {case.about}")
            rows += run_case(case, cfg, Path(tmp), log)
    return rows, about, skipped
