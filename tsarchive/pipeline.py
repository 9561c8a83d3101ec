"""pack() and unpack(), read top-down.

Packing::

    ingest  -> read the recording (streams .npy through a memory map)
    budget  -> ε per channel, then an integer grid per channel      (quantize.py)
    windows -> fixed windows of W samples with a level each          (windows.py)
    codes   -> a small autoencoder learned from a bounded sample      (model/)
    residuals -> per window the cheapest integer predictor            (codec.py, predict/)
    entropy -> range coding, integer tables per channel/predictor/class (entropy.py)
    Parquet -> staged archive, checked through the reader, renamed    (store/)

Reading reverses it in :mod:`tsarchive.store.reader` (numpy + pyarrow only).
"""

from __future__ import annotations

import math
import os
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pyarrow as pa

from . import __version__, checksum, entropy
from .budget import parse_budget_spec
from .codec import CODER_ID, FRAC_SAFE_SCALE, TableSet, ae_prediction, choose_modes, proxy_bits
from .errors import BadInput, BoundViolation, BudgetError, Cancelled
from .ingest import read_recording
from .predict import PREDICTORS, Context
from .predict import lpc as lpc_mod
from .quantize import Grid, make_grid, quantize
from .recording import Recording
from .results import ChannelSummary, PackResult, Progress, ProgressFn
from .store import schema as S
from .store.writer import ArchiveWriter, check_target
from .windows import (DEFAULT_WINDOW, MAX_WINDOW, MIN_WINDOW, batches, channel_scale, levels, n_windows,
                      normalise)

DEFAULT_CODE_SIZE = 8
MAX_CODE_SIZE = 64
TRAIN_WINDOWS = 20000        # bound on the training sample, whatever the recording's length
TABLE_SAMPLES = 4_000_000    # bound on the samples used to build each channel's tables
MIN_TABLE_SAMPLES = 8192     # a table class with fewer samples is merged into its neighbour
CHUNK_SAMPLES = 1 << 20      # samples encoded per step (bounds memory)
MIN_MODEL_WINDOWS = 8        # fewer full windows than this: no autoencoder
DECODER_SHARE = 0.01         # decoder parameters per sample of the whole recording (sizing rule)
MAX_MODEL_SHARE = 0.05       # the stored decoder may cost at most this share of the raw sample bytes


def pack(source, archive, budget=None, *, rate: float | None = None, window: int | None = None,
         code_size: int | None = None, force: bool = False, progress: ProgressFn = None, cancel=None,
         train_seconds: float = 60.0, seed: int = 0) -> PackResult:
    """Pack ``source`` (a path or a :class:`Recording`) into the archive directory ``archive``.

    Every sample of the archive is within its channel's budget; the archive
    is decoded through the reader before it is moved into place, and packing
    refuses to finish (raising :class:`BoundViolation`) otherwise.
    """
    t0 = time.perf_counter()
    emit = _emitter(progress, cancel)
    archive = Path(archive)
    emit("read", 0, 1, "reading source")
    rec = source if isinstance(source, Recording) else read_recording(source, rate=rate)
    check_target(archive, force)
    names = [c.name for c in rec.channels]
    spec = parse_budget_spec(budget)
    spec.check_names(names)
    W = _window(window, rec.n_samples)
    K = _code_size(code_size)

    # budget -> ε -> integer grid, per channel
    grids = [_grid_for(rec, j, spec.for_channel(ch.name)) for j, ch in enumerate(rec.channels)]
    emit("read", 1, 1, f"{len(names)} channel(s), {rec.n_samples} samples")

    # windows -> a bounded training sample -> the autoencoder
    scales, model = _train(rec, grids, W, K, emit, train_seconds, seed)
    decoder = None if model is None else model.int_decoder

    with ArchiveWriter(archive, force=force) as writer:
        summaries, table_rows = [], []
        total_windows = sum(n_windows(rec.n_samples, W) for _ in names)
        done = [0]
        lpcs = []
        for j, ch in enumerate(rec.channels):
            lpc, tables = _plan_channel(rec.column(j), grids[j], W, model, scales[j])
            lpcs.append(lpc)
            for (mode, cls), table in sorted(tables.tables.items()):
                table_rows.append({"channel": ch.name, "mode": mode, "table": cls, "coder": CODER_ID,
                                   "freqs": table.to_bytes()})
            stats = _encode_channel(writer, rec.column(j), ch.name, grids[j], W, model, scales[j], lpc, tables,
                                    emit, done, total_windows)
            summaries.append(stats)
        emit("write", 0, 1, "writing tables and model")
        writer.write_tables(pa.Table.from_pylist(table_rows, schema=S.TABLES_SCHEMA))
        writer.write_model({} if decoder is None else decoder.to_arrays())
        archive_bytes = writer.staged_bytes()
        manifest = _manifest(rec, spec, grids, scales, lpcs, W, K, decoder, summaries, archive_bytes)
        stage = writer.finalize(manifest)
        emit("write", 1, 1, "staged")

        # decode our own output through the reader before it may replace anything
        emit("check", 0, 1, "decoding the archive to check every sample")
        from .verifier import verify_archive
        report = verify_archive(stage, against=rec, progress=progress)
        if not report.ok:
            raise BoundViolation("self-check failed, nothing written: " + "; ".join(report.problems[:3]))
        emit("check", 1, 1, "every sample within budget")
        writer.commit()

    from .store.reader import open_archive
    arc = open_archive(archive)
    return PackResult(archive=archive, channels=tuple(_summary(m) for m in arc.channels),
                      source_bytes=manifest["source"]["bytes"], raw_bytes=manifest["summary"]["raw_bytes"],
                      archive_bytes=arc.archive_bytes, ratio=arc.ratio, elapsed_s=time.perf_counter() - t0)


