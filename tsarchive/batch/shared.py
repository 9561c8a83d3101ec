"""One model for a whole batch (``pack --into OUT --shared-model``): learned once, stored in every archive.

What is shared is what packing otherwise learns per file: the compression
autoencoder (:mod:`tsarchive.modelrun`) and the learned index's coder of each
channel (:mod:`tsarchive.index.learn`).  The steps:

1. **sample** -- :data:`SAMPLE_FILES` files evenly spread over the plan, in
   plan order, read in the calling process (never a worker, and never
   depending on which files are already packed: a resumed run, any
   ``--jobs`` and a Dask cluster pack the same bytes);
2. **groups** -- the sampled files by their channels (names, in order): one
   model per group (a lab's batch mixes kinds of logger);
3. **learn** -- per group, the window length the group's first file would
   choose; the autoencoder trained once on the training windows of every
   file of the group pooled (each file on its own grid and scale), sized for
   the first file, for the batch's training budget (none where that file is
   too short for one to pay, by pack's own rule); and per channel an index
   coder learned on the files' segments pooled (each file cut to whole
   segments of the first file's length; the nonlinear coder tried only where
   the first file alone has segments enough for its own index to try it);
4. **pack** -- every file with the model of its channels
   (``tsarchive.pack(model=...)``): no training, the autoencoder kept or
   left out by the file's own estimate of what it saves against its bytes.
   Each archive stores the model as it stores its own (the decoder in
   ``model.parquet``, the coders in ``index.parquet``), so an archive never
   needs the batch, and a file whose channels match no group (or whose
   segments differ) learns its own, which its status line says.

Models cross to worker processes and Dask workers as numpy arrays in frozen
dataclasses, made by this process; nothing read from disk is unpickled.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, replace

import numpy as np

from ..errors import TsArchiveError
from .plan import BatchPlan, BatchSettings

#: Files (evenly spread over the batch) that the shared models are learned from.
SAMPLE_FILES = 8


@dataclass(frozen=True)
class Learned:
    """The batch's shared models and how they were made (for the console)."""

    models: tuple            # GivenModel, one per group of channels
    files: int               # files read
    seconds: float
    notes: tuple[str, ...]   # one line per model

    def which(self, names) -> str:
        """What a file with channels ``names`` packed with, in words for its status line."""
        if not self.models:
            return ""
        if any(tuple(names) == m.channels for m in self.models):
            return "shared model"
        return "own model (its channels match no shared model)"


def learn_models(plan: BatchPlan, settings: BatchSettings) -> Learned:
    """The shared models of ``plan`` (see the module doc)."""
    from ..ingest import read_recording
    t0 = time.perf_counter()
    opts = settings.parsed()
    jobs = plan.jobs
    pick = np.unique(np.linspace(0, len(jobs) - 1, min(len(jobs), SAMPLE_FILES)).round().astype(int)) \
        if jobs else []
    groups: dict[tuple, list] = {}
    read = 0
    for k in pick:
        job = jobs[int(k)]
        try:
            rec = read_recording(job.source, rate=job.rate or settings.rate, options=settings.read_options)
        except (TsArchiveError, OSError):
            continue                  # the file reports its own problem when it is packed
        read += 1
        groups.setdefault(tuple(c.name for c in rec.channels), []).append(rec)
    models, notes = [], []
    for names, recs in groups.items():
        model = _learn(recs, opts)
        models.append(model)
        ae = "none" if model.autoencoder is None else \
            f"{model.autoencoder.int_decoder.n_params} decoder parameters"
        notes.append(f"{len(names)} channel(s) {', '.join(names)}: learned from {len(recs)} file(s), window "
                     f"{model.window}, autoencoder {ae}, index coders {len(model.index)}")
    return Learned(tuple(models), read, time.perf_counter() - t0, tuple(notes))


def _learn(recs: list, opts):
    """One group's :class:`~tsarchive.modelrun.GivenModel` (step 3 of the module doc)."""
    from ..modelrun import GivenModel, PackSample, _train
    from ..pipeline import _emitter, _grids, _window
    first = recs[0]
    emit = _emitter(None, None)
    grids = [_grids(r, opts.budget)[0] for r in recs]
    W = _window(first, grids[0], opts, emit)
    ae = None
    if opts.code > 0:
        xs = [x for r, g in zip(recs, grids) for x in PackSample.take(r, g, W).training_windows()]
        ae = _train(first, xs, W, opts.code, emit, opts.train_seconds, opts.seed)
    index = () if opts.segment == 0 else _index_coders(recs, opts)
    return GivenModel(tuple(c.name for c in first.channels), W, ae, index)


def _index_coders(recs: list, opts) -> tuple:
    """Per channel, an index coder learned on every file's whole segments pooled (first file's segment and
    code size, so that the files like it use it)."""
    from ..index.build import build_channel
    from ..index.learn import AE_MIN_SEGMENTS, code_size_for
    from ..index.segments import choose_segment
    first = recs[0]
    n = first.n_samples
    S = choose_segment(n, opts.segment)
    if n < S:
        return ()
    K = code_size_for(-(-n // S), n, S)
    nonlinear = 0.9 * (n // S) >= AE_MIN_SEGMENTS     # tried where a file's own index would try it (learn.choose)
    coders = []
    for j, ch in enumerate(first.channels):
        parts = [r.rows(0, r.n_samples // S * S)[:, j] for r in recs]
        join = np.ma.concatenate if any(isinstance(p, np.ma.MaskedArray) for p in parts) else np.concatenate
        x = join(parts)
        ci = build_channel(lambda a, b: x[a:b], ch.name, len(x), S, opts.seed, np.dtype(ch.dtype).itemsize,
                           nonlinear, max_codes=K)
        coders.append(replace(ci.coder, note=f"shared by a batch ({len(recs)} files): {ci.coder.note}"))
    return tuple(coders)
