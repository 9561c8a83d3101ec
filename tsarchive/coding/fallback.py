"""A whole channel in the classic coder, where it is smaller than the entropy coders (issue 12).

Where a quantized channel repeats itself exactly (an appliance's power
cycles, breaths, machine rotations), the long matches of zstd and xz and the
Burrows–Wheeler transform of bzip2 find the repeats, which neither the
range coder's order-0 tables nor the adaptive coder's short contexts see.
They find them only in one steady stream: residuals of predictors chosen
window by window (LPC here, previous sample there) break the repeats.  So a
*classic channel* codes every window with the previous-sample predictor
(``prev``, id 0: the window's first sample against its stored level, then
first differences) and its residuals with one :class:`ClassicCoder`
combination: its order -1 sums them back to the samples less the level, 0
keeps the first differences, 1 takes second differences (the "quant", "prev"
and "prev2" of the bench's classic baselines).
Each window is coded alone, or (``"block": B``) each run of ``B`` consecutive
windows as one stream (:func:`joined`: the block's first differences, so a
repeat longer than a window is within the compressor's reach; a window then
decodes with its block; the channel's short last window ends the block its
number falls in, ``"tail": 1``); every window's CRC is checked as every window's.

:func:`classic_choice` decides on the packer's spread sample of the channel's
windows, the one the other coders are measured on (:func:`tsarchive.encoder.choose_coder`):

1. the combination (order -1, 0 or 1, shuffled or not, zstd or bzip2) with the
   fewest bytes on at most ``SETTING_SAMPLES`` samples of it; xz (slow) is
   tried with every order and shuffle too, only where the best so far is
   within ``XZ_WITHIN`` of the bytes to beat (xz's best shuffle is not always
   zstd's: on appliance_acsf1 at 0.01 % unshuffled xz takes 37081 B where
   shuffled, zstd's choice, takes 38361).  zstd -19 is screened (a tenth of
   its time: zstd at ``SCREEN_LEVEL``, taken down to ``SCREEN_GAIN`` of its
   bytes, stands in for it): it runs only where that bound is at most the
   best so far, and nothing more runs (no zstd -19, no xz) where the bounds
   and the bzip2 bytes together are out of xz's reach.  Where zstd -19 takes
   at least that bound, this is the choice trying every combination makes,
   with fewer runs (one-byte values are not coded again shuffled: the same
   bytes).  Measured against the full search: the 8 channels of ``bench
   --speed`` at 0.05 h, the same 16 choices with 3 instead of 432 zstd -19
   runs of a window or block; the real cases at 1, 0.1 and 0.01 %, the same
   138 choices with 2622 instead of 4338 zstd -19 runs, 3518 instead of 4338
   bzip2, 1948 instead of 2196 xz;
2. that one combination codes the rest of the sample, and the channel takes
   it only if its estimate (payload bytes scaled to the channel, plus its
   config in the manifest) is strictly below the best other coder's;
3. in blocks: step 1 on the first of up to two whole blocks read
   contiguously (the packer's ``_block_sample``), that combination on the
   other, taken only where its estimate is strictly below both the best other
   coder's and the per-window classic coder's.

Every quantity is an integer count of bytes, so the choice is the same on
every machine with the same compressor libraries (see :mod:`.classic` on
their versions).
"""

from __future__ import annotations

import json
from dataclasses import replace
from typing import Callable

import numpy as np

from tsarchive.predict import Context, get_predictor
from tsarchive.windows import spread

from .classic import MAX_BLOCK, ClassicCoder, screen_bytes, value_width, window_offsets

PREV = 0                    # the predictor of every window of a classic channel (predict.PREDICTORS)
SETTING_SAMPLES = 1 << 16   # bound on the samples the combination is chosen on
ORDERS = (-1, 0, 1)         # the classic coder's orders a channel may take (see the module docstring)
BLOCK_SAMPLES = 1 << 18     # bound on the samples of a block of windows coded as one payload
XZ_WITHIN = (5, 4)          # xz is tried where the best so far is at most 5/4 of the bytes to beat
SCREEN_LEVEL = 9            # zstd level standing in for zstd -19 in the choice (a tenth of its time)
SCREEN_GAIN = (3, 4)        # zstd -19 takes at least 3/4 of what zstd SCREEN_LEVEL takes: 0.74 at least on the
                            # real cases' samples at 1, 0.1, 0.01 % (828 combinations) but one, 0.57
                            # (resp_pyphysio at 0.01 %, where bzip2 takes 28 % less anyway); 0.91 on bench --speed


