"""Build the archive's ``manifest.json`` content (see ``store/schema.py``)."""

from __future__ import annotations

import math
from datetime import datetime, timezone

import numpy as np

from .. import checksum
from ..version import __version__
from ..budget import used_pct
from ..recording import Recording
from . import schema as S
from .sidecar import axis_start


def iso(t: datetime | None) -> str | None:
    """ISO 8601 as logged: a naive time stays naive, an offset is kept, UTC is written ``Z``."""
    if t is None:
        return None
    return t.isoformat().replace("+00:00", "Z") if t.tzinfo is timezone.utc else t.isoformat()


def _sig(x: float, digits: int = 6) -> float:
    """A reported figure (not a decoding input) to ``digits`` significant digits: shorter JSON."""
    return float(f"{x:.{digits}g}") if math.isfinite(x) else x


def build_manifest(rec: Recording, spec, codecs, notes, W: int, K: int, decoder,
                   model_note: str, summaries: list, archive_bytes: int) -> dict:
    """Everything a reader needs besides the Parquet members (whose checksums the writer adds).

    Nothing here depends on when or where packing ran (no clock, no host), so
    the same source, settings and tool version give the same bytes; when an
    archive was written is its files' modification time.

    ``codecs`` (one :class:`tsarchive.channelcodec.ChannelCodec` per channel)
    give each channel entry its coding fields (``eps``, ``grid``, ``scale``,
    ``lpc``, ``tables``): the entropy tables as ``{"mode", "table", "coder",
    "freqs"}`` with ``freqs`` the integer frequency table's bytes in base64 (a
    few hundred bytes; a Parquet file of its own would cost more in framing
    than its content).
    """
    src = rec.source
    src_bytes = src.stat().st_size if src is not None and src.is_file() else int(rec.data.nbytes)
    raw_bytes = sum(rec.n_samples * np.dtype(c.dtype).itemsize for c in rec.channels)
    est_total = sum(s.bytes_est for s in summaries) or 1
    channels = []
    for j, ch in enumerate(rec.channels):
        s, g = summaries[j], codecs[j].grid
        share = archive_bytes * s.bytes_est / est_total
        bits = _sig(8 * share / max(rec.n_samples, 1))
        channels.append({
            **ch.to_dict(), "rate": rec.rate, "start": iso(axis_start(rec)), "n_samples": rec.n_samples,
            "budget": spec.for_channel(ch.name).spec, **codecs[j].to_dict(), "note": notes[j],
            "summary": {"worst_error": s.worst_error, "used_pct": _sig(used_pct(s.worst_error, g.eps)),
                        "ratio": _sig(8 * np.dtype(ch.dtype).itemsize / bits if bits else math.inf),   # = raw / share
                        "bits_per_sample": bits,
                        "n_exceptions": s.n_exceptions, "modes": dict(s.modes)},
        })
    return {
        "format": S.FORMAT_NAME, "format_version": S.FORMAT_VERSION, "tool_version": __version__,
        "source": {"name": src.name if src is not None else "", "bytes": int(src_bytes),
                   "sha256": checksum.file_sha256(src) if src is not None and src.is_file() else "",
                   "shape": list(rec.shape or rec.data.shape)},
        "window": W, "code_size": K if decoder is not None else 0, "budget_spec": spec.spec,
        "model": None if decoder is None else decoder.config(), "model_note": model_note,
        "channels": channels,
        "summary": {"raw_bytes": int(raw_bytes), "archive_bytes_before_manifest": int(archive_bytes),
                    "ratio": _sig(raw_bytes / archive_bytes if archive_bytes else math.inf)},
    }
