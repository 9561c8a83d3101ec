"""Looking through an archive: the rankings and the preview that the CLI and the app both show.

Each answer says what it is based on.  With the learned index the unit is
the browse *segment*: the stored one, or, where the archive keeps none and
the channel is short enough, one computed on opening from the decoded
samples (:mod:`tsarchive.index.derived`).  Longer channels without a stored
index fall back to what the archive itself holds, per compression *window*:
the stored outlier score, the nearest window codes or coarse shapes, and the
level-only preview (``glance`` without a stored index always falls back
so: a preview should not decode the channel whole).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tsarchive.errors import BadInput

from . import derived, member
from . import query as Q
from .segments import as_segments

BASED_ON_INDEX = {
    "unusual": "the learned index: segments whose stored facts stand out most from the rest of the channel or "
               "from their neighbours (each segment's largest weighted robust z-score of: what the code misses, "
               "swing, roughness, sharp peaks, repeated samples, samples held at the segment's extremes, level "
               "jumps)",
    "alike": "the learned index: a shortlist of at least {m} segments nearest by code and by how much the code "
             "misses, widened (up to {most}) while a nearer segment could lie outside it, re-ranked by the distance "
             "between the decoded segments with their means removed",
    "glance": "the learned index's codes alone (approximate: within {worst} of the recording, measured when "
              "it was packed)",
}
BASED_ON_FACTS = {    # kind "facts": the byte budget kept no codes (tsarchive/index/budget.py)
    "unusual": "the index's facts only (no codes fitted its byte budget): segments whose swing, roughness, "
               "repeated samples, samples held at the segment's extremes or level jumps stand out most from the "
               "rest of the channel or from their neighbours",
    "alike": "the index's facts only (no codes fitted its byte budget): a shortlist of the {m} segments "
             "nearest in roughness and swing, re-ranked by the distance between the decoded segments with "
             "their means removed",
    "glance": "the index's segment levels alone (facts only: no codes fitted its byte budget; approximate: within {worst} "
              "of the recording, measured when it was packed)",
}
BASED_ON_FALLBACK = {
    "unusual": "no learned index in this archive: windows ranked by their stored outlier score (peak error "
               "of the code-only reconstruction, or the peak distance from the window's mean)",
    "alike": "no learned index in this archive: windows whose stored codes (or, without codes, coarse shapes "
             "of the decoded window) are nearest",
    "glance": "no learned index in this archive: each window's code-only reconstruction, or its stored level "
              "where the archive has no codes (approximate, error not measured; a preview never computes "
              "the index)",
}
DERIVED = ("the index computed on opening from the decoded samples (this archive keeps none: it did not fit "
           "its byte budget, or the archive was packed without one); ")
DERIVED_OVER_FACTS = ("the index computed on opening from the decoded samples (this archive keeps only the facts "
                      "of a coarse index, without codes: that is all that fitted its byte budget); ")


@dataclass(frozen=True)
class Row:
    number: int          # segment (with an index) or window (without) number
    start: int           # first sample
    figure: float        # score or distance
    why: str = ""


@dataclass(frozen=True)
class Ranking:
    channel: str
    kind: str            # unusual | alike
    unit: str            # segment | window
    size: int            # samples per unit
    based_on: str
    rows: tuple[Row, ...]

    def to_dict(self) -> dict:
        return {"channel": self.channel, "ranking": self.kind, "unit": self.unit, "samples_per_unit": self.size,
                "based_on": self.based_on,
                "rows": [{self.unit: r.number, "start_sample": r.start, "figure": r.figure, "why": r.why}
                         for r in self.rows]}


@dataclass(frozen=True)
class Glance:
    channel: str
    start: int
    values: np.ndarray   # approximate samples
    worst: float | None  # measured worst error (None: not measured)
    based_on: str


NONLINEAR_ALIKE = ("the learned index: a shortlist of the {m} nearest codes of its autoencoder, re-ranked by the "
                   "distance between the decoded segments with their means removed")
NO_EDGE = ("samples held at the segment's extremes", "(samples held at the segment's extremes: not in this "
           "archive's index, packed before that fact was kept)")


def based_on(ci, kind: str) -> str:
    """What a ranking of ``kind`` on index ``ci`` is based on: codes and facts, or facts only; the facts this
    archive's index lacks and the coder's shortlist are named as they are."""
    if kind == "alike" and ci.coder.kind == "nonlinear":
        return NONLINEAR_ALIKE
    text = (BASED_ON_FACTS if ci.coder.kind == "facts" else BASED_ON_INDEX)[kind]
    if kind == "unusual" and ci.n_segments and not ci.fact("edge").any():   # a stored count is at least 1
        text = text.replace(*NO_EDGE)
    return text


def index_of(arc, name: str):
    """``(index, derived)`` of channel ``name``: the stored index, else one computed from the decoded samples
    (:mod:`tsarchive.index.derived`), also in place of a stored index of facts only (no codes fitted its
    byte budget: a derived one has codes and the default segment); ``derived`` is None (stored), ``"none"``
    or ``"facts"`` (why it was computed); ``(None, None)`` when the rankings fall back to windows."""
    if member.has_index(arc):
        ci = member.read(arc, name)
        if ci.coder.kind == "facts" and derived.short_enough(arc, name):
            return derived.derive(arc, name), "facts"
        return ci, None
    if derived.can_derive(arc, name):
        return derived.derive(arc, name), "none"
    return None, None


def has_segments(arc, name: str) -> bool:
    """Whether ``unusual`` and ``alike`` rank segments of channel ``name`` (a stored or a derived index)."""
    return member.has_index(arc) or derived.can_derive(arc, name)


def _label(ci, kind: str, made: str | None) -> str:
    """What a ranking is based on; a derived index (``made``: why) says so first, then the usual description."""
    if made is None:
        return based_on(ci, kind)
    head = DERIVED_OVER_FACTS if made == "facts" else DERIVED
    return head + based_on(ci, kind).replace("the learned index: ", "").replace("stored facts", "facts")


def channel_name(arc, channel: str | None) -> str:
    if channel is None:
        if not arc.channels:
            raise BadInput("the archive has no channels")
        return arc.channels[0].name
    return arc.channel(channel).name


def unusual(arc, channel: str | None = None, k: int = 20) -> Ranking:
    name = channel_name(arc, channel)
    ci, made = index_of(arc, name)
    if ci is not None:
        u = Q.unusual_scores(ci)
        rows = tuple(Row(int(i), int(i) * ci.segment, float(u.score[i]), u.because[i]) for i in Q.ranked(u.score, k))
        return Ranking(name, "unusual", "segment", ci.segment, _label(ci, "unusual", made), rows)
    w = arc.windows(name)
    ids = arc.outliers(name, k=k)
    where = {int(x): p for p, x in enumerate(w.index)}
    rows = tuple(Row(int(i), int(w.start_sample[where[i]]), float(w.score[where[i]])) for i in ids)
    return Ranking(name, "unusual", "window", arc.channel(name).window, BASED_ON_FALLBACK["unusual"], rows)


def segment_samples(arc, name: str, ci, ids: np.ndarray) -> np.ndarray:
    """The decoded samples of segments ``ids`` (len, S), filled as the index filled them; each window they
    need is decoded once (runs of consecutive windows in one call)."""
    W, S = arc.channel(name).window, ci.segment
    ids = np.asarray(ids, dtype=np.int64)
    a, b = ids * S, np.minimum(ci.n_samples, (ids + 1) * S)
    need = np.unique(np.concatenate([np.arange(x // W, -(-y // W)) for x, y in zip(a.tolist(), b.tolist())]
                                    or [np.zeros(0, np.int64)]))
    got = {}
    for run in np.split(need, np.flatnonzero(np.diff(need) > 1) + 1) if len(need) else []:
        x = np.ma.filled(np.ma.asarray(arc.decode_windows(name, int(run[0]), int(run[-1]) + 1)[0], np.float64), np.nan)
        got.update({int(w): x[(w - run[0]) * W:(w - run[0] + 1) * W] for w in run.tolist()})
    out = np.empty((len(ids), S))
    for j, (x, y) in enumerate(zip(a.tolist(), b.tolist())):
        w0, w1 = x // W, -(-y // W)
        seg = np.concatenate([got[w] for w in range(w0, w1)])[x - w0 * W:y - w0 * W]
        out[j] = as_segments(seg, S, 0.0)[0]
    return out


def alike(arc, number: int, channel: str | None = None, k: int = 10) -> Ranking:
    name = channel_name(arc, channel)
    ci, made = index_of(arc, name)
    if ci is not None:
        found = Q.alike(ci, int(number), k, lambda ids: segment_samples(arc, name, ci, ids))
        rows = tuple(Row(s, s * ci.segment, d) for s, d in found)
        text = _label(ci, "alike", made).format(m=Q.SHORTLIST, most=Q.MOST_DECODED)
        return Ranking(name, "alike", "segment", ci.segment, text, rows)
    W = arc.channel(name).window
    rows = tuple(Row(int(w), int(w) * W, float(d)) for w, d in arc.similar(name, int(number), k=k))
    return Ranking(name, "alike", "window", W, BASED_ON_FALLBACK["alike"], rows)


def glance(arc, channel: str | None = None, start: int = 0, end: int | None = None) -> Glance:
    """Approximate samples ``start..end-1`` (sample numbers) without decoding the residuals."""
    name = channel_name(arc, channel)
    if member.has_index(arc):
        ci = member.read(arc, name, facts=False)
        unit = f" {arc.channel(name).unit}" if arc.channel(name).unit else ""
        return Glance(name, start, Q.preview(ci, start, end), ci.worst,
                      based_on(ci, "glance").format(worst=f"±{ci.worst:.4g}{unit}"))
    n = arc.channel(name).n_samples
    end = n if end is None else min(end, n)
    x = np.asarray(arc.preview(name), dtype=np.float64)[start:end]
    return Glance(name, start, x, None, BASED_ON_FALLBACK["glance"])
