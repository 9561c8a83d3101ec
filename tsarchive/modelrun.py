"""The autoencoder's part of packing: the bounded sample, the training, and the decision to keep it.

Training is bounded by work, never by the clock (the archive must not depend
on the machine's speed or load), and runs on a helper thread while the main
thread plans (and, without an explicit code size, encodes) without a model.
:class:`ModelRun` holds that concurrency and the decision in one place:

* :meth:`ModelRun.plain` — the plans without a model (they also go to the trainer);
  when even a perfect model could not pay for its bytes, training is stopped;
* :meth:`ModelRun.first` — what to encode first: with an explicit code size
  the trained model (waiting for it), otherwise the plans without a model;
* :meth:`ModelRun.verdict` — after that speculative encoding: the note that
  keeps it, or None when the model pays (the staging is then dropped);
* :meth:`ModelRun.second` — the model to encode with after a None verdict
  (trained fully first when the first run was a probe).

Without an explicit code size and with a long training budget, the first run
is a probe (``PROBE_SECONDS``), and the probe is preceded by a shorter scout
(``SCOUT_SECONDS``): a model that saves almost nothing after the scout is
left out without the probe.

A :class:`GivenModel` (a batch's shared model, :mod:`tsarchive.batch.shared`)
replaces the training: its autoencoder is planned with and kept or left out
by the same rule, and its index coders replace the index's own learning.
"""

from __future__ import annotations

import threading
from concurrent.futures import Future, ThreadPoolExecutor, wait
from dataclasses import dataclass
from functools import cache

import numpy as np

from .codec import FRAC_SAFE_SCALE
from .encoder import TABLE_SAMPLES, ChannelPlan, plan_channel, sample_windows
from .errors import Cancelled
from .options import PackOptions
from .quantize import Grid, quantize
from .recording import Recording
from .windows import channel_scale, levels, n_windows, normalise, spread

TRAIN_WINDOWS = 20000        # bound on the training sample, whatever the recording's length
MIN_MODEL_WINDOWS = 8        # fewer full windows than this: no autoencoder
DECODER_SHARE = 0.01         # decoder parameters per sample of the whole recording (sizing rule)
MAX_MODEL_SHARE = 0.05       # the stored decoder may cost at most this share of the raw sample bytes
BYTES_PER_PARAM = 2.4        # measured size of a stored decoder parameter (int16 in Parquet + zstd)
BITS_PER_CODE = 10.0         # measured size of one stored code value (list<int8> in Parquet + zstd)
PROBE_SECONDS = 6.0          # nominal training seconds of the probe model that decides whether to train longer
# a nominal second is this many multiply-adds of training steps (one BLAS thread did 4.6e9 a second at
# W = 1024 and 2.2e9 at W = 256 on the 2-core development machine, sharing it with other work)
TRAIN_WORK_PER_SECOND = 4e9
PROBE_SHARE = 0.25           # train fully only if the probe already saves this share of the model's bytes
# The probe itself runs only if a shorter scout already saves SCOUT_SHARE of the model's bytes: the probe
# would have to find 8 times the scout's saving in 3 times its training to pass.  On the bench's real sets
# every probe so far was refused with a saving of at most 0.12 % of the model's bytes (ecg_mitbih208 at
# 0.01 %: 214 B against 177 kB); the scout refuses those in a third of the work.
SCOUT_SECONDS = 2.0
SCOUT_SHARE = 1 / 32
PROBE_EVAL_SAMPLES = 1 << 18  # per channel: the probe's saving is estimated on about this many sampled samples