# -- stages --------------------------------------------------------------------
def _grid_for(rec: Recording, j: int, budget) -> Grid:
    ch = rec.channels[j]
    lo, hi, anchor = _finite_range(rec.column(j))
    if budget.kind == "lossless" and ch.decimals is None:
        raise BudgetError(f"channel {ch.name} is not on an integer or decimal grid, so 'lossless' is unavailable; "
                          f"give it a budget such as {ch.name}=0.1%")
    eps = budget.resolve(hi - lo if math.isfinite(hi - lo) else 0.0, ch.name)
    return make_grid(eps, ch.decimals, np.dtype(ch.dtype), anchor)


def _grid_note(budget, grid: Grid, decimals: int | None) -> str:
    """Why a lossy budget ended up exact, in words for reports."""
    if budget.kind == "lossless" or grid.eps > 0:
        return ""
    if grid.kind == "decimal":
        return (f"budget {budget.spec} is finer than half the logged resolution {10.0 ** -grid.decimals:g}, "
                "so the channel is stored exactly")
    return f"budget {budget.spec} of a zero range is 0, so the channel is stored exactly"


def _finite_range(col: np.ndarray) -> tuple[float, float, float]:
    lo, hi, anchor = math.inf, -math.inf, math.nan
    for s in range(0, len(col), CHUNK_SAMPLES):
        x = np.asarray(col[s:s + CHUNK_SAMPLES], dtype=np.float64)
        x = x[np.isfinite(x)]
        if x.size:
            lo, hi = min(lo, float(x.min())), max(hi, float(x.max()))
            if math.isnan(anchor):
                anchor = float(x[0])
    if math.isinf(lo):
        return 0.0, 0.0, 0.0
    return lo, hi, anchor


def _sample_windows(n: int, W: int, count: int) -> np.ndarray:
    full = n // W
    if full == 0:
        return np.zeros(0, dtype=np.int64)
    return np.unique(np.linspace(0, full - 1, min(full, count)).round().astype(np.int64))


def _gather(col: np.ndarray, starts: np.ndarray, W: int) -> np.ndarray:
    return np.stack([np.asarray(col[s:s + W]) for s in starts]) if len(starts) else np.zeros((0, W))


