"""pack() and unpack(), each read top-down.

Packing::

    options -> PackOptions, checked once                              (options.py, budget.py)
    ingest  -> read the recording (streams .npy through fresh memory maps)   (ingest/)
    budget  -> ε per channel, then an integer grid per channel      (budget.py, quantize.py)
    windows -> fixed windows of W samples with a level each          (windows.py; W chosen from
               1024 … 8192 by the size of a planned and coded sample, unless given)
    sample  -> a bounded sample of windows, per-channel scales        (modelrun.PackSample)
    codes   -> a small autoencoder learned from the sample            (modelrun.ModelRun, model/; on a helper thread)
    plan    -> LPC coefficients, entropy tables, does the model pay?  (encoder.py)
    residuals, entropy -> per window the cheapest integer predictor, range coded
                                                                     (windowcodec.encode_windows)
    Parquet -> staged archive, checked through the reader, renamed    (store/)

While the autoencoder trains, the main thread plans without it and (unless a
code size was asked for) encodes every channel without it; the staging is
dropped and the channels encoded again only if the model pays (:class:`~tsarchive.modelrun.ModelRun`).

Unpacking (:func:`unpack`) reverses it through :mod:`tsarchive.archive` and
:func:`tsarchive.windowcodec.decode_windows` (numpy, pyarrow and the compiled kernels; no torch).
"""

from __future__ import annotations

import math
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pyarrow as pa

from .channelcodec import ChannelCodec
from .coding import fallback
from .encoder import choose_coder, classic_phase, coder_tables
from .errors import BadInput, BoundViolation, BudgetError, Cancelled
from .gridphase import ranked_phases
from .ingest import read_recording
from .modelrun import Choice, GivenModel, ModelRun, PackSample, _gather, _release_memory
from .options import DEFAULT_TRAIN_SECONDS, PackOptions
from .predict import PREDICTORS
from .quantize import ORDERED_DTYPES, Grid, make_grid
from .ranges import finite_ranges
from .recording import Recording
from .results import ChannelSummary, ChannelTally, PackResult, Progress, ProgressFn
from .store.claim import claim_target
from .store.manifest import build_manifest
from .store.sidecar import stage_sidecar
from .store.timeaxis import check_axis
from .index import build_index
from .store.writer import ArchiveWriter, check_target
from .windowcodec import block_windows, encode_windows, joins_tail
from .windows import CHUNK_SAMPLES, DEFAULT_WINDOW, batches, n_windows, spread
from .windowchoice import choose_window
from .workers import workers as worker_count

BATCH_SAMPLES = 1 << 18      # samples per encoder call within a step (bounds each thread's temporaries)
PHASE_STRETCH, PHASE_STRETCHES = 1024, 64   # the sample the grid's phase is chosen on (per channel)


