"""Which files a batch packs, and where each archive goes (no packing here).

* Inputs are folders (walked recursively), glob patterns and single files.
  A folder contributes the files whose extension a reader understands
  (:data:`tsarchive.ingest.SUPPORTED`); hidden files and folders (a name
  starting with ``.``), archive folders and the output folder are passed
  over.  A single file or a glob match is taken as named, so a bad one is
  reported by its reader (and the batch goes on).
* Every archive goes into the output folder, mirroring the source's path
  relative to the deepest folder that holds every input:
  ``lab/2024/run.csv`` -> ``OUT/2024/run.csv.tsarchive``.  The archive keeps
  the source's extension, so ``run.csv`` and ``run.parquet`` never share one.
* Nothing is ever written next to a source: a plan whose archive would land
  in a folder holding one of the batch's sources is refused before anything
  is written.
"""

from __future__ import annotations

import glob
import hashlib
import json
import os
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import BadInput
from ..ingest import SUPPORTED
from ..ingest.options import ReadOptions
from ..names import ARCHIVE_SUFFIX, ARCHIVE_SUFFIXES
from ..store.inside import is_archive
from .catalog import is_catalog

#: Characters that make an input a glob pattern (``glob.has_magic``'s).
_MAGIC = ("*", "?", "[")


@dataclass(frozen=True)
class BatchSettings:
    """How every file of a batch is packed: ``tsarchive.pack``'s options, the same for all files."""

    budget: str | None = None
    rate: float | None = None
    window: int | None = None
    code_size: int | None = None
    read_options: ReadOptions = field(default_factory=ReadOptions)
    train_seconds: float | None = None      # None: pack's own default (the tool version then names it)
    seed: int | None = None
    force: bool = False
    shared_model: bool = False              # one model for the batch (tsarchive.batch.shared)

    def pack_options(self) -> dict:
        """Keyword arguments for :func:`tsarchive.pack` (all but source, archive and force)."""
        extra = {k: v for k, v in (("train_seconds", self.train_seconds), ("seed", self.seed)) if v is not None}
        return dict(budget=self.budget, rate=self.rate, window=self.window, code_size=self.code_size,
                    read_options=self.read_options, **extra)

    def to_dict(self) -> dict:
        """What decides the archive's bytes besides the source and the tool version (``force`` does not)."""
        return {"budget": self.budget, "rate": self.rate, "window": self.window, "code_size": self.code_size,
                "read_options": self.read_options.to_dict(), "train_seconds": self.train_seconds, "seed": self.seed,
                **({"shared_model": True} if self.shared_model else {})}    # per-file batches keep their digest

    def parsed(self):
        """The :class:`~tsarchive.options.PackOptions` every file is packed with."""
        from ..options import PackOptions
        extra = {k: v for k, v in (("train_seconds", self.train_seconds), ("seed", self.seed)) if v is not None}
        return PackOptions.parse(self.budget, self.window, self.code_size, **extra)

    def fingerprint(self) -> str:
        """SHA-256 of :meth:`to_dict`'s canonical JSON (sorted keys, no spaces)."""
        text = json.dumps(self.to_dict(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode()).hexdigest()


@dataclass(frozen=True)
class Job:
    """One file of a batch: its source, its archive, and the archive's path inside the output folder."""

    source: Path
    archive: Path
    rel: str           # the archive's path relative to the output folder, with '/' separators
    rate: float | None = None   # a rate for this file alone (None: the batch's)


@dataclass(frozen=True)
class BatchPlan:
    out: Path
    jobs: tuple[Job, ...]


def is_batch(sources: list[str], into: str | None) -> bool:
    """Whether ``pack``'s arguments ask for a batch: an output folder, several sources, a folder or a glob."""
    if into is not None or len(sources) != 1:
        return True
    s = sources[0]
    return Path(s).is_dir() or (not Path(s).exists() and any(c in s for c in _MAGIC))


def _hidden(name: str) -> bool:
    return name.startswith(".")


def _walk(folder: Path, out: Path) -> list[Path]:
    """Supported files below ``folder``, sorted; hidden entries, archive folders and ``out`` passed over."""
    found = []
    for root, dirs, files in os.walk(folder):
        here = Path(root)
        dirs[:] = sorted(d for d in dirs if not _hidden(d) and not d.endswith(ARCHIVE_SUFFIXES)
                         and not is_archive(here / d) and (here / d).resolve() != out)
        found.extend(here / f for f in sorted(files) if not _hidden(f) and Path(f).suffix.lower() in SUPPORTED
                     and (here / f).is_file() and not is_catalog(here / f))
    return found


def _expand(item: str, out: Path) -> tuple[Path, list[Path]]:
    """(the folder this input's paths are relative to, its files)."""
    p = Path(item)
    if p.is_dir():
        return p.resolve(), [f.resolve() for f in _walk(p, out)]
    if p.exists() or not any(c in item for c in _MAGIC):
        return p.resolve().parent, [p.resolve()]   # a missing or odd file is reported by the batch itself
    matches = sorted(Path(m) for m in glob.glob(item, recursive=True))
    if not matches:
        raise BadInput(f"no file matches {item!r}; check the pattern (quote it so the shell leaves it to tsarchive)")
    files: list[Path] = []
    for m in matches:
        if m.is_dir():
            files.extend(f.resolve() for f in _walk(m, out))
        elif not _hidden(m.name) and m.suffix.lower() in SUPPORTED:
            files.append(m.resolve())
    parts = Path(item).parts
    fixed = next(i for i, part in enumerate(parts) if any(c in part for c in _MAGIC))
    base = Path(*parts[:fixed]).resolve() if fixed else Path.cwd()
    return base, files


def plan_batch(inputs: list[str], out: str | os.PathLike) -> BatchPlan:
    """The batch's files and their archives (see the module doc); :class:`BadInput` when nothing can be planned."""
    if not inputs:
        raise BadInput("pack: give at least one recording, folder or pattern")
    out = Path(out).resolve()
    if out.exists() and not out.is_dir():
        raise BadInput(f"{out} is a file; the output folder must be a folder (it is created when missing)")
    if out.suffix in ARCHIVE_SUFFIXES or is_archive(out):
        raise BadInput(f"{out} is an archive's name; give a plain folder for the archives (e.g. archives/)")
    bases, files = [], []
    for item in inputs:
        base, found = _expand(item, out)
        bases.append(base)
        files.extend(found)
    files = list(dict.fromkeys(files))          # once each, first-named order
    if not files:
        raise BadInput(f"no recordings found in {', '.join(inputs)} (looked for {', '.join(SUPPORTED)}); "
                       "check the folder")
    root = Path(os.path.commonpath([str(b) for b in bases]))
    outside = [f for f in files if not f.is_relative_to(root)]
    if outside:       # a glob such as ../x/*.csv whose matches lie above its fixed part
        root = Path(os.path.commonpath([str(root), *(str(f.parent) for f in outside)]))
    jobs = []
    for f in files:
        rel = f.relative_to(root).as_posix() + ARCHIVE_SUFFIX
        jobs.append(Job(source=f, archive=out / rel, rel=rel))
    _check_apart(jobs)
    return BatchPlan(out=out, jobs=tuple(jobs))


def _check_apart(jobs: list[Job]) -> None:
    """Refuse a plan that would write an archive into a folder holding a recording (one of its sources or not)."""
    source_dirs = {j.source.parent: j.source for j in jobs}
    for folder in dict.fromkeys(j.archive.parent for j in jobs):
        there = source_dirs.get(folder) or _recording_in(folder)
        if there is not None:
            raise BadInput(f"archives would be written beside the source {there}; choose an output folder that "
                           "holds no recordings (e.g. --into archives/)")


def _recording_in(folder: Path) -> Path | None:
    try:
        return next((p for p in folder.iterdir() if p.suffix.lower() in SUPPORTED and not _hidden(p.name)
                     and p.is_file() and not is_catalog(p)), None)
    except OSError:       # not there yet: nothing beside it
        return None