def estimate(payload_bytes: int, count: int, n_total_windows: int, stored) -> int:
    """Bytes of a channel of ``n_total_windows`` windows whose ``count`` sampled windows take
    ``payload_bytes``, plus ``stored`` (what the coder adds to the manifest) as compact JSON."""
    return payload_bytes * n_total_windows // max(count, 1) + len(json.dumps(stored, separators=(",", ":")))


def prev_residuals(q: np.ndarray, level: np.ndarray) -> np.ndarray:
    """Residuals of windows ``q`` (k, W) under the previous-sample predictor, as a classic channel codes them."""
    return get_predictor(PREV).residuals(q, Context(level))


def joined(q: np.ndarray, level: np.ndarray, lens, heads: np.ndarray) -> np.ndarray:
    """What the blocks code, flat: the samples on the grid ``q`` (flat) of consecutive windows of ``lens``
    samples each (one length, or one per window: a channel's short last window may end a block) as one
    steady stream of first differences per block, its first sample against the block's first window's
    ``level`` (the previous-sample residuals, except that a window inside a block takes its first sample
    against the previous window's last); its running sum from that level is the samples again."""
    heads = np.asarray(heads, bool)
    first = window_offsets(lens, len(heads))[np.flatnonzero(heads)]
    q = np.asarray(q, np.int64)
    out = np.empty(len(q), np.int64)
    with np.errstate(over="ignore"):
        out[1:] = np.diff(q)
        out[first] = q[first] - np.asarray(level, np.int64)[heads]
    return out


def unjoined(values: np.ndarray, level: np.ndarray, lens, heads: np.ndarray) -> np.ndarray:
    """Inverse of :func:`joined`: the previous-sample residuals (flat) of windows of ``lens`` samples
    each whose block streams are ``values`` (flat), given each window's ``level`` (wrap-around int64,
    so any values undo)."""
    heads = np.asarray(heads, bool)
    offs = window_offsets(lens, len(heads))
    first = offs[np.flatnonzero(heads)].tolist()
    q = np.empty(len(values), np.int64)
    with np.errstate(over="ignore"):
        for a, b, lv in zip(first, first[1:] + [len(values)], np.asarray(level, np.int64)[heads].tolist()):
            q[a:b] = np.int64(lv) + np.cumsum(values[a:b], dtype=np.int64)
    out = np.empty(len(values), np.int64)
    for n in np.unique(offs[1:] - offs[:-1]).tolist():      # windows of each length through the predictor
        sel = np.flatnonzero(offs[1:] - offs[:-1] == n)
        at = offs[sel][:, None] + np.arange(n)
        out[at] = prev_residuals(q[at], np.asarray(level)[sel])
    return out