@dataclass(frozen=True)
class PackSample:
    """A bounded, evenly spread sample of full windows (plus the short last one) that planning and
    training look at, whatever the recording's length."""

    rec: Recording
    grids: tuple[Grid, ...]
    W: int
    index: np.ndarray               # sampled window numbers
    windows: tuple                  # per channel: (len(index), W) in the channel's dtype
    scales: tuple[int, ...]
    tail: np.ndarray | None
    nwin: int

    @classmethod
    def take(cls, rec: Recording, grids, W: int) -> "PackSample":
        index = sample_windows(rec.n_samples, W, max(1, TABLE_SAMPLES // W))
        windows = _gather(rec, index, W)
        scales = _training_set(windows, grids, W, len(rec.channels), windows=False)[0]
        return cls(rec, tuple(grids), W, index, tuple(windows), tuple(scales), _tail(rec, W),
                   n_windows(rec.n_samples, W))

    def plan(self, model, base=None, quick: bool = False) -> list[ChannelPlan]:
        """Every channel's plan; ``quick``: the probe's gain, judged on every k-th sampled window only."""
        step = max(1, len(self.index) * self.W // PROBE_EVAL_SAMPLES) if quick else 1
        return [plan_channel(w[::step], None if self.tail is None or quick else self.tail[:, j], self.nwin,
                             self.grids[j], self.W, model, self.scales[j], None if base is None else base[j],
                             subset=step > 1)
                for j, w in enumerate(self.windows)]   # one channel at a time: side by side, the peak RSS rose 110 MiB

    def training_windows(self) -> list[np.ndarray]:
        return _training_set(list(self.windows), self.grids, self.W, len(self.windows))[1]

    @property
    def n_sampled(self) -> int:
        return len(self.index) + (self.tail is not None)


@dataclass(frozen=True, eq=False)
class GivenModel:
    """A model learned elsewhere, used instead of training one: for recordings with exactly these channels
    (names, in order), packed in windows of ``window`` samples.  ``autoencoder``: a
    :class:`~tsarchive.model.train.TrainedAutoencoder` or None (pack without one); ``index``: per channel
    an index :class:`~tsarchive.index.learn.Coder`, used where the channel's segment and code size match it."""

    channels: tuple[str, ...]
    window: int
    autoencoder: object | None = None
    index: tuple = ()

    def fits(self, names, opts: PackOptions) -> bool:
        """Whether a recording with channels ``names`` packed with ``opts`` can use this model."""
        ae = self.autoencoder
        return (tuple(names) == self.channels and opts.window in (None, self.window)
                and (ae is None or ae.code_size == opts.code))

    @staticmethod
    def pick(model, names, opts: PackOptions) -> "GivenModel | None":
        """``model`` (one, several or None): the first that :meth:`fits`, else None."""
        models = () if model is None else (model,) if isinstance(model, GivenModel) else tuple(model)
        return next((m for m in models if m.fits(names, opts)), None)


@dataclass(frozen=True)
class Choice:
    """What to encode with: the model (or None), the plans, and the note the manifest keeps."""

    model: object | None
    plans: list
    note: str | None


class ModelRun:
    """Training on a helper thread and the decision to keep the model (see the module doc)."""

    def __init__(self, rec: Recording, opts: PackOptions, emit, given: GivenModel | None = None) -> None:
        self.rec, self.opts, self.emit, self.given = rec, opts, emit, given
        self.K, self.explicit = opts.code, opts.explicit_code
        self.probe = not self.explicit and opts.train_seconds > PROBE_SECONDS and given is None
        self._pool = ThreadPoolExecutor(1)
        self._plain: Future = Future()          # the plans without a model, for the training thread
        self._hopeless = threading.Event()      # even a perfect model could not pay: training stops
        self._training: Future | None = None
        self._stopped_note = ""
        self._probe_ran = PROBE_SECONDS if self.probe else 0.0   # nominal seconds of the probe that decided

    def __enter__(self) -> "ModelRun":
        if self.K > 0 and self.given is None:
            self._pool.submit(_import_trainer)  # the trainer's import overlaps reading and planning
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc is not None:
            self.emit.stop.set()                # a failed or cancelled pack stops the training thread too
            if not self._plain.done():
                self._plain.set_exception(Cancelled(f"packing stopped ({exc})"))
        self._pool.shutdown(wait=True)

    def start(self, sample: PackSample) -> None:
        self.sample = sample
        seconds = PROBE_SECONDS if self.probe else self.opts.train_seconds
        self._training = self._pool.submit(self._train_and_plan, seconds)

    def plain(self) -> list[ChannelPlan]:
        plain = self.sample.plan(None)
        self._plain.set_result(plain)
        _release_memory()
        # the model can save at most the whole residual payload: when that is below its own bytes, stop it
        s = self.sample
        ceiling = _payload_ceiling(plain, s.nwin, s.n_sampled)
        bound = _model_bytes(self.rec, s.W, self.K, s.nwin)
        if not self.explicit and self.K and ceiling <= (PROBE_SHARE if self.probe else 1.0) * bound:
            self._hopeless.set()
            self._stopped_note = (f"autoencoder not trained: at most {ceiling:.0f} B to save, below "
                                  f"{'1/4 of ' if self.probe else ''}its {bound:.0f} B")
        return plain

    def first(self) -> Choice:
        if not self.explicit:
            return Choice(None, self._plain.result(), None)
        model, plans = self._training.result()
        return self._kept(model, plans, explicit=True)

    def verdict(self) -> str | None:
        """After encoding without a model: the note that keeps that archive, or None (the model pays)."""
        if self._hopeless.is_set():
            wait([self._training])              # the stopped trainer has had its say: this is the last
            self.emit("train", 1, 1, self._stopped_note)
            return self._whose(self._stopped_note)
        model, plans = self._training.result()
        gain, cost = _model_account(model, plans, self.sample.nwin, self.K)
        if model is not None and (gain > PROBE_SHARE * cost if self.probe else gain > cost):
            self._worth = (model, plans, gain, cost)
            return None
        return self._whose(_keep_model(model, gain, cost, False, probed=self._probe_ran)[1])

    def second(self) -> Choice:
        """The model that pays, trained fully on this thread first when the first run was a probe."""
        model, plans, gain, cost = self._worth
        if self.probe:
            self.emit("train", 0, 1, f"the probe model saves {gain:.0f} B against {cost:.0f} B: training it fully")
            model = _train(self.rec, self.sample.training_windows(), self.sample.W, self.K, self.emit,
                           self.opts.train_seconds, self.opts.seed)
            plans = self._plain.result() if model is None else self.sample.plan(model, self._plain.result())
        return self._kept(model, plans, explicit=False, probed=self._probe_ran)

    def _kept(self, model, plans, explicit: bool, probed: float = 0.0) -> Choice:
        gain, cost = _model_account(model, plans, self.sample.nwin, self.K)
        model, note = _keep_model(model, gain, cost, explicit, probed=probed)
        return Choice(model, plans if model is not None else self._plain.result(), self._whose(note))

    def _whose(self, note: str) -> str:
        """The manifest's note, naming a given model (the archive stores it as its own either way)."""
        if self.given is None:
            return note
        if self.given.autoencoder is None:
            return "no autoencoder: the batch's shared model has none"
        return "the batch's shared model: " + note.replace("autoencoder not trained", "autoencoder left out")

    def _train_and_plan(self, seconds: float):
        """On the helper thread: the model and its plans, or (None, None).  A probe is preceded by a
        scout of ``SCOUT_SECONDS``; when the scout saves too little the probe does not run."""
        if self.probe:
            model, plans = self._trained_and_planned(SCOUT_SECONDS)
            gain, cost = _model_account(model, plans, self.sample.nwin, self.K)
            if model is None or gain <= SCOUT_SHARE * cost:
                self._probe_ran = SCOUT_SECONDS
                return model, plans
            self.emit("train", 0, 1, "the scout model looks promising: training the probe")
        return self._trained_and_planned(seconds)

    def _trained_and_planned(self, seconds: float):
        s = self.sample
        try:       # the training windows live only while training (a full run after a probe makes them again)
            model = self.given.autoencoder if self.given is not None else \
                _train(self.rec, s.training_windows(), s.W, self.K, self.emit, seconds, self.opts.seed,
                       cancel=_Either(self.emit, self._hopeless))
        except Cancelled:
            if self._hopeless.is_set() and not self.emit.is_set():
                return None, None
            raise
        _release_memory()
        if model is None:
            return None, None
        plans = s.plan(model, self._plain.result(), self.probe)
        _release_memory()
        return model, plans


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
    pick = spread(k, per_channel)
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


def _keep_model(model, gain: float, cost: float, explicit: bool, probed: float = 0.0):
    """Keep the autoencoder only where its estimated saving beats its own bytes (unless asked for)."""
    if model is None:
        return None, "no autoencoder (too short a recording, or code size 0)"
    if explicit:
        return model, f"autoencoder kept as asked (estimated saving {gain:.0f} B, cost {cost:.0f} B)"
    if gain <= cost:
        how = f" after a {probed:g} s probe" if probed and gain <= PROBE_SHARE * cost else ""
        return None, (f"autoencoder left out{how}: its estimated saving ({gain:.0f} B) is below the bytes of its "
                      f"weights and codes ({cost:.0f} B)")
    return model, f"autoencoder kept: estimated saving {gain:.0f} B against a cost of {cost:.0f} B"


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
