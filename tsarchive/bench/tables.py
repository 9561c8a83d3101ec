"""Result rows of a bench run and their plain-text tables.

Conventions used by every table (printed in its legend):

* a *ratio* is ``raw float32 size / compressed size`` with raw float32 size
  ``= 4 bytes x samples x channels``, whatever the source dtype;
* *bits/sample* is ``8 x compressed bytes / (samples x channels)``;
* *best classic* is the smallest of every baseline at the same budget
  (zstd-19, xz -9e or bzip2 -9 on the quantized samples, their first or
  second differences, with or without byte shuffling; the lossless ones
  too); ``vs best`` is our ratio divided by its ratio: above 1 we win;
* *fixed bytes* are an archive's bytes other than the entropy-coded
  residuals (:mod:`tsarchive.bench.archive_bytes`);
* ``err/eps`` is the largest ``max |x_hat - x| / eps`` over the channels
  (must be <= 1);
* MB/s use 1 MB = 1e6 bytes of raw float32 size (pack time excludes the
  torch import, done before the clock starts); peak RSS is the pack child
  process's high-water mark ``VmHWM`` (:func:`tsarchive.bench.child.rss_mb`;
  includes the interpreter and the torch import).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

from .archive_bytes import PARTS
from .baselines import ORDERS, BASELINES, COMPRESSORS, ZSTD_PLAIN


@dataclass(frozen=True)
class CaseRow:
    """One (case, budget) measurement: ours and every baseline, same data, same eps."""

    case: str
    kind: str
    n_samples: int
    n_channels: int
    budget: float
    eps: tuple[float, ...]
    raw_f32_bytes: int
    baseline_bytes: tuple[tuple[str, int], ...]
    baseline_worst: float
    ours_bytes: int | None = None
    payload_bytes: int | None = None      # the entropy-coded residuals alone
    err_over_eps: float | None = None
    pack_s: float | None = None
    unpack_s: float | None = None
    peak_rss_mb: float | None = None
    entropy_bits: float | None = None
    noise_sigma: float | None = None
    failure: str = ""
    notes: tuple[str, ...] = field(default=())
    parts: tuple[tuple[str, int], ...] = ()   # archive bytes by part (archive_bytes.PARTS)

    @property
    def n_values(self) -> int:
        return self.n_samples * self.n_channels

    def ratio(self, nbytes: int | None) -> float | None:
        return None if not nbytes else self.raw_f32_bytes / nbytes

    def bits(self, nbytes: int | None) -> float | None:
        return None if nbytes is None else 8.0 * nbytes / self.n_values

    @property
    def ours_ratio(self) -> float | None:
        return self.ratio(self.ours_bytes)

    @property
    def best_classic(self) -> tuple[str, int]:
        """(id, bytes) of the smallest baseline; the first in table order on a tie."""
        return min(self.baseline_bytes, key=lambda kv: kv[1])

    @property
    def best_classic_bytes(self) -> int:
        return self.best_classic[1]

    def best_of(self, compressor: str) -> int:
        """Smallest lossy baseline through ``compressor`` (zstd, xz, bz2)."""
        ids = {b.id for b in BASELINES if not b.lossless and _compressor(b.id) == compressor}
        return min(v for k, v in self.baseline_bytes if k in ids)

    @property
    def fixed_bytes(self) -> int | None:
        p = dict(self.parts)
        return sum(v for k, v in p.items() if k != "payload") if p else None

    @property
    def vs_best(self) -> float | None:
        return None if self.ours_bytes is None else self.best_classic_bytes / self.ours_bytes

    def mbps(self, seconds: float | None) -> float | None:
        return None if not seconds else self.raw_f32_bytes / 1e6 / seconds

    def to_dict(self) -> dict:
        d = asdict(self)
        d["baseline_bytes"] = dict(self.baseline_bytes)
        d["eps"] = list(self.eps)
        d["notes"] = list(self.notes)
        d["parts"] = dict(self.parts)
        d.update(best_classic_id=self.best_classic[0], fixed_bytes=self.fixed_bytes,
                 ours_ratio=self.ours_ratio, ours_bits_per_sample=self.bits(self.ours_bytes),
                 vs_best_classic=self.vs_best, pack_mb_s=self.mbps(self.pack_s), unpack_mb_s=self.mbps(self.unpack_s),
                 baseline_ratios={k: self.ratio(v) for k, v in self.baseline_bytes})
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "CaseRow":
        keep = {k: d[k] for k in cls.__dataclass_fields__ if k in d}
        keep["eps"] = tuple(keep.get("eps", ()))
        keep["notes"] = tuple(keep.get("notes", ()))
        keep["baseline_bytes"] = tuple(dict(d["baseline_bytes"]).items())
        keep["parts"] = tuple(dict(d.get("parts") or {}).items())
        return cls(**keep)


def fmt(value: float | None, spec: str = ".2f") -> str:
    """A number for a table cell; ``-`` for missing, ``inf`` kept readable."""
    if value is None:
        return "-"
    if isinstance(value, float) and math.isinf(value):
        return "inf"
    return format(value, spec)


def render(headers: list[str], rows: list[list[str]]) -> str:
    """A fixed-width text table; the first column is left aligned, the others right aligned."""
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(headers)]

    def line(cells: list[str]) -> str:
        return "  ".join(c.ljust(w) if i == 0 else c.rjust(w) for i, (c, w) in enumerate(zip(cells, widths)))

    out = [line(headers), "  ".join("-" * w for w in widths)]
    out += [line(r) for r in rows]
    return "\n".join(out)


def _compressor(baseline_id: str) -> str:
    name = baseline_id.split("+")[0]
    return name.split(".")[1] if "." in name else "zstd"


def main_table(rows: list[CaseRow]) -> str:
    """The comparison table: one line per (case, budget); the lossy baselines by their best per compressor."""
    headers = (["case", "budget", "samples", "ours", "bits/s", "coded b/s", "zstd", "parquet"]
               + [f"best {c}" for c in COMPRESSORS]
               + ["best classic", "which", "vs best", "fixed B", "err/eps", "pack MB/s", "unpack MB/s", "RSS MiB"])
    body = []
    for r in rows:
        sizes = dict(r.baseline_bytes)
        best_id, best = r.best_classic
        body.append([r.case, f"{r.budget:g}", f"{r.n_samples}x{r.n_channels}",
                     fmt(r.ours_ratio) if not r.failure else "FAIL", fmt(r.bits(r.ours_bytes)),
                     fmt(r.bits(r.payload_bytes), ".3f"), fmt(r.ratio(sizes["zstd"])), fmt(r.ratio(sizes["parquet"]))]
                    + [fmt(r.ratio(r.best_of(c))) for c in COMPRESSORS]
                    + [fmt(r.ratio(best)), best_id, fmt(r.vs_best), fmt(r.fixed_bytes, "d"),
                       fmt(r.err_over_eps, ".3f") + ("!" if (r.err_over_eps or 0) > 1 else ""), fmt(r.mbps(r.pack_s), ".3g"),
                       fmt(r.mbps(r.unpack_s), ".3g"), fmt(r.peak_rss_mb, ".0f")])
    return render(headers, body)


def baselines_table(rows: list[CaseRow]) -> str:
    """Every lossy baseline's ratio: a line per (case, budget, predictor), a column per compressor and shuffle."""
    cols = [(c, shuf) for c in COMPRESSORS for shuf in (False, True)]
    headers = ["case", "budget", "predictor"] + [c + ("+shuf" if shuf else "") for c, shuf in cols]
    body = []
    for r in rows:
        sizes = dict(r.baseline_bytes)
        for name, _, _ in ORDERS:
            ids = [name + ("" if c == "zstd" else f".{c}") + ("+shuf" if shuf else "") for c, shuf in cols]
            body.append([r.case, f"{r.budget:g}", name] + [fmt(r.ratio(sizes.get(i))) for i in ids])
    return render(headers, body)