def block_windows(W: int) -> int:
    """Windows of ``W`` samples in a block: the most, a power of two, whose samples fit in
    ``BLOCK_SAMPLES`` (1: no block mode, windows that long already reach as far back)."""
    k = max(1, BLOCK_SAMPLES // max(W, 1))
    return min(MAX_BLOCK, 1 << (k.bit_length() - 1))


def classic_choice(q: np.ndarray, level: np.ndarray, n_total_windows: int, beat: int,
                   blocks: tuple[np.ndarray, np.ndarray] | None = None) -> ClassicCoder | None:
    """The classic coder of one combination for a channel whose sampled windows are ``q`` (k, W) with
    levels ``level``, if its estimate is below ``beat`` bytes (the best other coder's :func:`estimate`
    on the same windows); else None.  ``blocks``: windows (m, W) and levels of whole blocks of
    consecutive windows (:func:`block_windows` each, the channel's last block maybe shorter), on which
    coding in blocks is measured; it is taken where its estimate is below both ``beat`` and the
    per-window coder's (a tie keeps the per-window coder)."""
    if not len(q):
        return None
    coder, size = _per_window(q, level, n_total_windows, beat)
    if blocks is not None and len(blocks[0]) and block_windows(q.shape[1]) > 1:
        coder = _per_block(*blocks, n_total_windows, size) or coder
    return coder


def _per_window(q: np.ndarray, level: np.ndarray, n_total_windows: int, beat: int) -> tuple[ClassicCoder | None, int]:
    """The per-window coder and its estimate if below ``beat``; else ``(None, beat)``."""
    res = prev_residuals(q, level)
    sub = spread(len(res), max(1, SETTING_SAMPLES // res.shape[1]))
    coder, sub_payloads = _setting(res[sub], lambda size: estimate(size, len(sub), n_total_windows, {}) < beat)
    if coder is None:
        return None, beat
    payloads = dict(zip(sub.tolist(), sub_payloads))
    rest = [i for i in range(len(res)) if i not in payloads]
    payloads.update(zip(rest, coder.encode_many(res[rest])))
    size = estimate(sum(map(len, payloads.values())), len(res), n_total_windows, coder.get_config())
    return (coder, size) if size < beat else (None, beat)


def _block_rows(q: np.ndarray, level: np.ndarray) -> list[np.ndarray]:
    """What each block of windows ``q`` (m, W) with levels ``level`` codes (:func:`joined`), one row a block."""
    k, W = q.shape
    B = block_windows(W)
    stream = joined(q.reshape(-1), level, W, np.arange(k) % B == 0)
    return [stream[i * W:(i + B) * W] for i in range(0, k, B)]


def _per_block(q: np.ndarray, level: np.ndarray, n_total_windows: int, beat: int) -> ClassicCoder | None:
    """The block coder of one combination, chosen on the first block of windows ``q`` (m, W) and measured
    on all of them, if its estimate is below ``beat``; else None."""
    k, W = q.shape
    B = block_windows(W)
    rows = _block_rows(q, level)
    first = len(rows[0]) // W
    coder, payloads = _setting(rows[:1], lambda size: estimate(size, first, n_total_windows, {}) < beat, B)
    if coder is None:
        return None
    size = estimate(sum(map(len, payloads + coder.encode_many(rows[1:]))), k, n_total_windows,
                    coder.get_config())
    return coder if size < beat else None


def measure(coder: ClassicCoder, q: np.ndarray, level: np.ndarray, n_total_windows: int,
            blocks: tuple[np.ndarray, np.ndarray] | None = None) -> int:
    """The estimate :func:`classic_choice` makes of the one-combination ``coder`` it chose: on the sampled
    windows ``q`` (k, W) with levels ``level`` (one window a payload), or for a block coder on the
    whole blocks ``blocks`` (windows and levels)."""
    if coder.block == 1:
        rows, count = list(prev_residuals(q, level)), len(q)
    else:
        rows, count = _block_rows(*blocks), len(blocks[0])
    return estimate(sum(map(len, coder.encode_many(rows))), count, n_total_windows, coder.get_config())


def tail_rule(coder, n_samples: int, W: int):
    """A channel's ``coder`` with a block coder's ``tail`` only where it changes the coding: a short last
    window that does not start a block (elsewhere both rules code alike, and the config is shorter)."""
    if not isinstance(coder, ClassicCoder) or coder.block == 1:
        return coder
    return replace(coder, tail=bool(n_samples % W and n_samples // W % coder.block))


def classic_bytes(q: np.ndarray, level: np.ndarray) -> int:
    """Estimated bytes of windows ``q`` (k, W) with levels ``level`` in a classic channel, cheaply (the
    window length's choice): the best of zstd and bzip2 unshuffled on at most ``SETTING_SAMPLES`` of
    them, scaled to the ``k`` windows."""
    if not len(q):
        return 0
    res = prev_residuals(q, level)
    sub = res[spread(len(res), max(1, SETTING_SAMPLES // res.shape[1]))]
    size = min(sum(_fewer_fast(w, order) for w in sub) for order in ORDERS)
    return size * len(res) // len(sub)


def _fewer_fast(values: np.ndarray, order: int) -> int:
    """Bytes of ``values`` unshuffled with ``order`` by the smaller of zstd -19 and bzip2 -9 (what
    ``ClassicCoder(("zstd", "bzip2"), (order,), (False,))`` takes), zstd -19 screened as in
    :func:`_setting`: not run where its bound is at least bzip2's bytes."""
    bz = len(ClassicCoder(("bzip2",), (order,), (False,)).encode(values))
    if screen_bytes(values, order, False, SCREEN_LEVEL) * SCREEN_GAIN[0] // SCREEN_GAIN[1] >= bz:
        return bz
    return min(bz, len(ClassicCoder(("zstd",), (order,), (False,)).encode(values)))


def _setting(res, promising: Callable[[int], bool], block: int = 1) -> tuple[ClassicCoder | None, list[bytes]]:
    """The one-combination coder (of ``block`` windows a payload) with the fewest bytes on windows (or
    blocks) ``res`` and their payloads, or ``(None, [])`` when not even its payload bytes are ``promising``.

    The same choice as trying every zstd and bzip2 combination (then xz where in reach), with zstd -19
    screened: bzip2 -9 (quick) runs on every combination, zstd at ``SCREEN_LEVEL`` stands in for zstd -19,
    which takes at least ``SCREEN_GAIN`` of its bytes; zstd -19 runs only where that bound is at most the
    best so far, and nothing more runs where no bound comes within reach of ``promising`` (see the
    module docstring)."""
    tried: dict[tuple[str, int, bool], list[bytes]] = {}
    bound: dict[tuple[str, int, bool], int] = {}
    narrow = {order: all(value_width(r, order) == 1 for r in res) for order in ORDERS}

    def run(name: str, order: int, shuf: bool) -> list[bytes]:     # one-byte values: shuffling changes nothing
        same = tried.get((name, order, False)) if shuf and narrow[order] else None
        return same if same is not None else ClassicCoder((name,), (order,), (shuf,)).encode_many(res)

    for order in ORDERS:
        for shuf in (False, True):
            tried[("bzip2", order, shuf)] = run("bzip2", order, shuf)
            quick = sum(screen_bytes(r, order, shuf and not narrow[order], SCREEN_LEVEL) for r in res)
            bound[("zstd", order, shuf)] = quick * SCREEN_GAIN[0] // SCREEN_GAIN[1]

    def size(key) -> int:
        return sum(map(len, tried[key]))

    def best() -> tuple[str, int, bool]:    # ties: the first in this fixed order
        return min(tried, key=lambda k: (size(k), _rank(k)))

    pending = sorted(bound, key=lambda k: (bound[k], _rank(k)))     # zstd -19 not run yet, best bound first
    while True:
        floor = min([size(best())] + [bound[k] for k in pending])    # at most the best of all twelve
        if not promising(floor * XZ_WITHIN[1] // XZ_WITHIN[0]):
            return None, []     # the full search would not try xz, and its best would not be promising
        if not pending or bound[pending[0]] > size(best()):
            break               # zstd -19 takes more than the best wherever it has not run: none is chosen
        key = pending.pop(0)
        tried[key] = run(*key)
    to_beat = size(best())
    if promising(to_beat * XZ_WITHIN[1] // XZ_WITHIN[0]):
        for order in ORDERS:     # every order and shuffle: xz's best is not always zstd's (appliance_acsf1)
            for shuf in (False, True):
                tried[("xz", order, shuf)] = run("xz", order, shuf)
    name, order, shuf = best()
    if not promising(size((name, order, shuf))):
        return None, []
    return ClassicCoder((name,), (order,), (shuf,), block, block > 1), tried[(name, order, shuf)]


def _rank(key: tuple[str, int, bool]) -> tuple[int, int, bool]:
    name, order, shuf = key
    return ("zstd", "bzip2", "xz").index(name), order, shuf
