"""pack(), read top-down.

Packing::

    ingest  -> read the recording (streams .npy through fresh memory maps)
    budget  -> ε per channel, then an integer grid per channel      (budget.py, quantize.py)
    windows -> fixed windows of W samples with a level each          (windows.py; W chosen from
               1024 … 8192 by the size of a planned and coded sample, unless given)
    codes   -> a small autoencoder learned from a bounded sample      (model/; on a helper thread)
    plan    -> LPC coefficients, entropy tables, does the model pay?  (encoder.py)
    residuals -> per window the cheapest integer predictor            (codec.py, predict/)
    entropy -> range coding, integer tables per channel/predictor/class (entropy.py, rangecoder.py)
    Parquet -> staged archive, checked through the reader, renamed    (store/)

While the autoencoder trains, the main thread plans without it and (unless a
code size was asked for) encodes every channel without it; the staging is
dropped and the channels encoded again only if the model pays.

Reading reverses it in :mod:`tsarchive.store.reader` (numpy, pyarrow and the compiled kernels; no torch).
"""

from __future__ import annotations

import math
import threading
import time
from concurrent.futures import Future, ThreadPoolExecutor, wait
from dataclasses import replace
from functools import cache
from pathlib import Path

import numpy as np
import pyarrow as pa

from .budget import parse_budget_spec
from .codec import FRAC_SAFE_SCALE
from .encoder import TABLE_SAMPLES, ChannelPlan, coded_bytes, encode_batch, plan_channel, sample_windows
from .errors import BadInput, BoundViolation, BudgetError, Cancelled
from .ingest import read_recording
from .predict import PREDICTORS
from .quantize import Grid, make_grid, quantize
from .ranges import finite_ranges
from .recording import Recording
from .results import ChannelSummary, PackResult, Progress, ProgressFn
from .workers import workers as worker_count
from .store.manifest import build_manifest
from .store.sidecar import stage_sidecar
from .store.timeaxis import check_axis
from .store.claim import claim_target
from .index import build_index
from .store.writer import ArchiveWriter, check_target
from .windows import DEFAULT_WINDOW, MAX_WINDOW, MIN_WINDOW, batches, channel_scale, levels, n_windows, normalise

DEFAULT_CODE_SIZE = 8
MAX_CODE_SIZE = 64
TRAIN_WINDOWS = 20000        # bound on the training sample, whatever the recording's length
CHUNK_SAMPLES = 1 << 20      # samples per channel encoded per step (bounds memory)
BATCH_SAMPLES = 1 << 18      # samples per encoder call within a step (bounds each thread's temporaries)
MIN_MODEL_WINDOWS = 8        # fewer full windows than this: no autoencoder
DECODER_SHARE = 0.01         # decoder parameters per sample of the whole recording (sizing rule)
MAX_MODEL_SHARE = 0.05       # the stored decoder may cost at most this share of the raw sample bytes
BYTES_PER_PARAM = 2.4        # measured size of a stored decoder parameter (int16 in Parquet + zstd)
BITS_PER_CODE = 10.0         # measured size of one stored code value (list<int8> in Parquet + zstd)
WINDOW_CHOICES = tuple(DEFAULT_WINDOW << k for k in range(4))   # without --window: 1024 … 8192
WINDOW_EVAL_SAMPLES = 1 << 18  # samples (all channels) that the window choice plans and codes
WINDOW_EVAL_MIN = 1 << 15      # per channel at least (and no choice on a recording shorter than this)
WINDOW_EVAL_CHANNELS = 4       # channels (evenly spread) that the window choice looks at
WINDOW_MARGIN = 0.03           # a longer window must save this share of the estimate (its noise is ~±3 %)
WINDOW_ROW_BYTES = 10.5        # measured framing of one window row (CRC, level, score, lengths; Parquet+zstd)
PROBE_SECONDS = 6.0          # nominal training seconds of the probe model that decides whether to train longer
# Training is bounded by work, never by the clock (the archive must not depend on the machine's speed or load):
# a nominal second is this many multiply-adds of training steps (one BLAS thread did 4.6e9 a second at
# W = 1024 and 2.2e9 at W = 256 on the 2-core development machine, sharing it with other work).
TRAIN_WORK_PER_SECOND = 4e9
PROBE_SHARE = 0.25           # train fully only if the probe already saves this share of the model's bytes
PROBE_EVAL_SAMPLES = 1 << 18  # per channel: the probe's saving is estimated on about this many sampled samples