def fixed_table(rows: list[CaseRow]) -> str:
    """Archive bytes by part: where short archives lose.  ``best / payload`` is the best classic's bytes over
    the entropy-coded residuals alone: what ``vs best`` would be with no fixed bytes at all."""
    headers = (["case", "budget", "archive B", "fixed B", "fixed %"] + [p.replace("_", " ") for p in PARTS]
               + ["best classic B", "best / payload"])
    body = []
    for r in rows:
        if not r.parts or not r.ours_bytes:
            continue
        p = dict(r.parts)
        body.append([r.case, f"{r.budget:g}", str(r.ours_bytes), str(r.fixed_bytes),
                     f"{100 * r.fixed_bytes / r.ours_bytes:.1f}"] + [str(p.get(k, 0)) for k in PARTS]
                    + [str(r.best_classic_bytes), fmt(r.best_classic_bytes / p["payload"] if p.get("payload") else None)])
    return render(headers, body)


def limit_table(rows: list[CaseRow]) -> str:
    """Gaussian-noise limit rows: our bits/sample and the best classic's against H."""
    headers = ["case", "budget", "sigma", "eps/sigma", "H bits", "ours bits", "ours - H", "coded bits", "coded / H",
               "overhead bits", "best classic bits"]
    body = []
    for r in rows:
        if r.entropy_bits is None or r.noise_sigma is None:
            continue
        ours = r.bits(r.ours_bytes)
        coded = r.bits(r.payload_bytes)
        body.append([r.case, f"{r.budget:g}", f"{r.noise_sigma:g}", fmt(min(r.eps) / r.noise_sigma, ".4g"),
                     fmt(r.entropy_bits, ".3f"), fmt(ours, ".3f"),
                     fmt(None if ours is None else ours - r.entropy_bits, "+.3f"),
                     fmt(coded, ".3f"), fmt(None if coded is None else coded / r.entropy_bits, ".4f"),
                     fmt(None if coded is None or ours is None else ours - coded, ".3f"),
                     fmt(r.bits(r.best_classic_bytes), ".3f")])
    return render(headers, body)