def pack(source, archive, budget=None, *, rate: float | None = None, window: int | None = None,
         code_size: int | None = None, force: bool = False, progress: ProgressFn = None, cancel=None,
         train_seconds: float = DEFAULT_TRAIN_SECONDS, seed: int = 0, read_options=None,
         options: PackOptions | None = None, segment: int | None = None, model=None) -> PackResult:
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
    code size a scout is trained for ``SCOUT_SECONDS``, a probe for
    ``PROBE_SECONDS`` only if the scout saves ``SCOUT_SHARE`` of the model's
    own bytes, and the full run only if the probe already saves
    ``PROBE_SHARE`` of them.  ``window=None`` picks the window length of
    ``WINDOW_CHOICES`` that a planned and coded sample says is smallest
    (``DEFAULT_WINDOW`` when a code size > 0 is given: codes are asked for to
    browse by them, in the finer segments).  ``read_options``
    (:class:`~tsarchive.ingest.ReadOptions`) says how to read a source path.
    ``options`` (:class:`~tsarchive.options.PackOptions`, parsed once by the
    caller) stands for ``budget``, ``window``, ``code_size``, ``train_seconds``, ``seed`` and ``segment``,
    the learned index's samples per browse segment (None: :mod:`tsarchive.index`'s default; 0: no index).
    ``model`` (a :class:`~tsarchive.modelrun.GivenModel`, or several: the first that fits the recording's
    channels) is used instead of training an autoencoder and learning index coders; the archive stores it
    as it stores its own (self-contained); a recording it does not fit gets its own.
    """
    opts = options or PackOptions.parse(budget, window, code_size, train_seconds, seed, segment)
    t0 = time.perf_counter()
    emit = _emitter(progress, cancel)
    archive = Path(archive)
    emit("read", 0, 1, "reading source")
    rec = source if isinstance(source, Recording) else read_recording(source, rate=rate, options=read_options)
    check_axis(rec)
    check_target(archive, force)
    opts.budget.check_names([c.name for c in rec.channels])
    given = GivenModel.pick(model, [c.name for c in rec.channels], opts)
    job = _Job(archive, force, rec, opts, emit, progress, None if isinstance(source, Recording) else read_options,
               given)
    with claim_target(archive, force), ModelRun(rec, opts, emit, given) as run:   # no other run writes this target
        emit("read", 0, 1, "placing each channel's grid")
        grids, notes, phases = _grids(rec, opts.budget)                   # budget -> ε -> integer grid
        emit("read", 1, 1, f"{len(rec.channels)} channel(s), {rec.n_samples} samples")
        W = _window(rec, grids, opts, emit, given)                         # windows
        sample = PackSample.take(rec, grids, W)                            # a bounded sample -> scales
        run.start(sample)                                                  # codes: training on a helper thread
        emit("encode", 0, 1, "choosing predictors and entropy tables")
        run.plain()                                                        # plan: LPC sets, tables
        manifest = _write(job, sample, phases, notes, run.first(), run)    # residuals -> entropy -> Parquet
        if manifest is None:                                               # the model pays: encode again with it
            manifest = _write(job, sample, phases, notes, run.second())
    from .archive import open_archive
    arc = open_archive(archive)
    return PackResult(archive=archive, channels=tuple(_summary(m) for m in arc.channels),
                      source_bytes=manifest["source"]["bytes"], raw_bytes=manifest["summary"]["raw_bytes"],
                      archive_bytes=arc.archive_bytes, ratio=arc.ratio, elapsed_s=time.perf_counter() - t0)


def unpack(archive, out, channels=None, start: float | None = None, end: float | None = None, *,
           force: bool = False, replace_original: str | None = None) -> Path:
    """Decode an archive (or a time range of some channels) into ``out`` (.npy, .csv or .parquet).

    The reverse of :func:`pack`, top-down::

        open    -> manifest checked, a ChannelCodec per channel       (archive.py, store/)
        members -> every member hashed against the manifest          (store/members.py)
        decode  -> rows -> entropy -> predictor inverse -> grid       (windowcodec.decode_windows)
        write   -> atomically, marked as a reconstruction             (export_range.py, export.py)
    """
    from .archive import open_archive
    from .export_range import export_range
    arc = open_archive(archive)
    arc.check_members()
    return export_range(arc, out, channels=channels, start=start, end=end, force=force,
                        replace_original=replace_original)


@dataclass(frozen=True)
class _Job:
    """What every encoding of one pack shares."""

    archive: Path
    force: bool
    rec: Recording
    opts: PackOptions
    emit: "_emitter"
    progress: ProgressFn
    read_options: object | None      # kept in the manifest so that verify re-reads the source alike
    given: GivenModel | None = None  # a model learned elsewhere (a batch's shared model), or None


def _window(rec: Recording, grids: list[Grid], opts: PackOptions, emit, given=None) -> int:
    """The window length asked for, else a given model's, else the default when codes are asked for
    (browsing by codes keeps the finer segments), else the one a planned and coded sample says is smallest."""
    if opts.window is not None:
        return opts.window
    if given is not None:
        return given.window
    if opts.explicit_code and opts.code:
        return DEFAULT_WINDOW
    W, why = choose_window(rec, grids)
    emit("read", 1, 1, why)
    return W


def _write(job: _Job, sample: PackSample, phases, notes, choice: Choice, run: ModelRun | None = None) -> dict | None:
    """Encode every channel (on the first of its grids ``phases``, or where classic coded on the one its
    compressor codes smallest), write model and manifest, decode the staged archive and move it into place.

    Without a final note (a speculative encoding without the model), ``run.verdict()`` gives it once
    the channels are encoded, or None: the model pays, and the staging is dropped (returns None).
    Returns the manifest."""
    emit, rec, model = job.emit, job.rec, choice.model
    decoder = None if model is None else model.int_decoder
    names = [c.name for c in rec.channels]
    emit("encode", 0, 1, "choosing each channel's residual coder")

    def codec(j: int) -> ChannelCodec:                   # plan: the residual coder
        p = choice.plans[j]
        tables = p.tables if model is not None else p.tables_plain
        coder = choose_coder(sample.windows[j], sample.nwin, phases[j][0], sample.W, model, sample.scales[j], p.lpc,
                             tables, blocks[j])
        grid, coder = classic_phase(sample.windows[j], blocks[j], sample.nwin, phases[j], sample.W, coder)
        coder, tables = fallback.tail_rule(coder, rec.n_samples, sample.W), coder_tables(coder, tables)
        return ChannelCodec.for_tables(names[j], sample.W, grid, sample.scales[j], p.lpc, tables,
                                       residual_coder=coder)
    blocks = _block_sample(sample)
    with ThreadPoolExecutor(worker_count(len(names))) as pool:     # channels side by side
        codecs = list(pool.map(codec, range(len(names))))
    with ArchiveWriter(job.archive, names, force=job.force, with_code=decoder is not None) as writer:
        summaries = _encode(writer, rec, names, codecs, sample.W, model, emit)
        if run is not None and choice.note is None:
            emit("encode", 1, 1, "every window encoded; waiting for the model's verdict")
        note = choice.note if run is None or choice.note is not None else run.verdict()
        if note is None:
            return None
        _release_memory()
        emit("write", 0, 1, "building the index")
        index = build_index(rec, job.opts.segment, job.opts.seed,
                            coders=() if job.given is None else job.given.index)
        emit("write", 0, 1, "writing the model and the index")
        writer.write_model({} if decoder is None else decoder.to_arrays())
        writer.write_index(index)                                             # index.zst (tsarchive/index)
        emit("write", 0, 1, "writing the manifest")
        sidecar = stage_sidecar(writer.stage, rec)     # time axis, notes, text columns
        manifest = build_manifest(rec, job.opts.budget, codecs, notes, sample.W, job.opts.code, decoder, note,
                                  summaries, writer.staged_bytes())
        if job.read_options is not None and job.read_options.to_dict():   # so verify re-reads the source alike
            manifest["read_options"] = job.read_options.to_dict()
        stage = writer.finalize({**manifest, **sidecar})
        emit("write", 1, 1, "staged")
        _self_check(stage, rec, job.progress, emit)
        writer.commit()
    return manifest


def _self_check(stage: Path, rec: Recording, progress, emit) -> None:
    """Decode our own output before it may replace anything; BoundViolation if one sample is out."""
    from .archive import open_archive
    from .verifier import verify_archive
    emit("check", 0, 1, "decoding the archive to check every sample")
    report = verify_archive(open_archive(stage, strict=False), against=rec, progress=progress)
    if not report.ok:
        raise BoundViolation("self-check failed, nothing written: " + "; ".join(report.problems[:3]))
    emit("check", 1, 1, "every sample within budget")


# -- stages --------------------------------------------------------------------
def _grids(rec: Recording, spec) -> tuple[list[Grid], list[str], list[list[Grid]]]:
    """Per channel its grid, a note on it, and its grids of every phase, its grid first (ranked_phases)."""
    ranges = finite_ranges(rec)
    notes, phases = [], []
    stretches = _phase_sample(rec)
    for ch, r, x in zip(rec.channels, ranges, stretches):
        budget = spec.for_channel(ch.name)
        exact_floats = budget.kind == "lossless" and ch.decimals is None and ch.scaled is None
        if exact_floats and ch.dtype not in ORDERED_DTYPES:
            raise BudgetError(f"channel {ch.name} holds {ch.dtype} values on no integer or decimal grid, so "
                              f"'lossless' is unavailable; give it a budget such as {ch.name}=0.1%")
        eps = budget.resolve(r.span, ch.name)
        g = Grid("ordered", 0.0, ch.dtype) if exact_floats else \
            make_grid(eps, ch.decimals, np.dtype(ch.dtype), r.anchor, r.mult, origin=r.origin, scaled=ch.scaled)
        if r.no_mark:
            raise BadInput(f"channel {ch.name} has missing samples but no value of {ch.dtype} is free to mark "
                           "them; fill the gaps or store the column in a wider integer type")
        if r.kept or r.missing is not None:
            phases.append([replace(g, verbatim=r.kept, missing=r.missing)])
        else:                                   # where the grid sits: the cheapest phase on a sample
            phases.append(ranked_phases(g, x, int(r.mult) if ch.decimals is not None else 1))
        g = phases[-1][0]
        note = _grid_note(budget, g)
        if budget.kind == "pct" and r.kept and r.span_all != r.span:
            left = ", ".join(f"{v:g}" for v in r.kept)
            note = "; ".join(filter(None, [note, (
                f"{left} left out of the range: {budget.spec} is {eps:.6g} {ch.unit}".rstrip() +
                f", not {budget.resolve(r.span_all, ch.name):.6g} {ch.unit}".rstrip())]))
        notes.append(note)
    return [p[0] for p in phases], notes, phases


def _phase_sample(rec: Recording) -> list[np.ndarray]:
    """Per channel, ``PHASE_STRETCHES`` evenly spread stretches of ``PHASE_STRETCH`` samples (fewer, or
    one short stretch, on a short recording): what the grid's phase is chosen on."""
    L = min(PHASE_STRETCH, rec.n_samples)
    if not L:
        return [np.zeros((0, 0))] * len(rec.channels)
    return _gather(rec, spread(rec.n_samples // L, PHASE_STRETCHES), L)


def _block_sample(sample: PackSample) -> list:
    """Per channel, up to two whole blocks of consecutive full windows (a third and two thirds in), on
    which the classic coder in blocks is measured (:func:`tsarchive.coding.fallback.block_windows`)."""
    W, C = sample.W, len(sample.rec.channels)
    B, full = fallback.block_windows(W), sample.rec.n_samples // W
    if B == 1 or not full:
        return [None] * C
    n_blocks = -(-full // B)
    picks = sorted({n_blocks * k // 3 for k in (1, 2)}) if n_blocks > 2 else range(n_blocks)
    return _gather(sample.rec, np.concatenate([np.arange(k * B, min(full, k * B + B)) for k in picks]), W)


def _grid_note(budget, grid: Grid) -> str:
    """Why a lossy budget ended up exact, in words for reports."""
    if budget.kind == "lossless" or grid.eps > 0:
        return ""
    if grid.kind in ("decimal", "scaled"):
        step = grid.step if grid.kind == "scaled" else grid.mult * 10.0 ** -grid.decimals
        return (f"budget {budget.spec} cannot merge distinct logged values (resolution {step:g}), "
                "so the channel is stored exactly")
    return f"budget {budget.spec} of a zero range is 0, so the channel is stored exactly"


def _encode(writer, rec: Recording, names, codecs, W, model, emit) -> list[ChannelTally]:
    """Stream row blocks; every channel's windows of a block become row groups of their own."""
    n = rec.n_samples
    nw = n_windows(n, W)
    align = math.lcm(*(block_windows(c) for c in codecs)) if codecs else 1    # whole blocks of every channel
    per_block = max(align, CHUNK_SAMPLES // W // align * align)
    stats = [ChannelTally() for _ in names]
    code_bytes = 8 + (model.code_size if model is not None else 0)
    # channels are encoded side by side (numba and numpy release the GIL); rows are written in order
    emit("encode", 0, nw * len(names), "coding the windows")
    with ThreadPoolExecutor(worker_count(len(names))) as pool:
        for w0 in range(0, nw, per_block):
            w1 = min(nw, w0 + per_block)
            block = rec.rows(w0 * W, min(n, w1 * W))
            jobs = [(block[:, j], w0, w1, n, c, model) for j, c in enumerate(codecs)]
            for j, (table, held, worst) in enumerate(pool.map(_channel_rows, *zip(*jobs))):
                stats[j].worst_error = max(stats[j].worst_error, worst)
                _add_rows(writer, table, held, stats[j], code_bytes)
            emit("encode", w1 * len(names), nw * len(names), f"window {w1}/{nw}")
    return stats


def _channel_rows(x, w0: int, w1: int, n: int, codec: ChannelCodec, model) -> tuple[pa.Table, pa.Table, float]:
    """One channel's rows of windows ``w0..w1-1`` (samples ``x`` from window ``w0`` on), encoded in calls
    of at most ``BATCH_SAMPLES`` samples (bounded temporaries per thread); its worst error."""
    W = codec.window
    B = block_windows(codec)                 # a block-coded channel's calls hold whole blocks
    per_call = max(B, BATCH_SAMPLES // W // B * B)
    rows, held, worst = [], [], 0.0
    for a, b, L, tail in _calls(n, W, w0, w1, per_call, B if joins_tail(codec) else 0):
        lo = (a - w0) * W
        hi = lo + (b - a) * L
        t, e, wb = encode_windows(x[lo:hi].reshape(b - a, L), a, codec, model, x[hi:hi + tail] if tail else None)
        rows.append(t)
        held.append(e)
        worst = max(worst, wb)
    return pa.concat_tables(rows), pa.concat_tables(held), worst


def _calls(n: int, W: int, w0: int, w1: int, per_call: int, join: int) -> list[tuple[int, int, int, int]]:
    """Windows ``w0..w1-1`` as encoder calls ``(first, end, length, tail)`` of at most ``per_call`` windows
    of equal length (calls start at multiples of ``per_call`` from ``w0``).  With ``join`` (the channel's
    block, when its short last window is coded with the block its number falls in), that window, unless
    it starts a block, comes as the ``tail`` samples of the call of its block's full windows."""
    out = [(a, min(b0, a + per_call), L, 0) for a0, b0, L in batches(n, W, w0, w1) for a in range(a0, b0, per_call)]
    if join and len(out) > 1 and out[-1][2] < W and out[-1][0] % join:
        s, _, L, _ = out.pop()
        a, b, _, _ = out.pop()      # the full windows' last call: from a multiple of the block up to s
        head = s // join * join
        out += ([(a, head, W, 0)] if a < head else []) + [(head, s, W, L)]
    return out


def _add_rows(writer, table: pa.Table, held: pa.Table, s: ChannelTally, code_bytes: int) -> None:
    """Write one channel's rows of a block (and its verbatim samples) and add them to its summary counts."""
    for m, c in zip(*np.unique(table.column("mode").to_numpy(), return_counts=True)):
        s.modes[PREDICTORS[int(m)].name] += int(c)
    n_exc = int(pa.compute.sum(pa.compute.list_value_length(held.column("pos"))).as_py() or 0)
    s.n_exceptions += n_exc
    s.bytes_est += int(pa.compute.sum(pa.compute.binary_length(table.column("residual"))).as_py() or 0) \
        + table.num_rows * code_bytes + 12 * n_exc
    writer.add_windows(table)
    writer.add_exceptions(held)


def _summary(m) -> ChannelSummary:
    return ChannelSummary(name=m.name, unit=m.unit, budget=m.budget, eps=m.eps, worst_error=m.worst_error,
                          used_pct=m.used_pct, ratio=m.ratio, bits_per_sample=m.bits_per_sample,
                          n_samples=m.n_samples, modes=dict(m.modes))


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
