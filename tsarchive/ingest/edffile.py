"""Read EDF / EDF+ / BDF files with pyedflib (an optional dependency: ``pip install tsarchive[edf]``).

Each ordinary signal becomes a channel of physical values (float64, as
pyedflib's ``readSignal`` gives them: digital value x gain + offset) with
its physical dimension as the unit; the header's start date and time is the
recording's (naive) start; EDF+ annotations become notes
(``annotation 12.5 s (+1 s): text``), after the header's patient and
recording lines.

Discontinuous EDF+D/BDF+D files are refused (their gaps would be lost).
A recording has one sample rate.  When an EDF file holds signals at
several rates, the channels of one rate are packed: ``--rate HZ`` picks the
group, and without it the error lists the groups (``256 Hz: C3, C4;
1 Hz: temp``).  Pack the file once per rate to keep every signal.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import BadInput
from ..recording import ChannelInfo, Recording
from .grid import detect_decimals
from .options import ReadOptions


def _groups(rates: list[float]) -> dict[float, list[int]]:
    out: dict[float, list[int]] = {}
    for i, r in enumerate(rates):
        out.setdefault(float(r), []).append(i)
    return out


def _describe(groups: dict[float, list[int]], labels: list[str]) -> str:
    return "; ".join(f"{r:g} Hz: {', '.join(labels[i] for i in idx)}"
                     for r, idx in sorted(groups.items(), reverse=True))


def read_edf(path: Path, options: ReadOptions) -> Recording:
    """The signals of one rate of an EDF(+)/BDF(+) file as a Recording (see the module docstring)."""
    try:
        import pyedflib
    except ImportError:
        raise BadInput(f"{path.name}: reading EDF needs pyedflib; "
                       "install it with pip install 'tsarchive[edf]'") from None
    _refuse_discontinuous(path)
    try:
        f = pyedflib.EdfReader(str(path))
    except (OSError, ValueError, UnicodeDecodeError) as exc:
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise BadInput(f"{path.name}: cannot read as EDF ({msg}); check it is a complete EDF/EDF+/BDF file") from None
    try:
        k = f.signals_in_file
        if k == 0:
            raise BadInput(f"{path.name}: holds no signals (only annotations); nothing to pack")
        labels = [s.strip() for s in f.getSignalLabels()]
        rates = [float(r) for r in f.getSampleFrequencies()]
        groups = _groups(rates)
        if options.rate is None and len(groups) > 1:
            raise BadInput(f"{path.name}: signals come at several rates ({_describe(groups, labels)}); "
                           "pack one group at a time with --rate HZ")
        rate = options.rate if options.rate is not None else rates[0]
        chosen = next((idx for r, idx in groups.items() if abs(r - rate) <= 1e-9 * r), None)
        if chosen is None:
            raise BadInput(f"{path.name}: no signal is recorded at {rate:g} Hz ({_describe(groups, labels)}); "
                           "pick one of these rates with --rate")
        columns, channels, seen = [], [], set()
        for i in chosen:
            x = np.asarray(f.readSignal(i), dtype=np.float64)
            name = labels[i] or f"signal{i}"
            if name in seen:
                raise BadInput(f"{path.name}: signal label '{name}' appears twice; relabel one of the signals")
            seen.add(name)
            columns.append(x)
            channels.append(ChannelInfo(name=name, unit=f.getPhysicalDimension(i).strip(), dtype="float64",
                                        decimals=detect_decimals(x), sentinels=options.sentinels,
                                        scaled=_scale(f, i, x)))
        lengths = {len(c) for c in columns}
        if len(lengths) != 1 or 0 in lengths:
            raise BadInput(f"{path.name}: the {rate:g} Hz signals have different or no lengths; the file is damaged")
        notes = _notes(f)
        start = f.getStartdatetime()
    finally:
        f.close()
    return Recording.from_columns(columns, rate=float(rate), channels=channels, start=start, source=path,
                                  notes=notes)


def _scale(f, i: int, physical: np.ndarray) -> tuple[float, float] | None:
    """``(bitvalue, offset)`` when every physical value of signal ``i`` is ``bitvalue * (offset +
    digital)`` bit for bit, the arithmetic of EDFlib (which pyedflib wraps): ``bitvalue = (physical max
    - physical min) / (digital max - digital min)``, ``offset = physical max / bitvalue - digital max``.
    Checked on every sample; None when a sample differs (then ``lossless`` needs a decimal grid)."""
    pmax, pmin = float(f.getPhysicalMaximum(i)), float(f.getPhysicalMinimum(i))
    dmax, dmin = float(f.getDigitalMaximum(i)), float(f.getDigitalMinimum(i))
    if dmax == dmin or pmax == pmin:
        return None
    bitvalue = (pmax - pmin) / (dmax - dmin)
    offset = pmax / bitvalue - dmax
    if not (np.isfinite(bitvalue) and bitvalue > 0 and np.isfinite(offset)):
        return None
    digital = np.asarray(f.readSignal(i, digital=True), dtype=np.float64)
    again = (digital + offset) * bitvalue
    return (bitvalue, offset) if np.array_equal(again.view(np.uint64), physical.view(np.uint64)) else None


def _refuse_discontinuous(path: Path) -> None:
    """BadInput for EDF+D / BDF+D: their data records have gaps that reading the signals end to end would lose.

    The header's 44-byte "reserved" field at offset 192 starts with ``EDF+C``
    or ``EDF+D`` (Kemp & Olivan 2003, "European data format 'plus' (EDF+)").
    """
    with open(path, "rb") as fh:
        head = fh.read(236)
    if head[192:197] in (b"EDF+D", b"BDF+D"):
        raise BadInput(f"{path.name}: is a discontinuous {head[192:197].decode()} file, whose gaps would be lost; "
                       "export it as continuous EDF+C (or one file per segment)")


def _notes(f) -> tuple[str, ...]:
    lines = []
    for label, value in (("patient", f.getPatientCode() or f.getPatientName()),
                         ("recording", f.getRecordingAdditional()), ("equipment", f.getEquipment())):
        if value and value.strip():
            lines.append(f"{label}: {value.strip()}")
    onsets, durations, texts = f.readAnnotations()
    for onset, dur, text in zip(onsets, durations, texts):
        d = f" (+{float(dur):g} s)" if float(dur) > 0 else ""
        lines.append(f"annotation {float(onset):g} s{d}: {text}")
    return tuple(lines)