def _train(rec: Recording, grids: list[Grid], W: int, K: int, emit, seconds: float, seed: int):
    """Per-channel scales and the autoencoder (None when the recording is too short for one)."""
    C = len(rec.channels)
    per_channel = max(1, TRAIN_WINDOWS // max(C, 1))
    idx = _sample_windows(rec.n_samples, W, per_channel)
    scales, xs = [], []
    for j in range(C):
        raw = _gather(rec.column(j), idx * W, W)
        q = quantize(raw.ravel(), grids[j])[0].reshape(raw.shape) if raw.size else np.zeros((0, W), np.int64)
        lv = levels(q) if len(q) else np.zeros(0, np.int64)
        scale = channel_scale(q, lv)
        scales.append(scale)
        if len(q) and scale <= FRAC_SAFE_SCALE:
            xs.append(normalise(q, lv, scale, W))
    from .model.spec import choose_hidden, decoder_params
    total_windows = sum(rec.n_samples // W for _ in range(C))
    hidden = choose_hidden(max(total_windows, 1), W, max(K, 1), budget=DECODER_SHARE)
    raw_bytes = sum(rec.n_samples * np.dtype(c.dtype).itemsize for c in rec.channels)
    too_big = 2 * decoder_params(max(K, 1), hidden, W) > MAX_MODEL_SHARE * raw_bytes
    if K == 0 or sum(len(x) for x in xs) < MIN_MODEL_WINDOWS or too_big:
        why = "no code requested" if K == 0 else "recording too short for an autoencoder to pay for its weights"
        emit("train", 1, 1, f"{why}; using the sample-based predictors only")
        return scales, None
    from .model.train import TrainProgress, train_autoencoder  # torch is imported only here

    def on_epoch(p: TrainProgress) -> None:
        emit("train", p.epoch, p.epochs, f"epoch {p.epoch}/{p.epochs}", loss=p.val_loss)

    X = np.concatenate(xs)
    emit("train", 0, 1, f"training on {len(X)} windows")
    model = train_autoencoder(X, K, hidden=hidden, time_limit_s=seconds, seed=seed, progress=on_epoch,
                              cancel=emit.cancel, max_windows=TRAIN_WINDOWS)
    return scales, model


def _predict_batch(x: np.ndarray, grid: Grid, W: int, model, scale: int):
    """Quantize a batch of equal-length windows and compute levels, codes and predictions."""
    q, pos, bits = quantize(x.ravel(), grid)
    q = q.reshape(x.shape)
    lv = levels(q)
    if model is None or scale > FRAC_SAFE_SCALE:
        codes = np.zeros((len(q), 0), dtype=np.int8)
        return q, pos, bits, lv, codes, None
    codes = model.encode(normalise(q, lv, scale, W))
    ae = ae_prediction(model.int_decoder, codes, lv, scale, x.shape[1])
    return q, pos, bits, lv, codes, ae


def _plan_channel(col: np.ndarray, grid: Grid, W: int, model, scale: int):
    """LPC coefficients and entropy tables per (predictor, activity class), from a bounded sample of windows."""
    n = len(col)
    idx = _sample_windows(n, W, max(1, TABLE_SAMPLES // W))
    batches_ = []
    for part in np.array_split(idx, max(1, len(idx) // 512)) if len(idx) else []:
        q, _, _, lv, _, ae = _predict_batch(_gather(col, part * W, W), grid, W, model, scale)
        batches_.append((q, Context(lv, ae)))
    tail = n - (n // W) * W
    if tail:  # the short last window must be codable too
        q, _, _, lv, _, ae = _predict_batch(np.asarray(col[n - tail:])[None, :], grid, W, model, scale)
        batches_.append((q, Context(lv, ae)))
    full = [(q, c) for q, c in batches_ if q.shape[1] == W]
    lpc = lpc_mod.fit(np.concatenate([q for q, _ in full]), np.concatenate([c.level for _, c in full]),
                      proxy_bits) if full else lpc_mod.LpcCoefs(())
    groups: dict[int, dict[int, list[np.ndarray]]] = {}
    for q, c in batches_:
        modes, classes, res = choose_modes(q, Context(c.level, c.ae, lpc), None)
        for m, k in set(zip(modes.tolist(), classes.tolist())):
            groups.setdefault(m, {}).setdefault(k, []).append(res[(modes == m) & (classes == k)].ravel())
    tables = {}
    for m, by_class in groups.items():
        for cls, parts in _merge_classes(by_class):
            tables[(m, cls)] = entropy.build_table(np.concatenate(parts))
    return lpc, TableSet(tables)


def _merge_classes(by_class: dict[int, list[np.ndarray]]) -> list[tuple[int, list[np.ndarray]]]:
    """Merge neighbouring activity classes until each has enough samples for its table to pay."""
    total = sum(sum(len(a) for a in v) for v in by_class.values())
    need = max(MIN_TABLE_SAMPLES, total // 32)
    out: list[tuple[int, list[np.ndarray]]] = []
    cur, cur_n, weighted = [], 0, 0.0
    for cls in sorted(by_class):
        n = sum(len(a) for a in by_class[cls])
        cur += by_class[cls]
        cur_n += n
        weighted += cls * n
        if cur_n >= need:
            out.append((int(round(weighted / cur_n)), cur))
            cur, cur_n, weighted = [], 0, 0.0
    if cur:
        if out:  # a thin top end joins the last table
            rep, parts = out.pop()
            out.append((rep, parts + cur))
        else:
            out.append((int(round(weighted / max(cur_n, 1))), cur))
    return out


def _encode_channel(writer, col, name, grid: Grid, W, model, scale, lpc, tables, emit, done, total) -> dict:
    n = len(col)
    nw = n_windows(n, W)
    worst, bytes_est, n_exc = 0.0, 0, 0
    mode_counts = {p.name: 0 for p in PREDICTORS.values()}
    per_chunk = max(1, CHUNK_SAMPLES // W)
    for w0 in range(0, nw, per_chunk):
        rows = []
        w1 = min(nw, w0 + per_chunk)
        for a, b, L in batches(n, W, w0, w1):
            x = np.asarray(col[a * W:a * W + (b - a) * L]).reshape(b - a, L)
            t, w64 = _encode_batch(x, a, name, grid, W, model, scale, lpc, tables)
            rows.append(t)
            worst = max(worst, w64)
        table = pa.concat_tables(rows)
        for m, c in zip(*np.unique(table.column("mode").to_numpy(), return_counts=True)):
            mode_counts[PREDICTORS[int(m)].name] += int(c)
        bytes_est += int(pa.compute.sum(pa.compute.binary_length(table.column("residual"))).as_py() or 0)
        bytes_est += table.num_rows * (8 + (model.code_size if model is not None else 0))
        exc = pa.compute.list_value_length(table.column("exc_pos")).to_numpy(zero_copy_only=False)
        n_exc += int(exc.sum())
        writer.add_windows(table)
        done[0] += w1 - w0
        emit("encode", done[0], total, f"{name}: window {w1}/{nw}")
    return {"worst_error": worst, "bytes_est": bytes_est + 12 * n_exc, "n_exceptions": n_exc, "modes": mode_counts}


def _encode_batch(x, first_window, name, grid: Grid, W, model, scale, lpc, tables) -> tuple[pa.Table, float]:
    """Rows for a batch of equal-length windows, and their worst error in float64."""
    nb, L = x.shape
    q, pos, bits, lv, codes, ae = _predict_batch(x, grid, W, model, scale)
    modes, classes, res = choose_modes(q, Context(lv, ae, lpc), tables)
    payloads: list[bytes] = [b""] * nb
    for m, k in set(zip(modes.tolist(), classes.tolist())):
        sel = np.flatnonzero((modes == m) & (classes == k))
        for i, p in zip(sel, entropy.encode_many(res[sel], tables[(m, k)])):
            payloads[i] = p
    xh = grid.dequantize(q.ravel(), pos, bits).reshape(nb, L)
    x64, xh64 = x.astype(np.float64), xh.astype(np.float64)
    with np.errstate(invalid="ignore", over="ignore"):
        err = np.where(np.isfinite(x64), np.abs(xh64 - x64), 0.0)
        preview = grid.to_out(grid.values(lv[:, None] + np.zeros((1, L), np.int64) if ae is None else ae))
        fin = np.isfinite(x64)
        dev = np.where(fin, x64 - preview.astype(np.float64), 0.0)
        score = np.sqrt((dev * dev).sum(axis=1) / np.maximum(fin.sum(axis=1), 1))
    wpos = pos // L
    worst = err.max(axis=1) if L else np.zeros(nb)
    return pa.table({
        "channel": [name] * nb,
        "window": np.arange(first_window, first_window + nb, dtype=np.int32),
        "start": (np.arange(first_window, first_window + nb, dtype=np.int64) * W),
        "n": np.full(nb, L, dtype=np.int32),
        "mode": modes.astype(np.int8),
        "table": classes.astype(np.int8),
        "level": lv,
        "code": list(codes.astype(np.int8)),
        "coder": [CODER_ID] * nb,
        "residual": payloads,
        "exc_pos": [(pos[wpos == i] % L).astype(np.int32) for i in range(nb)],
        "exc_bits": [bits[wpos == i] for i in range(nb)],
        "crc32": np.array([checksum.window_crc(xh[i]) for i in range(nb)], dtype=np.int64),
        "worst_error": _round_up32(worst),
        "score": np.nan_to_num(score, nan=0.0, posinf=np.finfo(np.float32).max).clip(0, np.finfo(np.float32).max)
        .astype(np.float32),
    }, schema=S.WINDOWS_SCHEMA), float(worst.max(initial=0.0))


def _round_up32(x: np.ndarray) -> np.ndarray:
    """float32 values never below ``x`` (so a stored worst error never understates)."""
    with np.errstate(over="ignore"):
        y = x.astype(np.float32)
    low = y.astype(np.float64) < x
    y[low] = np.nextafter(y[low], np.float32(np.inf))
    return y


# -- manifest ------------------------------------------------------------------
def _manifest(rec: Recording, spec, grids, scales, lpcs, W, K, decoder, summaries, archive_bytes) -> dict:
    src = rec.source
    src_bytes = src.stat().st_size if src is not None and src.is_file() else int(rec.data.nbytes)
    raw_bytes = sum(rec.n_samples * np.dtype(c.dtype).itemsize for c in rec.channels)
    est_total = sum(s["bytes_est"] for s in summaries) or 1
    channels = []
    for j, ch in enumerate(rec.channels):
        s, g = summaries[j], grids[j]
        share = archive_bytes * s["bytes_est"] / est_total
        raw = rec.n_samples * np.dtype(ch.dtype).itemsize
        budget = spec.for_channel(ch.name)
        channels.append({
            **ch.to_dict(), "rate": rec.rate, "start": _iso(rec.start), "n_samples": rec.n_samples,
            "budget": budget.spec, "eps": g.eps, "grid": g.to_dict(), "scale": int(scales[j]),
            "lpc": lpcs[j].to_dict(), "note": _grid_note(budget, g, ch.decimals),
            "summary": {"worst_error": s["worst_error"], "used_pct": _used(s["worst_error"], g.eps),
                        "ratio": raw / share if share else math.inf,
                        "bits_per_sample": 8 * share / max(rec.n_samples, 1),
                        "n_exceptions": s["n_exceptions"], "modes": s["modes"]},
        })
    return {
        "format": S.FORMAT_NAME, "format_version": S.FORMAT_VERSION, "tool_version": __version__,
        "created_utc": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "source": {"name": src.name if src is not None else "", "bytes": int(src_bytes),
                   "sha256": checksum.file_sha256(src) if src is not None and src.is_file() else "",
                   "shape": list(rec.shape or rec.data.shape)},
        "window": W, "code_size": K if decoder is not None else 0, "budget_spec": spec.spec,
        "model": None if decoder is None else decoder.config(),
        "channels": channels,
        "summary": {"raw_bytes": int(raw_bytes), "archive_bytes_before_manifest": int(archive_bytes),
                    "ratio": raw_bytes / archive_bytes if archive_bytes else math.inf},
    }


def _summary(m) -> ChannelSummary:
    return ChannelSummary(name=m.name, unit=m.unit, budget=m.budget, eps=m.eps, worst_error=m.worst_error,
                          used_pct=m.used_pct, ratio=m.ratio, bits_per_sample=m.bits_per_sample,
                          n_samples=m.n_samples, modes=dict(m.modes))


def _used(worst: float, eps: float) -> float:
    return 100.0 * worst / eps if eps > 0 else (0.0 if worst == 0 else math.inf)


def _iso(t: datetime | None) -> str | None:
    return None if t is None else t.astimezone(timezone.utc).isoformat().replace("+00:00", "Z")


def _window(window: int | None, n: int) -> int:
    if window is None:
        return DEFAULT_WINDOW
    if not (MIN_WINDOW <= int(window) <= MAX_WINDOW):
        raise BadInput(f"window {window} is out of range; choose {MIN_WINDOW}..{MAX_WINDOW} samples")
    return int(window)


def _code_size(k: int | None) -> int:
    if k is None:
        return DEFAULT_CODE_SIZE
    if not (0 <= int(k) <= MAX_CODE_SIZE):
        raise BadInput(f"code size {k} is out of range; choose 0..{MAX_CODE_SIZE} (0 = no autoencoder)")
    return int(k)


class _emitter:
    """Progress events with ETA, and the cancellation check between steps."""

    def __init__(self, fn: ProgressFn, cancel) -> None:
        self.fn, self.cancel, self.t_encode = fn, cancel, None

    def __call__(self, stage: str, done: int, total: int, message: str = "", loss: float | None = None) -> None:
        if self.cancel is not None and self.cancel.is_set():
            raise Cancelled("packing cancelled; nothing was written")
        if self.fn is None:
            return
        eta = None
        if stage == "encode":
            now = time.perf_counter()
            if self.t_encode is None:
                self.t_encode = (now, done)
            elif done > self.t_encode[1]:
                t, d = self.t_encode
                eta = (now - t) * (total - done) / (done - d)
        self.fn(Progress(stage, int(done), int(total), message, loss, eta))
