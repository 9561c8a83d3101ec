"""Read a WAV file (RIFF or big-endian RIFX): integer PCM of 8 to 32 bits, or IEEE floats.

The chunk layout follows Microsoft's "Multimedia Programming Interface and
Data Specifications 1.0" (1991; ``fmt `` and ``data`` chunks, chunks
padded to even sizes) and the WAVE_FORMAT_EXTENSIBLE header (format tag
0xFFFE, the low 16 bits of the sub-format GUID's first field give the
real tag).  Samples
keep their values:

* 8-bit PCM is unsigned (``uint8``, 128 = silence), as the spec says;
* 16- and 32-bit PCM are ``int16`` / ``int32``;
* 24-bit PCM becomes ``int32`` holding the 24-bit value itself
  (-2^23..2^23-1);
* other widths are read in their container (``12``-bit samples in 2 bytes
  are the container's integer, low bits zero);
* 32- and 64-bit IEEE floats are ``float32`` / ``float64``.

A-law, mu-law and compressed formats are refused.  The rate is the
header's; channels are ``ch0``, ``ch1``, ... unless names are given.
"""

from __future__ import annotations

import struct
from pathlib import Path

import numpy as np

from ..errors import BadInput
from ..recording import ChannelInfo, Recording
from .grid import detect_decimals
from .npyfile import _names_units
from .options import ReadOptions

PCM, IEEE_FLOAT, EXTENSIBLE = 1, 3, 0xFFFE
#: Largest WAV read (the samples are held in memory).
MAX_BYTES = 4 << 30


def _chunks(raw: bytes, end: str, name: str):
    """(id, offset of body, declared size) of each chunk after the 12-byte RIFF header."""
    pos = 12
    while pos + 8 <= len(raw):
        cid = raw[pos:pos + 4]
        (size,) = struct.unpack(end + "I", raw[pos + 4:pos + 8])
        yield cid, pos + 8, size
        pos += 8 + size + (size & 1)


def read_wav(path: Path, options: ReadOptions) -> Recording:
    """The samples of a WAV file as a Recording (see the module docstring)."""
    path = Path(path)
    if path.stat().st_size > MAX_BYTES:
        raise BadInput(f"{path.name}: is larger than {MAX_BYTES >> 30} GiB; split it first")
    raw = path.read_bytes()
    if raw[:4] == b"RF64":
        raise BadInput(f"{path.name}: is an RF64 (64-bit) WAV, which is not read; save it as a plain WAV or .npy")
    if len(raw) < 12 or raw[:4] not in (b"RIFF", b"RIFX") or raw[8:12] != b"WAVE":
        raise BadInput(f"{path.name}: is not a WAV file (no RIFF/WAVE header); check the file")
    end = "<" if raw[:4] == b"RIFF" else ">"
    fmt = data = None
    for cid, body, size in _chunks(raw, end, path.name):
        if cid == b"fmt ":
            fmt = raw[body:body + size]
        elif cid == b"data":
            if body + size > len(raw):
                raise BadInput(f"{path.name}: the data chunk is cut short ({len(raw) - body} of {size} bytes); "
                               "the file is incomplete")
            data = raw[body:body + size]
            break
    if fmt is None or len(fmt) < 16:
        raise BadInput(f"{path.name}: has no valid 'fmt ' chunk; the WAV header is damaged")
    if data is None:
        raise BadInput(f"{path.name}: has no 'data' chunk; the WAV file holds no samples")
    tag, nch, rate, _, align, bits = struct.unpack(end + "HHIIHH", fmt[:16])
    if tag == EXTENSIBLE and len(fmt) >= 28:   # the GUID's first field (32 bits, file byte order) holds the tag
        tag = struct.unpack(end + "I", fmt[24:28])[0] & 0xFFFF
    dtype = _dtype(tag, bits, nch, align, end, path.name)
    if rate <= 0:
        raise BadInput(f"{path.name}: the header's sample rate is 0; the WAV header is damaged")
    if len(data) % align:
        raise BadInput(f"{path.name}: the data chunk ({len(data)} bytes) is not a whole number of "
                       f"{align}-byte frames; the file is damaged")
    frames = len(data) // align
    if frames == 0:
        raise BadInput(f"{path.name}: holds no samples; give a non-empty recording")
    x = _samples(data, dtype, nch, align // nch, frames, end)
    if options.rate is not None and abs(options.rate - rate) > 1e-9 * rate:
        raise BadInput(f"--rate {options.rate:g} disagrees with the WAV header's {rate} Hz; leave --rate out")
    names, units = _names_units(path, nch, options)
    channels = [ChannelInfo(name=names[j], unit=units[j], dtype=x.dtype.name,
                            decimals=detect_decimals(x[:, j], x.dtype), sentinels=options.sentinels)
                for j in range(nch)]
    return Recording.from_columns([x[:, j] for j in range(nch)], rate=float(rate), channels=channels, source=path)


def _dtype(tag: int, bits: int, nch: int, align: int, end: str, name: str) -> str:
    if nch == 0 or align == 0 or align % nch:
        raise BadInput(f"{name}: the header gives {nch} channel(s) in {align}-byte frames; the WAV header is damaged")
    width = align // nch
    if tag == IEEE_FLOAT:
        if width not in (4, 8):
            raise BadInput(f"{name}: {width * 8}-bit float samples are not read; use 32- or 64-bit floats")
        return f"{end}f{width}"
    if tag != PCM:
        raise BadInput(f"{name}: WAV format tag {tag:#06x} (compressed, A-law or mu-law) is not read; "
                       "convert it to PCM or float WAV")
    if width not in (1, 2, 3, 4) or bits > width * 8 or bits == 0:
        raise BadInput(f"{name}: {bits}-bit PCM in {width}-byte containers is not read; use 8 to 32-bit PCM")
    return {1: "u1", 2: f"{end}i2", 3: "i3", 4: f"{end}i4"}[width]


def _samples(data: bytes, dtype: str, nch: int, width: int, frames: int, end: str) -> np.ndarray:
    """(frames, nch) array in native byte order."""
    if dtype == "i3":   # sign-extend 3-byte integers into int32
        b = np.frombuffer(data, dtype=np.uint8, count=frames * nch * 3).reshape(-1, 3).astype(np.int32)
        lo, mid, hi = (b[:, 0], b[:, 1], b[:, 2]) if end == "<" else (b[:, 2], b[:, 1], b[:, 0])
        v = lo | (mid << 8) | (hi << 16)
        v = np.where(v >= 1 << 23, v - (1 << 24), v).astype(np.int32)
        return v.reshape(frames, nch)
    x = np.frombuffer(data, dtype=np.dtype(dtype), count=frames * nch).reshape(frames, nch)
    return x.astype(x.dtype.newbyteorder("="))
