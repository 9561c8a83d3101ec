"""The compact manifest of format 5: nothing stored twice, expanded on reading.

A format-4 manifest repeats in every channel what the archive holds once:
the rate, start and sample count (one time axis), usually the unit, dtype,
budget and note, each channel's ε inside and beside its grid, the share of
the budget used (``worst_error / ε``) and a zero count for every predictor.
Format 5 writes each fact once:

* ``channel_defaults``: the keys of :data:`SHARED` whose value every channel
  has; a channel entry leaves them out (an entry's own value wins);
* a channel's ε only in its ``grid`` (``eps``), and the grid's ``out_dtype``
  only when it differs from the channel's ``dtype``;
* a channel's ``summary`` without ``used_pct`` (derived), without zero
  predictor counts and without a zero ``n_exceptions``; no empty ``note``;
* from format 6 on also without a step grid's ``step`` when it is exactly
  ``2 x eps`` and without a channel's ``ratio`` when it is exactly what its
  ``bits_per_sample`` gives (``8 x itemsize / bits``, 6 significant digits);
* no ``time`` entry for the plain axis of a source without times (seconds
  from 0 at the rate, no start: :data:`PLAIN_AXIS`), which is what a reader
  assumes without one.

:func:`expand` rebuilds the format-4 shape, so every check of ``parse.py``
and every reader of ``Archive.manifest`` sees the fields they always saw.
The binding (``binding.py``) is the digest of the manifest as stored.
"""

from __future__ import annotations

import copy

SHARED = ("unit", "dtype", "decimals", "rate", "start", "n_samples", "budget", "scale", "note")
DEFAULTS = "channel_defaults"
PLAIN_AXIS = {"kind": "seconds", "zone": None, "columns": [], "runs": [[0, "0x0.0p+0"]]}


def compact(manifest: dict) -> dict:
    """A full (format-4 shaped) manifest -> its format-5 form."""
    m = copy.deepcopy(manifest)
    chans = m.get("channels", [])
    shared = {k: chans[0][k] for k in SHARED
              if chans and k in chans[0] and all(k in c and c[k] == chans[0][k] for c in chans)}
    for c in chans:
        for k in shared:
            del c[k]
        grid = c.get("grid", {})
        c.pop("eps", None)
        if grid.get("out_dtype") == c.get("dtype", shared.get("dtype")):
            del grid["out_dtype"]
        if grid.get("kind") == "step" and _number(grid.get("eps")) and grid.get("step") == 2 * grid["eps"]:
            del grid["step"]                  # format 6: a step grid's step is 2 eps (doubling is exact)
        if c.get("note") == "":
            del c["note"]
        s = c.get("summary", {})
        s.pop("used_pct", None)
        if _number(s.get("bits_per_sample")) and s.get("ratio") == _ratio(s["bits_per_sample"], c, shared):
            del s["ratio"]                    # format 6: 8 x the dtype's bytes / bits per sample
        s["modes"] = {k: v for k, v in s.get("modes", {}).items() if v}
        if s.get("n_exceptions") == 0:
            del s["n_exceptions"]
    if shared:
        m[DEFAULTS] = shared
    if m.get("time") == PLAIN_AXIS and all(c.get("start", shared.get("start")) is None for c in chans):
        del m["time"]
    return m


def expand(manifest: dict, predictors: tuple[str, ...]) -> dict:
    """A format-5 manifest -> the full shape (a new dict; the stored one is left as it is).

    Only well-formed parts are filled in: a malformed field is left for ``parse.py`` to name."""
    m = copy.deepcopy(manifest)
    shared = m.pop(DEFAULTS, {})
    chans = m.get("channels")
    if not isinstance(shared, dict) or not isinstance(chans, list):
        return m
    if "time" not in m and all(isinstance(c, dict) and {**shared, **c}.get("start") is None for c in chans):
        m["time"] = copy.deepcopy(PLAIN_AXIS)
    for i, c in enumerate(chans):
        if not isinstance(c, dict):
            continue
        c = chans[i] = {**shared, **c}
        grid = c.get("grid")
        if isinstance(grid, dict):
            c.setdefault("eps", grid.get("eps"))
            grid.setdefault("out_dtype", c.get("dtype"))
            if grid.get("kind") == "step" and _number(grid.get("eps")):
                grid.setdefault("step", 2 * grid["eps"])
        c.setdefault("note", "")
        s = c.get("summary")
        if isinstance(s, dict):
            worst, eps = s.get("worst_error"), c.get("eps")
            if _number(worst) and _number(eps):
                s.setdefault("used_pct", 100.0 * worst / eps if eps > 0 else (0.0 if worst == 0 else float("inf")))
            if _number(s.get("bits_per_sample")) and "ratio" not in s:
                got = _ratio(s["bits_per_sample"], c, {})
                if got is not None:
                    s["ratio"] = got
            if isinstance(s.get("modes"), dict):
                s["modes"] = {**{p: 0 for p in predictors}, **s["modes"]}
            s.setdefault("n_exceptions", 0)
    return m


def _number(v) -> bool:
    return type(v) in (int, float)


def _ratio(bits: float, channel: dict, shared: dict) -> float | None:
    """A channel's reported ratio from its bits per sample (both from the same share of the archive's
    bytes: ratio = 8 x itemsize / bits), to the 6 significant digits the manifest writes; None when the
    channel's dtype is not a numpy dtype name."""
    import math

    import numpy as np
    try:
        size = np.dtype(channel.get("dtype", shared.get("dtype"))).itemsize
    except TypeError:
        return None
    r = 8 * size / bits if bits > 0 else math.inf
    return float(f"{r:.6g}") if math.isfinite(r) else r
