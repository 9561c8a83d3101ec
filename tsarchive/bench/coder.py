"""The entropy coder alone against the order-0 entropy of the symbols it codes.

Symbol families (1 048 576 int64 values each, coded in windows of 1024 with
one table fitted to all of them, as a channel's windows are):

* ``laplace s``: round(Laplace(0, s)) -- prediction residuals of most signals;
* ``p0=0.97`` / ``p0=0.995``: mostly zero, the rest round(Laplace(0, 2)) != 0
  -- residuals at loose budgets;
* ``spikes``: round(Laplace(0, 5)) with 0.1 % of the values drawn uniformly
  from the whole int64 range -- rare escapes.

``p0=0.995`` is also coded in windows of 8192, the longest window the packer
chooses (it does on residuals this sparse: each window's range code ends in
about 3 bits of termination, 5 % of a 1024-window's 60 bits).

The reference is the plug-in order-0 entropy ``-sum n_k log2(n_k / n)`` of the
very values coded (Shannon; no code fitted to the sample can beat it on average
-- Gibbs' inequality, Cover & Thomas ch. 2 and 5).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from tsarchive import entropy as E

from .tables import fmt, render

N = 1 << 20
WINDOW = 1024


def families(n: int = N, seed: int = 0) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)

    def laplace(s):
        return np.rint(rng.laplace(0.0, s, n)).astype(np.int64)

    def mostly_zero(p0):
        x = np.zeros(n, np.int64)
        nz = rng.random(n) >= p0
        v = np.rint(rng.laplace(0.0, 2.0, nz.sum())).astype(np.int64)
        x[nz] = np.where(v == 0, 1, v)
        return x

    spikes = laplace(5.0)
    hit = rng.random(n) < 1e-3
    spikes[hit] = rng.integers(np.iinfo(np.int64).min, np.iinfo(np.int64).max, hit.sum(), endpoint=True)
    return {"laplace 0.5": laplace(0.5), "laplace 10": laplace(10.0), "laplace 1000": laplace(1000.0),
            "p0=0.97": mostly_zero(0.97), "p0=0.995": mostly_zero(0.995), "spikes 0.1%": spikes}


@dataclass(frozen=True)
class CoderRow:
    family: str
    n: int
    window: int
    h0_bits: float        # order-0 entropy of the values, total bits
    coded_bits: int       # range-coded payloads, total bits
    table_bits: int       # the stored table

    @property
    def excess(self) -> float:
        return self.coded_bits / self.h0_bits - 1.0 if self.h0_bits else float("inf")

    def to_dict(self) -> dict:
        return dict(asdict(self), excess=self.excess)


LONG_WINDOW = {"p0=0.995": 8192}


def run(n: int = N) -> list[CoderRow]:
    rows = []
    for name, x in families(n).items():
        table = E.build_table(x)
        for w in (WINDOW, LONG_WINDOW.get(name)):
            if w is None or len(x) % w:
                continue
            coded = 8 * sum(len(p) for p in E.encode_many(x.reshape(-1, w), table))
            rows.append(CoderRow(name, len(x), w, E.order0_entropy_bits(x), coded, 8 * len(table.to_bytes())))
    return rows


def coder_table(rows: list[CoderRow]) -> str:
    return render(["symbols", "n", "window", "H0 bits/sym", "coded bits/sym", "coded / H0 - 1", "table bytes"],
                  [[r.family, str(r.n), str(r.window), fmt(r.h0_bits / r.n, ".4f"), fmt(r.coded_bits / r.n, ".4f"),
                    f"{100 * r.excess:+.2f} %", str(r.table_bits // 8)] for r in rows])
