"""Pack every bundled sample stream, verify each archive against its source.

This is the README's first quick-start command (``tsarchive demo``); the
terminal app then opens on the folder of archives when run in a terminal.
"""

from __future__ import annotations

from pathlib import Path

from .errors import BadInput
from .names import ARCHIVE_SUFFIX

#: Rates of sample streams whose format does not carry one (.npy).
RATES = {"shaker_run.npy": 2000.0}


def find_samples(folder: str | Path | None = None) -> Path:
    for cand in ([Path(folder)] if folder else [Path.cwd() / "sample_streams",
                                                Path(__file__).resolve().parents[1] / "sample_streams"]):
        if cand.is_dir() and any(cand.glob("*.*")):
            return cand
    raise BadInput("sample_streams/ not found; run from the repository folder or pass --samples DIR")


def run_demo(out_dir: str | Path, samples: str | Path | None = None, budget: str | None = None,
             echo=print) -> list:
    from .ingest import SUPPORTED
    from .pipeline import pack
    from .report import pack_table, verify_text
    from .archive import open_archive
    from .verifier import verify_archive
    from .record.kept import write_record

    src_dir = find_samples(samples)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    results = []
    for src in sorted(p for p in src_dir.iterdir() if p.suffix.lower() in SUPPORTED):
        target = out / (src.stem + ARCHIVE_SUFFIX)
        echo(f"\n== {src.name} -> {target}")
        res = pack(src, target, budget, rate=RATES.get(src.name), force=True)
        echo(pack_table(res))
        rep = verify_archive(open_archive(target, strict=False), against=src)
        write_record(target, rep, src)  # the app then lists the archive as verified (record/kept.py)
        echo(verify_text(rep))
        results.append((res, rep))
    return results
