"""Export channels of an archive over a time range to .npy, .csv or .parquet (``Archive.export``).

Where an export may be written (:func:`check_target`), checked before
anything is decoded:

* never into an archive folder (any folder holding ``manifest.json`` and
  ``windows.parquet``, or below one), and never over a folder;
* never over an existing file unless ``force`` is given;
* never over the archive's recorded source -- a file whose size and SHA-256
  equal the manifest's ``source`` (so also a link to it, or a copy) -- not
  even with ``force``, unless ``replace_original`` is given the first 12 (or
  more) hex digits of that SHA-256: a value that cannot be typed by accident
  (``tsarchive report`` shows it).

Every file is marked as a reconstruction (:class:`tsarchive.export.Origin`),
and CSV values are written with each channel's
:class:`~tsarchive.export_text.CellFormat`.
"""

from __future__ import annotations

from pathlib import Path

from .checksum import file_sha256
from .errors import BadInput
from .export import Origin, TextParts, sidecar_path, write_table
from .export_text import CellFormat
from .ingest.grid import MAX_CHECKED
from .store.sidecar import extra_layout

#: Hex digits of the source's SHA-256 that ``replace_original`` must give.
ORIGINAL_PREFIX = 12


def export_range(arc, out_path, channels=None, start=None, end=None, *, force: bool = False,
                 replace_original: str | None = None) -> Path:
    """Decode ``channels`` (all by default) whose times lie in ``start <= t - t[0] < end`` (seconds) and
    write them atomically with their logged times and, for a whole-table export, the text columns.

    Raises :class:`BadInput` when the target is refused (see the module
    docstring) before anything is decoded.
    """
    names = [c.name for c in arc.channels] if not channels else list(channels)
    metas = [arc.channel(n) for n in names]
    if len({m.rate for m in metas}) > 1:
        raise BadInput("the chosen channels have different rates; export them separately")
    out = Path(out_path)
    replace = check_target(arc, out, force=force, replace_original=replace_original)
    meta = metas[0]
    columns = arc.read_many(names, start, end)
    times = arc.times(start, end)
    extra = arc.extra(start, end) if not channels else None     # text columns with a whole-table export
    positions = extra_layout(arc.manifest)[1]
    shape = arc.manifest.get("source", {}).get("shape", [])
    one_d = len(shape) == 1 and len(names) == 1
    text = TextParts(notes=arc.notes, extra=extra, positions=positions)
    return write_table(out, columns, rate=meta.rate, start=meta.start, times=times, text=text,
                       units={m.name: m.unit for m in metas}, shape_1d=one_d,
                       formats={m.name: cell_format(m) for m in metas}, origin=origin_of(arc, metas),
                       replace=replace)


def cell_format(meta) -> CellFormat:
    """The CSV cell format of one archived channel.

    A decimal grid (lossless, logged with ``d`` decimals) prints ``d``
    decimals; a lossy step grid prints the fewest decimals that keep each
    value on its grid point and within ε of the original (using the
    channel's recorded worst error and logged decimals); anything else
    prints exact shortest text.
    """
    g = meta.grid
    if g.kind == "decimal":
        return CellFormat(decimals=g.decimals)
    if g.eps > 0:
        # the logged decimals were detected on every value only up to MAX_CHECKED samples
        logged = meta.decimals if meta.n_samples <= MAX_CHECKED else None
        return CellFormat(eps=g.eps, worst=meta.worst_error, step=g.step, offset=g.offset,
                          source_decimals=logged)
    return CellFormat()


def origin_of(arc, metas) -> Origin:
    from .version import __version__

    src = arc.manifest.get("source", {})
    return Origin(archive=arc.path.name, source=str(src.get("name", "")), source_sha256=str(src.get("sha256", "")),
                  tool_version=__version__, bounds=tuple((m.name, float(m.eps), m.unit) for m in metas))


def is_archive_folder(path: Path) -> bool:
    return (path / "windows.parquet").is_file()      # with manifest.json (formats 3 to 5) or holding it (6)


def is_recorded_source(arc, path: Path) -> bool:
    """Whether ``path`` is a file with the size and SHA-256 the archive recorded for its source."""
    src = arc.manifest.get("source", {})
    sha, size = src.get("sha256"), src.get("bytes")
    try:
        if not (sha and path.is_file() and path.stat().st_size == int(size)):
            return False
    except (OSError, TypeError, ValueError):
        return False
    return file_sha256(path) == sha


def check_target(arc, out: Path, *, force: bool, replace_original: str | None = None) -> bool:
    """Refuse a target an export must not write (BadInput); return whether it may replace a file."""
    out = Path(out)
    parent = out.parent.resolve()
    for folder in (parent, *parent.parents):
        if is_archive_folder(folder):
            raise BadInput(f"{out} is inside the archive folder {folder}; an archive folder holds only its own "
                           "members: write the export elsewhere")
    if out.is_dir():
        raise BadInput(f"{out} is a folder; give a file name ending in .csv, .parquet or .npy")
    if is_recorded_source(arc, out):
        sha = str(arc.manifest["source"]["sha256"])
        given = (replace_original or "").strip().lower()
        if not given:
            raise BadInput(f"{out.name} is the recording this archive was packed from (same size and SHA-256); "
                           "an export never replaces it, not even with --force: choose another name")
        if len(given) < ORIGINAL_PREFIX or not sha.startswith(given):
            raise BadInput(f"--replace-original must be the first {ORIGINAL_PREFIX} (or more) hex digits of the "
                           f"original's SHA-256 (tsarchive report shows it); {out.name} was left as it was")
        return True
    existing = [p for p in (out, sidecar_path(out) if out.suffix.lower() == ".npy" else None)
                if p is not None and (p.exists() or p.is_symlink())]
    if existing and not force:
        raise BadInput(f"{existing[0].name} already exists; pass --force to replace it, or choose another name")
    return force