def pack(source, archive, budget=None, *, rate: float | None = None, window: int | None = None,
         code_size: int | None = None, force: bool = False, progress: ProgressFn = None, cancel=None,
         train_seconds: float = 60.0, seed: int = 0, read_options=None, segment: int | None = None) -> PackResult:
    """Pack ``source`` (a path or a :class:`Recording`) into the archive directory ``archive``.

    Every sample of the archive is within its channel's budget; the archive
    is decoded through the reader before it is moved into place, and packing
    refuses to finish (raising :class:`BoundViolation`) otherwise.

    ``code_size=None`` trains an autoencoder with the default code size and
    keeps it only where its estimated saving exceeds the bytes of its weights
    and codes; an explicit ``code_size > 0`` always keeps it (for browsing
    by codes); ``0`` packs without one.  Training is bounded by a work
    budget of ``train_seconds`` nominal seconds (``TRAIN_WORK_PER_SECOND``
    multiply-adds each, about a second of one core) whatever the recording's
    length, and never by the clock: the same source, settings and tool
    version give the same archive bytes on any machine; without an explicit
    code size a probe model is trained for ``PROBE_SECONDS`` first and the
    full run happens only if the probe already saves ``PROBE_SHARE`` of the
    model's own bytes.  ``window=None`` picks the window length of
    ``WINDOW_CHOICES`` that a planned and coded sample says is smallest
    (``DEFAULT_WINDOW`` when a code size > 0 is given: codes are asked for to
    browse by them, in the finer segments).  ``read_options``
    (:class:`~tsarchive.ingest.ReadOptions`) says how to read a source path.
    ``segment`` is the learned index's samples per browse segment (None: :mod:`tsarchive.index`'s default).
    """
    t0 = time.perf_counter()
    emit = _emitter(progress, cancel)
    archive = Path(archive)
    emit("read", 0, 1, "reading source")
    rec = source if isinstance(source, Recording) else read_recording(source, rate=rate, options=read_options)
    check_axis(rec)
    check_target(archive, force)
    names = [c.name for c in rec.channels]
    spec = parse_budget_spec(budget)
    spec.check_names(names)
    K = _code_size(code_size)
    explicit = code_size is not None
    # 0: chosen below from a sample; codes asked for (browsing by codes) keep the finer default segments
    W = _window(window, rec.n_samples) if window is not None else (DEFAULT_WINDOW if explicit and K else 0)
    probe = not explicit and train_seconds > PROBE_SECONDS

    # The autoencoder trains on a second thread (numpy releases the GIL) while this one plans and,
    # unless a code size was asked for, already encodes without it: a model that pays is the
    # exception, and then the speculative archive is dropped and the channels are encoded again.
    plain_ready: Future = Future()                   # the plan without a model, for the training thread
    with claim_target(archive, force), ThreadPoolExecutor(1) as helper:   # no other run may write this target meanwhile
        if K > 0:
            helper.submit(_import_trainer)           # the trainer's import overlaps the reading below
        try:
            # budget -> ε -> integer grid, per channel
            grids, notes = _grids(rec, spec)
            emit("read", 1, 1, f"{len(names)} channel(s), {rec.n_samples} samples")
            if not W:
                W, why = _choose_window(rec, grids)
                emit("read", 1, 1, why)

            # windows -> a bounded sample (for training and planning) -> per-channel scales
            sample = sample_windows(rec.n_samples, W, max(1, TABLE_SAMPLES // W))
            sampled = _gather(rec, sample, W)       # one (windows, W) array per channel, in its own dtype
            scales = _training_set(sampled, grids, W, len(rec.channels), windows=False)[0]
            tail = _tail(rec, W)
            nwin = n_windows(rec.n_samples, W)

            def plan(model, base=None, quick=False):
                # quick: the probe's gain, judged on every k-th sampled window only (its plans encode nothing)
                step = max(1, len(sample) * W // PROBE_EVAL_SAMPLES) if quick else 1
                return [plan_channel(sampled[j][::step], None if tail is None or quick else tail[:, j], nwin,
                                     grids[j], W, model, scales[j], None if base is None else base[j],
                                     subset=step > 1)
                        for j in range(len(names))]

            hopeless = threading.Event()      # set when even a perfect model could not pay: training stops

            def train_and_plan(seconds: float, quick: bool):
                # the training windows live only while training (a full run after a probe makes them again)
                try:
                    model = _train(rec, _training_set(sampled, grids, W, len(names))[1], W, K, emit, seconds, seed,
                                   cancel=_Either(emit, hopeless))
                except Cancelled:
                    if hopeless.is_set() and not emit.is_set():
                        return None, None
                    raise
                _release_memory()
                if model is None:
                    return None, None
                plans = plan(model, plain_ready.result(), quick)
                _release_memory()
                return model, plans

            training = helper.submit(train_and_plan, PROBE_SECONDS if probe else train_seconds, probe)
            emit("encode", 0, 1, "choosing predictors and entropy tables")
            plain = plan(None)
            plain_ready.set_result(plain)
            _release_memory()
            # the model can save at most the whole residual payload: when that is below its own bytes, stop it
            ceiling = _payload_ceiling(plain, nwin, len(sample) + (tail is not None))
            bound = _model_bytes(rec, W, K, nwin)
            if not explicit and K and ceiling <= (PROBE_SHARE if probe else 1.0) * bound:
                hopeless.set()
            job = dict(archive=archive, force=force, rec=rec, spec=spec, grids=grids, scales=scales, notes=notes,
                       names=names, W=W, K=K, emit=emit, progress=progress, segment=segment, seed=seed,
                       read_options=None if isinstance(source, Recording) else read_options)

            def judged():
                """The trained model's plan and account, and whether it is worth (re)encoding with it."""
                model, plans = training.result()
                gain, cost = _model_account(model, plans, nwin, K)
                wanted = model is not None and (gain > PROBE_SHARE * cost if probe else gain > cost)
                return model, plans, gain, cost, wanted

            if explicit:
                model, plans, gain, cost, _ = judged()
                manifest = _write(job, *_kept(model, plans, plain, gain, cost, True, False))
            else:
                if hopeless.is_set():
                    note = (f"autoencoder not trained: at most {ceiling:.0f} B to save, below "
                            f"{'1/4 of ' if probe else ''}its {bound:.0f} B")

                    def decide():
                        wait([training])            # the stopped trainer has had its say: this is the last
                        emit("train", 1, 1, note)
                        return note
                else:
                    decide = (lambda: _decide(judged, plain, probe))
                try:
                    manifest = _write(job, None, plain, None, decide=decide)
                except _WorthAModel as better:
                    model, plans = better.model, better.plans
                    if probe:
                        emit("train", 0, 1, f"the probe model saves {better.gain:.0f} B against "
                                            f"{better.cost:.0f} B: training it fully")
                        model = _train(rec, _training_set(sampled, grids, W, len(names))[1], W, K, emit,
                                       train_seconds, seed)
                        plans = plain if model is None else plan(model, plain)
                    gain, cost = _model_account(model, plans, nwin, K)
                    manifest = _write(job, *_kept(model, plans, plain, gain, cost, False, probe))
        except BaseException as exc:
            emit.stop.set()          # a failed or cancelled pack stops the training thread too
            if not plain_ready.done():
                plain_ready.set_exception(Cancelled(f"packing stopped ({exc})"))
            raise

    from .store.reader import open_archive
    arc = open_archive(archive)
    return PackResult(archive=archive, channels=tuple(_summary(m) for m in arc.channels),
                      source_bytes=manifest["source"]["bytes"], raw_bytes=manifest["summary"]["raw_bytes"],
                      archive_bytes=arc.archive_bytes, ratio=arc.ratio, elapsed_s=time.perf_counter() - t0)


class _Either:
    """A cancel flag that is set when either of two flags is."""

    def __init__(self, a, b) -> None:
        self.a, self.b = a, b

    def is_set(self) -> bool:
        return self.a.is_set() or self.b.is_set()


def _payload_ceiling(plans: list[ChannelPlan], nwin: int, sampled: int) -> float:
    """Estimated bytes of all residuals without a model (the proxy over-counts sparse residuals, so
    this is generous): no model can save more than this."""
    return sum(p.plain_bits for p in plans) * nwin / max(sampled, 1) / 8


def _decoder_size(rec: Recording, W: int, K: int) -> tuple[int, int]:
    """(hidden width, decoder parameters) of the autoencoder sized for this recording."""
    from .model.spec import choose_hidden, decoder_params
    hidden = choose_hidden(max((rec.n_samples // W) * len(rec.channels), 1), W, max(K, 1), budget=DECODER_SHARE)
    return hidden, decoder_params(max(K, 1), hidden, W)


def _model_cost(n_params: int, K: int, nwin: int, C: int) -> float:
    """Bytes of a decoder's weights and of every window's code."""
    return BYTES_PER_PARAM * n_params + BITS_PER_CODE / 8 * K * nwin * C


def _model_bytes(rec: Recording, W: int, K: int, nwin: int) -> float:
    """Bytes of the decoder's weights and the codes that a model for this recording would cost."""
    return _model_cost(_decoder_size(rec, W, K)[1], K, nwin, len(rec.channels))


class _WorthAModel(Exception):
    """Raised inside a speculative write (whose staging is then dropped): the model pays, encode again."""

    def __init__(self, model, plans, gain: float, cost: float) -> None:
        super().__init__("the autoencoder pays for itself")
        self.model, self.plans, self.gain, self.cost = model, plans, gain, cost


def _decide(judged, plain, probe: bool):
    """After the speculative encoding: the note for an archive without the model, or _WorthAModel."""
    model, plans, gain, cost, wanted = judged()
    if wanted:
        raise _WorthAModel(model, plans, gain, cost)
    return _keep_model(model, gain, cost, False, probed=probe)[1]


def _kept(model, plans, plain, gain: float, cost: float, explicit: bool, probed: bool):
    """(model or None, plans, note) for the final encoding."""
    model, note = _keep_model(model, gain, cost, explicit, probed=probed)
    return model, (plans if model is not None else plain), note


def _write(job: dict, model, plans, model_note, decide=None) -> dict:
    """Encode every channel, write model and manifest, decode the staged archive through the reader
    and move it into place; ``decide()`` (speculative writes) runs after encoding and returns the
    model note or raises to drop the staging.  Returns the manifest."""
    emit, rec = job["emit"], job["rec"]
    decoder = None if model is None else model.int_decoder
    tables = [p.tables if model is not None else p.tables_plain for p in plans]
    with ArchiveWriter(job["archive"], force=job["force"], with_code=decoder is not None) as writer:
        summaries = _encode(writer, rec, job["names"], job["grids"], job["W"], model, job["scales"], plans, tables,
                            emit)
        if decide is not None:
            model_note = decide()
        _release_memory()
        emit("write", 0, 1, "writing the model and the manifest")
        writer.write_model({} if decoder is None else decoder.to_arrays())
        sidecar = stage_sidecar(writer.stage, rec)     # time axis, notes, text columns
        writer.write_index(build_index(rec, job["segment"], job["seed"]))   # index.parquet (tsarchive/index)
        manifest = build_manifest(rec, job["spec"], job["grids"], job["scales"], [p.lpc for p in plans], tables,
                                  job["notes"], job["W"], job["K"], decoder, model_note, summaries,
                                  writer.staged_bytes())
        if job["read_options"] is not None and job["read_options"].to_dict():   # so verify re-reads the source alike
            manifest["read_options"] = job["read_options"].to_dict()
        stage = writer.finalize({**manifest, **sidecar})
        emit("write", 1, 1, "staged")

        # decode our own output through the reader before it may replace anything
        emit("check", 0, 1, "decoding the archive to check every sample")
        from .verifier import verify_archive
        report = verify_archive(stage, against=rec, progress=job["progress"])
        if not report.ok:
            raise BoundViolation("self-check failed, nothing written: " + "; ".join(report.problems[:3]))
        emit("check", 1, 1, "every sample within budget")
        writer.commit()
    return manifest


def _release_memory() -> None:
    """Return freed heap pages to the system (glibc ``malloc_trim``; a no-op elsewhere).

    Each thread allocates from its own malloc arena, and blocks freed there stay
    resident until trimmed: without this the training thread's and the encoder
    threads' freed temporaries add up in the peak resident set.
    """
    trim = _malloc_trim()
    if trim is not None:
        trim(0)


@cache
def _malloc_trim():
    try:
        import ctypes
        return ctypes.CDLL(None).malloc_trim
    except (OSError, AttributeError):
        return None


def _import_trainer() -> None:
    from .model import train  # noqa: F401


# -- stages --------------------------------------------------------------------
def _grids(rec: Recording, spec) -> tuple[list[Grid], list[str]]:
    ranges = finite_ranges(rec)
    grids, notes = [], []
    for ch, r in zip(rec.channels, ranges):
        budget = spec.for_channel(ch.name)
        if budget.kind == "lossless" and ch.decimals is None:
            raise BudgetError(f"channel {ch.name} is not on an integer or decimal grid, so 'lossless' is "
                              f"unavailable; give it a budget such as {ch.name}=0.1%")
        eps = budget.resolve(r.span, ch.name)
        g = make_grid(eps, ch.decimals, np.dtype(ch.dtype), r.anchor, r.mult, origin=r.origin)
        if r.no_mark:
            raise BadInput(f"channel {ch.name} has missing samples but no value of {ch.dtype} is free to mark "
                           "them; fill the gaps or store the column in a wider integer type")
        if r.kept or r.missing is not None:
            g = replace(g, verbatim=r.kept, missing=r.missing)
        grids.append(g)
        note = _grid_note(budget, g)
        if budget.kind == "pct" and r.kept and r.span_all != r.span:
            left = ", ".join(f"{v:g}" for v in r.kept)
            note = "; ".join(filter(None, [note, (
                f"{left} left out of the range: {budget.spec} is {eps:.6g} {ch.unit}".rstrip() +
                f", not {budget.resolve(r.span_all, ch.name):.6g} {ch.unit}".rstrip())]))
        notes.append(note)
    return grids, notes


def _grid_note(budget, grid: Grid) -> str:
    """Why a lossy budget ended up exact, in words for reports."""
    if budget.kind == "lossless" or grid.eps > 0:
        return ""
    if grid.kind == "decimal":
        return (f"budget {budget.spec} cannot merge distinct logged values (resolution "
                f"{grid.mult * 10.0 ** -grid.decimals:g}), "
                "so the channel is stored exactly")
    return f"budget {budget.spec} of a zero range is 0, so the channel is stored exactly"


def _gather(rec: Recording, idx: np.ndarray, W: int) -> list[np.ndarray]:
    """Windows ``idx`` (sorted) of every channel: one ``(len(idx), W)`` array per channel, each in
    the channel's own dtype (masked where samples are missing).

    Runs of consecutive windows (at most 256) share one read; a sparse
    sample reads window by window, so memory stays at the sample's size
    however long the recording.
    """
    first = rec.rows(0, 1)
    out = []
    for j in range(len(rec.channels)):
        col = first[:, j]
        make = np.ma.masked_all if isinstance(col, np.ma.MaskedArray) else np.empty
        out.append(make((len(idx), W), dtype=col.dtype))
    breaks = np.flatnonzero(np.diff(idx) != 1) + 1
    for run in np.split(np.arange(len(idx)), breaks) if len(idx) else []:
        for k in range(0, len(run), 256):
            part = run[k:k + 256]
            a, b = int(idx[part[0]]), int(idx[part[-1]]) + 1
            block = rec.rows(a * W, b * W)
            for j, o in enumerate(out):
                o[part] = block[:, j].reshape(b - a, W)
    return out


def _tail(rec: Recording, W: int) -> np.ndarray | None:
    n = rec.n_samples
    return rec.rows((n // W) * W, n) if n % W else None


def _training_set(sampled: list[np.ndarray], grids: list[Grid], W: int, C: int, windows: bool = True):
    """Per-channel scales and (with ``windows``) the normalised training windows of a bounded pick
    of the sample."""
    per_channel = max(1, TRAIN_WINDOWS // max(C, 1))
    k = len(sampled[0]) if C else 0
    pick = np.unique(np.linspace(0, k - 1, min(k, per_channel)).round().astype(np.int64)) \
        if k else np.zeros(0, np.int64)
    scales, xs = [], []
    for j in range(C):
        raw = sampled[j][pick]
        q = quantize(raw.ravel(), grids[j])[0].reshape(raw.shape) if raw.size else np.zeros((0, W), np.int64)
        lv = levels(q) if len(q) else np.zeros(0, np.int64)
        scale = channel_scale(q, lv)
        scales.append(scale)
        if windows and len(q) and scale <= FRAC_SAFE_SCALE:
            xs.append(normalise(q, lv, scale, W))
    return scales, xs


def _train(rec: Recording, xs: list[np.ndarray], W: int, K: int, emit, seconds: float, seed: int, cancel=None):
    """The autoencoder, or None when the recording is too short for one (or no code is asked for)."""
    hidden, n_params = _decoder_size(rec, W, K)
    raw_bytes = sum(rec.n_samples * np.dtype(c.dtype).itemsize for c in rec.channels)
    too_big = 2 * n_params > MAX_MODEL_SHARE * raw_bytes
    if K == 0 or sum(len(x) for x in xs) < MIN_MODEL_WINDOWS or too_big:
        why = "no code requested" if K == 0 else "recording too short for an autoencoder to pay for its weights"
        emit("train", 1, 1, f"{why}; using the sample-based predictors only")
        return None
    from .model.train import TrainProgress, train_autoencoder

    def on_epoch(p: TrainProgress) -> None:
        emit("train", p.epoch, p.epochs, f"epoch {p.epoch}/{p.epochs}", loss=p.val_loss)

    X = np.concatenate(xs)
    emit("train", 0, 1, f"training on {len(X)} windows")
    # a work budget, not a time limit: the same model on any machine, however fast or busy
    return train_autoencoder(X, K, hidden=hidden, work=seconds * TRAIN_WORK_PER_SECOND, seed=seed,
                             progress=on_epoch, cancel=emit if cancel is None else cancel, max_windows=TRAIN_WINDOWS)


def _model_account(model, plans: list[ChannelPlan], nwin: int, K: int) -> tuple[float, float]:
    """(estimated bytes the autoencoder saves, bytes of its weights and codes); (0, 0) without one."""
    if model is None:
        return 0.0, 0.0
    gain = sum(p.ae_gain_bits for p in plans) / 8
    cost = _model_cost(model.int_decoder.n_params, K, nwin, len(plans))
    return gain, cost


def _keep_model(model, gain: float, cost: float, explicit: bool, probed: bool = False):
    """Keep the autoencoder only where its estimated saving beats its own bytes (unless asked for)."""
    if model is None:
        return None, "no autoencoder (too short a recording, or code size 0)"
    if explicit:
        return model, f"autoencoder kept as asked (estimated saving {gain:.0f} B, cost {cost:.0f} B)"
    if gain <= cost:
        how = f" after a {PROBE_SECONDS:g} s probe" if probed and gain <= PROBE_SHARE * cost else ""
        return None, (f"autoencoder left out{how}: its estimated saving ({gain:.0f} B) is below the bytes of its "
                      f"weights and codes ({cost:.0f} B)")
    return model, f"autoencoder kept: estimated saving {gain:.0f} B against a cost of {cost:.0f} B"


def _encode(writer, rec: Recording, names, grids, W, model, scales, plans, tables, emit) -> list[dict]:
    """Stream row blocks; every channel's windows of a block become row groups of their own."""
    n = rec.n_samples
    nw = n_windows(n, W)
    per_block = max(1, CHUNK_SAMPLES // W)
    stats = [{"worst_error": 0.0, "bytes_est": 0, "n_exceptions": 0,
              "modes": {p.name: 0 for p in PREDICTORS.values()}} for _ in names]
    code_bytes = 8 + (model.code_size if model is not None else 0)
    per_call = max(1, BATCH_SAMPLES // W)   # bounded temporaries per thread, one row group per block

    def channel_rows(block, w0: int, w1: int, j: int) -> tuple[pa.Table, pa.Table, float]:
        rows, held, worst = [], [], 0.0
        for a0, b0, L in batches(n, W, w0, w1):
            for a in range(a0, b0, per_call):
                b = min(b0, a + per_call)
                x = block[(a - w0) * W:(a - w0) * W + (b - a) * L, j].reshape(b - a, L)
                t, e, wb = encode_batch(x, a, names[j], grids[j], W, model, scales[j], plans[j].lpc, tables[j])
                rows.append(t)
                held.append(e)
                worst = max(worst, wb)
        return pa.concat_tables(rows), pa.concat_tables(held), worst

    # channels are encoded side by side (numba and numpy release the GIL); rows are written in order
    pool = ThreadPoolExecutor(worker_count(len(names)))
    with pool:
        for w0 in range(0, nw, per_block):
            w1 = min(nw, w0 + per_block)
            block = rec.rows(w0 * W, min(n, w1 * W))
            for j, (table, held, worst) in enumerate(pool.map(lambda j: channel_rows(block, w0, w1, j),
                                                                   range(len(names)))):
                stats[j]["worst_error"] = max(stats[j]["worst_error"], worst)
                _add_rows(writer, table, held, stats[j], code_bytes)
            emit("encode", w1 * len(names), nw * len(names), f"window {w1}/{nw}")
    return stats


def _add_rows(writer, table: pa.Table, held: pa.Table, s: dict, code_bytes: int) -> None:
    """Write one channel's rows of a block (and its verbatim samples) and add them to its summary counts."""
    for m, c in zip(*np.unique(table.column("mode").to_numpy(), return_counts=True)):
        s["modes"][PREDICTORS[int(m)].name] += int(c)
    n_exc = int(pa.compute.sum(pa.compute.list_value_length(held.column("pos"))).as_py() or 0)
    s["n_exceptions"] += n_exc
    s["bytes_est"] += int(pa.compute.sum(pa.compute.binary_length(table.column("residual"))).as_py() or 0) \
        + table.num_rows * code_bytes + 12 * n_exc
    writer.add_windows(table)
    writer.add_exceptions(held)


def _summary(m) -> ChannelSummary:
    return ChannelSummary(name=m.name, unit=m.unit, budget=m.budget, eps=m.eps, worst_error=m.worst_error,
                          used_pct=m.used_pct, ratio=m.ratio, bits_per_sample=m.bits_per_sample,
                          n_samples=m.n_samples, modes=dict(m.modes))


def _choose_window(rec: Recording, grids: list[Grid]) -> tuple[int, str]:
    """The window length (of ``WINDOW_CHOICES``) whose archive is estimated smallest, and why.

    Every candidate plans and range codes the same contiguous spans of the
    recording (at most ``WINDOW_EVAL_SAMPLES`` in all, of at most
    ``WINDOW_EVAL_CHANNELS`` evenly spread channels), fitting its own LPC
    sets (sets fitted on short windows would overrate long ones: a set needs
    enough windows of its own), and is charged
    ``WINDOW_ROW_BYTES`` per window row; a longer window must save
    ``WINDOW_MARGIN`` to be chosen, since shorter windows browse finer.
    Longer windows pay where residuals are cheap (coarse budgets, quiet
    signals): the framing of a row and the predictor's start-up are shared
    by more samples.
    """
    n, span = rec.n_samples, max(WINDOW_CHOICES)
    chans = np.unique(np.linspace(0, len(rec.channels) - 1, min(len(rec.channels), WINDOW_EVAL_CHANNELS))
                      .round().astype(int)).tolist()         # evenly spread channels stand for the rest
    C = len(chans)
    per_channel = max(WINDOW_EVAL_MIN, WINDOW_EVAL_SAMPLES // C)
    spans = sample_windows(n, span, per_channel // span)
    if len(spans) < WINDOW_EVAL_MIN // span:
        return DEFAULT_WINDOW, f"window {DEFAULT_WINDOW} (too short a recording to compare window lengths)"
    every = _gather(rec, spans, span)
    sampled = [every[c] for c in chans]
    est: dict[int, float] = {}
    for W in WINDOW_CHOICES:            # shortest first; stop once a longer window stops paying
        total = WINDOW_ROW_BYTES * C * (len(spans) * span // W)
        with ThreadPoolExecutor(worker_count(C)) as pool:   # channels side by side
            total += sum(pool.map(lambda k: coded_bytes(sampled[k].reshape(-1, W), n // W, grids[chans[k]], W),
                                  range(C)))
        best_so_far = min(est.values(), default=math.inf)
        est[W] = 8.0 * total / (C * len(spans) * span)
        if est[W] >= best_so_far:
            break
    best = min(est, key=lambda w: (est[w], w))
    if est[best] > est[DEFAULT_WINDOW] * (1 - WINDOW_MARGIN):
        best = DEFAULT_WINDOW
    return best, f"window {best} (estimated bits/sample: " + ", ".join(f"{w}: {e:.3f}" for w, e in est.items()) + ")"


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
        self.stop = threading.Event()    # set when another stage failed: the training thread stops
        self.lock = threading.Lock()     # events come from the packing thread and the training thread

    def is_set(self) -> bool:
        """Cancelled by the caller or stopped after a failure (the trainer polls this)."""
        return self.stop.is_set() or (self.cancel is not None and self.cancel.is_set())

    def __call__(self, stage: str, done: int, total: int, message: str = "", loss: float | None = None) -> None:
        if self.is_set():
            raise Cancelled("packing cancelled; nothing was written")
        if self.fn is None:
            return
        with self.lock:
            self._emit(stage, done, total, message, loss)

    def _emit(self, stage: str, done: int, total: int, message: str, loss: float | None) -> None:
        eta = None
        if stage == "encode":
            now = time.perf_counter()
            if self.t_encode is None:
                self.t_encode = (now, done)
            elif done > self.t_encode[1]:
                t, d = self.t_encode
                eta = (now - t) * (total - done) / (done - d)
        self.fn(Progress(stage, int(done), int(total), message, loss, eta))
