"""The archive's on-disk layout (format ``tsarchive`` version 6).

An archive is a directory::

    windows.parquet     one row per channel window (residual payloads, checksums,
                        and the autoencoder code when the archive keeps a model),
                        in lean6.py's columns; its footer holds the manifest
                        (format, tool version, channels with budgets, grids, LPC
                        sets, entropy tables, summary, the row-group map, the
                        rows' and every other member's SHA-256; compact: facts
                        shared by every channel once, compact.py), zstd, and the
                        footer's own digest (inside.py)
    exceptions.parquet  one row per window holding samples stored verbatim
                        (NaN, infinities, unrepresentable values); only when any
    model.parquet       one row per decoder array (plain integers, no pickle);
                        only when the manifest names a model
    time.parquet        the logged times when they follow no rate rule in runs
                        (jitter); only when the manifest's ``time`` says so
    extra.parquet       the source's text columns (status, notes); only when any
    index.zst           the learned index (tsarchive/index/member.py); optional

Formats 3 to 5 kept the manifest in ``manifest.json`` (its digest in
windows.parquet's footer: binding.py), format 5 the window rows in lean.py's
columns and the index in ``index.parquet``.

Why a directory: every member is a plain Parquet or JSON file that any
reader opens on its own, optional members (and new ones, such as an index)
are added by name without touching the others, and the whole directory is
built aside and renamed into place, which is atomic on one file system.

The column lists below are the format: changing one is a format change (bump
``FORMAT_VERSION`` and add a golden archive in ``tests/golden``).
Version 4 binds the manifest to the data (binding.py), keeps the logged time
axis, notes and text columns, and adds the optional grid fields ``origin``,
``verbatim`` and ``missing``.  Version 5 is the lean container: the window
facts packed into ``key`` and ``facts`` (lean.py), the channels' last windows
sharing a row group, and the compact manifest (compact.py).  Version 6
keeps that manifest zstd-compressed inside ``windows.parquet``'s footer with
its footer's digest and the rows' digest (inside.py): no ``manifest.json``, and
the window rows in lean6.py's columns.  Version 7 writes the footer values as
7-bit text and slims every footer (slim.py).  Version 8 adds the grid kinds
``scaled`` (``x̂ = (q + offset) * step``: EDF) and ``ordered`` (lossless float32 and float16),
quantize.py, nothing else.  The columns
below (``WINDOWS_SCHEMA``, ``EXCEPTIONS_SCHEMA``) are the logical rows every
version is read as, and those stored by versions 3 and 4.
"""

from __future__ import annotations

import pyarrow as pa

FORMAT_NAME = "tsarchive"
FORMAT_VERSION = 8
OLDEST_READABLE = 3                    # the oldest format version this tool still reads
LEAN_FROM_VERSION = 5                  # from this version on, windows.parquet has the lean columns (lean.py)
BOUND_FROM_VERSION = 4                 # from this version on, the manifest must be bound to windows.parquet
BINDING_KEY = b"tsarchive.manifest_sha256"   # windows.parquet footer key: SHA-256 of the manifest (binding.py)
INSIDE_FROM_VERSION = 6                # from this version on, the manifest is inside windows.parquet (inside.py)
MANIFEST_KEY = b"tsarchive.manifest"   # windows.parquet footer key of format 7: the manifest, zstd, 7-bit text
DIGEST_KEY = b"tsarchive.digest"       # ... and the footer's SHA-256, taken with its value zeroed (inside.py;
                                       # format 6: b"tsarchive" and b"tsarchive.sha256", raw bytes)
TEXT_FROM_VERSION = 7                  # from this version on, footer values are 7-bit text, the footer slimmed
GRIDS_OF_VERSION = {"scaled": 8, "ordered": 8}   # grid kinds added after version 3, and the version that added them

MANIFEST = "manifest.json"             # formats 3 to 5 (format 6 keeps it inside windows.parquet)
WINDOWS = "windows.parquet"
MODEL = "model.parquet"
EXCEPTIONS = "exceptions.parquet"
TIME = "time.parquet"                  # the logged time axis when it is irregular (store/timeaxis.py)
EXTRA = "extra.parquet"                # non-numeric source columns (store/sidecar.py)
REQUIRED_MEMBERS = (WINDOWS,)          # the others only when the manifest lists them
WORST_STEPS = 250                      # per-window worst error is stored in 1/250ths of ε, rounded up

WINDOWS_SCHEMA = pa.schema([
    pa.field("channel", pa.string()),        # channel name
    pa.field("window", pa.int32()),          # window number within the channel, from 0 (starts at window x W)
    pa.field("mode", pa.int8()),             # predictor id (tsarchive.predict)
    pa.field("lpc_set", pa.int8()),          # which of the channel's LPC coefficient sets (mode lpc; else 0)
    pa.field("table", pa.int8()),            # activity class of the entropy table used (with channel, mode)
    pa.field("level", pa.int64()),           # rounded mean of the window on the integer grid
    pa.field("residual", pa.binary()),       # residual integers, coded by the table's coder
    pa.field("crc32", pa.uint32()),          # CRC-32 of the decoded samples (little-endian bytes)
    pa.field("worst", pa.uint8()),           # max |x̂ - x| in the window in 1/WORST_STEPS of ε, rounded up
    pa.field("score", pa.float32()),         # peak |x - code-only reconstruction|, channel units, 8 significant bits
])
CODE_FIELD = pa.field("code", pa.list_(pa.int8()))   # autoencoder code (code_size int8 values), with a model only
CODE_AFTER = "level"                                 # ... placed after this column

EXCEPTIONS_SCHEMA = pa.schema([
    pa.field("channel", pa.string()),
    pa.field("window", pa.int32()),
    pa.field("pos", pa.list_(pa.int32())),   # positions within the window of the samples stored verbatim
    pa.field("bits", pa.list_(pa.int64())),  # their raw IEEE-754 bits (floats) or values (integers)
])


def windows_schema(with_code: bool) -> pa.Schema:
    """The windows.parquet schema of an archive with (or without) a model."""
    if not with_code:
        return WINDOWS_SCHEMA
    return WINDOWS_SCHEMA.insert(WINDOWS_SCHEMA.get_field_index(CODE_AFTER) + 1, CODE_FIELD)

MODEL_SCHEMA = pa.schema([
    pa.field("name", pa.string()),
    pa.field("shape", pa.list_(pa.int64())),
    pa.field("values", pa.list_(pa.int64())),
])

ROW_GROUP_WINDOWS = 256  # windows per row group: the unit of random access

# Caps on what an archive may declare, checked before anything is allocated from it.
MAX_MANIFEST_BYTES = 64 << 20          # manifest.json
MAX_MEMBERS = 32                       # files listed in the manifest's members
MAX_MEMBER_BYTES = 1 << 50
MAX_CHANNELS = 1 << 16
MAX_SAMPLES = 1 << 48                  # per channel
MIN_RATE = 1e-9                        # Hz
MAX_CODE_SIZE = 64
MAX_LAYERS = 16
MAX_MODEL_PARAMS = 1 << 24             # integer decoder parameters
MAX_TABLES = 1024                      # entropy tables per channel
MAX_TABLE_CHARS = 1 << 20              # base64 text of one frequency table
# Uncompressed bytes a window row may hold: the residual payload (a range code: at most about 9 bytes per
# sample, escapes included), the code and fixed columns; verbatim samples: position + bits per sample.
ROW_BYTES_PER_SAMPLE, ROW_BYTES_FIXED = 16, 4096  # windows per row group: the unit of random access