LEGEND = (
    "ratios = raw float32 size (4 B x samples x channels) / compressed size; bits/s = compressed bits per sample;\n"
    "coded b/s = the entropy-coded residuals alone (bits/s minus coded b/s = checksums, levels, scores, tables,\n"
    "manifest and Parquet framing);\n"
    "baselines: " + "; ".join(f"{b.id} = {b.describe}" for b in BASELINES) + ";\n"
    "quant/prev/prev2 quantize on the channel's logging grid when tsarchive detects one (integers, fixed decimals);\n"
    "best zstd/xz/bz2 = the smallest of quant, prev, prev2 (with or without +shuf) through that compressor;\n"
    "best classic = the smallest of every baseline (which = its id); vs best = our ratio / best classic's;\n"
    "fixed B = archive bytes other than the entropy-coded residuals (see the fixed-bytes table); err/eps = max over channels of max|x_hat - x| / eps;\n"
    "budget b: eps = b x (max - min) of each channel; MB/s of raw float32 size (1 MB = 1e6 B), pack time includes\n"
    "training and pack's own read-back check but not the torch import, unpack = open + read every channel;\n"
    "RSS MiB = peak resident set (VmHWM) of the child process that packs (includes interpreter and torch)."
)


def summary_table(rows: list[CaseRow]) -> str:
    """Per budget and overall: wins against the best classic baseline, the worst case, geomean; and how
    often xz or bzip2 beats every zstd form (the earlier rounds' classic coder, zstd only, in the last column)."""
    def gmean(xs: list[float]) -> float:
        return math.exp(sum(math.log(x) for x in xs) / len(xs))

    def line(label: str, rs: list[CaseRow]) -> list[str]:
        v = [(r.vs_best, r.case) for r in rs if r.vs_best is not None]
        if not v:
            return [label, "0", "-", "-", "-", "-", "-"]
        worst = min(v)
        not_zstd = sum(min(r.best_of("xz"), r.best_of("bz2")) < r.best_of("zstd") for r in rs)
        old = [min(dict(r.baseline_bytes)[b] for b in ZSTD_PLAIN) / r.ours_bytes for r in rs if r.ours_bytes]
        return [label, str(len(v)), f"{sum(x >= 1.0 for x, _ in v)}/{len(v)}", f"{worst[0]:.2f} ({worst[1]})",
                f"{gmean([x for x, _ in v]):.2f}", f"{not_zstd}/{len(rs)}", f"{gmean(old):.2f}"]
    budgets = sorted({r.budget for r in rows}, reverse=True)
    body = [line(f"b = {b:g}", [r for r in rows if r.budget == b]) for b in budgets] + [line("all", rows)]
    return render(["budgets", "cases", "vs best >= 1", "lowest vs best", "geomean vs best", "xz/bz2 < zstd",
                   "geomean vs quant/prev/prev2 zstd"], body)
