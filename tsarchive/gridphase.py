"""The grid's phase: where a channel's step grid sits, chosen per channel on a sample.

A step grid ``x̂ = offset + q * step`` serves the bound at any offset; where it
sits decides how often a slow signal dithers across a step boundary (every
crossing is a ±1 residual that costs bits).  :func:`choose_phase` quantizes a
sample of the channel with the grid shifted by 0, 1/4, 1/2 and 3/4 of a step
(and, for float grids, with the offset a multiple of the step, the "zero
offset"), and keeps the shift whose first differences cost the fewest bits:
``sum log2(1 + 2|Δq|) + 1`` per sample in the integer units of
:mod:`tsarchive.fixedlog`, plus 96 bits per sample that would be stored
verbatim.  Every cost is an integer, so the choice is the same on every
machine; a tie keeps the first candidate (the grid as made).

A channel the classic coder takes may move on to another of the candidates, the
one its compressor codes smallest (:func:`tsarchive.encoder.classic_phase`,
given :func:`ranked_phases`).  The offset (and an integer channel's ``origin``)
is already part of the grid in the manifest, so a chosen phase needs no new field.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from . import fixedlog
from .quantize import Grid, quantize

PHASES = 4                    # shifts tried: k/PHASES of a step, k = 0 .. PHASES-1
VERBATIM_BITS = 96            # what a verbatim sample costs (position + raw bits), roughly


def candidates(grid: Grid, mult: int = 1) -> list[Grid]:
    """The grid and its shifted copies (the grid itself first); only lossy step grids shift.  An
    integer channel logged on multiples of ``mult`` (``make_grid``'s ``mult``) shifts by multiples of it."""
    if grid.kind != "step" or grid.eps <= 0:
        return [grid]
    out = [grid]
    if grid.origin is not None:          # integer channel: shift by whole multiples of the value lattice
        dt = np.iinfo(np.dtype(grid.out_dtype))
        lattice = int(grid.step) // mult
        for k in range(1, PHASES):
            o = grid.origin + (k * lattice // PHASES) * mult
            if k * lattice // PHASES and dt.min <= o <= dt.max:
                out.append(replace(grid, origin=o, offset=float(o)))
        return _unique(out)
    s = grid.step
    for off in [grid.offset + k * s / PHASES for k in range(1, PHASES)] + [s * math.floor(grid.offset / s)]:
        if math.isfinite(off):
            out.append(replace(grid, offset=float(off)))
    return _unique(out)


def _unique(grids: list[Grid]) -> list[Grid]:
    seen, out = set(), []
    for g in grids:
        key = (g.offset, g.origin)
        if key not in seen:
            seen.add(key)
            out.append(g)
    return out


def cost_units(q: np.ndarray, n_verbatim: int) -> int:
    """Bits (in 2**-FRAC units, an exact integer) of the first differences of each row of ``q``."""
    if q.shape[1] < 2:
        return n_verbatim * VERBATIM_BITS * fixedlog.ONE
    d = np.diff(q, axis=1)
    with np.errstate(over="ignore"):
        a = np.abs(d)
    a = np.where((a < 0) | (a > (1 << 61)), 1 << 61, a)
    units = int(fixedlog.log2q(2 * a.ravel() + 1).sum()) + d.size * fixedlog.ONE
    return units + n_verbatim * VERBATIM_BITS * fixedlog.ONE


def ranked_phases(grid: Grid, stretches: np.ndarray, mult: int = 1) -> list[Grid]:
    """The candidate grids, those whose quantized ``stretches`` (k, n) of the channel cost the fewest bits
    first (a tie in candidate order); unranked where there is no sample."""
    options = candidates(grid, mult)
    if len(options) == 1 or not stretches.size:
        return options
    costs = []
    for g in options:
        q, pos, _ = quantize(stretches.ravel(), g)
        costs.append(cost_units(q.reshape(stretches.shape), len(pos)))
    return [options[i] for i in sorted(range(len(options)), key=lambda i: (costs[i], i))]


def choose_phase(grid: Grid, stretches: np.ndarray, mult: int = 1) -> Grid:
    """The candidate grid whose quantized ``stretches`` (k, n) of the channel cost the fewest bits."""
    return ranked_phases(grid, stretches, mult)[0]
