"""The index's byte budget: at most :data:`SHARE_PERCENT` % of the archive's other bytes.

The index is a convenience beside the archive's real content (the residuals
that hold every sample within its budget), so its bytes must not eat the
compression: issue 12 asks the archive to beat the best classic coder on
every real case, and 3 % is about the spread between neighbouring classic
coders on the bench, small enough not to decide that comparison.  The check
is exact integer arithmetic on byte counts (``100 * index <= 3 * payload``),
so the same recording gives the same index on every machine.

When the index as built is too large, :func:`fit_index` builds it again down
a fixed ladder (:data:`LADDER`) and keeps the first rung that fits: a
coarser basis (4 or 3 bits a value instead of 7), fewer codes per segment,
longer segments (a smaller basis and fewer rows), then
facts only (levels and facts, no basis and no codes: ``kind`` ``facts`` in
the member, which the queries and the app name), at longer and longer
segments.  When not even the coarsest rung fits, the archive gets no index
(the queries then fall back to the archive's windows and say so); when not
even an empty member (schema and footer, no rows) fits, the ladder is not
climbed at all, and the coarsest rung (the smallest) is measured before the
others, so that when it does not fit nothing else is built (a short
recording's archive: every rung would be built and encoded for nothing).  A segment
given explicitly (``--segment``) wins over the budget: that index is kept as
built.
"""

from __future__ import annotations

from pathlib import Path
from typing import Callable

from .build import ChannelIndex, build_channel
from .segments import MAX_SEGMENT

SHARE_PERCENT = 3            # index bytes <= 3 % of the archive's other bytes (module doc)
MIN_SEGMENTS = 8             # a rung that leaves fewer segments per channel is not an index worth keeping
# (segment multiple of the default, codes at most (None: as learned; 0: facts only), basis bits), in order
LADDER = ((1, None, 7), (1, None, 4), (1, 4, 4), (1, 2, 4), (2, 2, 4), (2, 1, 3), (4, 1, 3),
          (1, 0, 0), (2, 0, 0), (4, 0, 0), (8, 0, 0), (16, 0, 0), (32, 0, 0), (64, 0, 0), (128, 0, 0))


def fits(index_bytes: int, payload_bytes: int) -> bool:
    """Whether ``index_bytes`` is at most :data:`SHARE_PERCENT` % of ``payload_bytes`` (integers only)."""
    return 100 * int(index_bytes) <= SHARE_PERCENT * int(payload_bytes)


def staged_bytes(folder: Path, leave_out: str) -> int:
    """Bytes of the files staged in ``folder`` so far, except ``leave_out`` (the index itself)."""
    return sum(p.stat().st_size for p in Path(folder).iterdir() if p.is_file() and p.name != leave_out)


def rebuild(ci: ChannelIndex, longer: int, max_codes: int | None, basis_bits: int = 7) -> ChannelIndex:
    src = ci.source
    return build_channel(src.column, ci.name, ci.n_samples, None, src.seed, src.itemsize, src.try_nonlinear,
                         longer=longer, max_codes=max_codes, basis_bits=max(basis_bits, 1))


def fit_index(index: list[ChannelIndex], payload_bytes: int, to_bytes: Callable) -> list[ChannelIndex]:
    """``index`` if it fits its budget beside ``payload_bytes``, else the first rung of :data:`LADDER` that
    does, else ``[]`` (module doc); ``to_bytes`` is the member's encoding (:func:`tsarchive.index.member.
    to_bytes`).  Indexes built without a source or with an explicit segment are kept."""
    if not index or any(ci.source is None or ci.source.asked is not None for ci in index):
        return index
    if not fits(len(to_bytes([])), payload_bytes):     # not even an empty member fits: no rung can
        return []
    rungs = [r for r in LADDER if _open(index, *r)]
    if not rungs:
        return []
    coarsest = _build(index, *rungs[-1])
    if not fits(len(to_bytes(coarsest)), payload_bytes):  # the smallest rung does not fit: none will
        return []
    for rung in rungs[:-1]:
        got = _build(index, *rung)
        if fits(len(to_bytes(got)), payload_bytes):
            return got
    return coarsest


def _open(index: list[ChannelIndex], longer: int, codes: int | None, bits: int) -> bool:
    """Whether a rung of :data:`LADDER` applies to ``index``: its segments within bounds and enough of them,
    and not the same as the rung before it."""
    if any(ci.segment * longer > MAX_SEGMENT or ci.n_samples < MIN_SEGMENTS * ci.segment * longer for ci in index):
        return False
    return not (codes is not None and codes >= max(ci.coder.code_size for ci in index) and longer == 1 and bits == 4)


def _build(index: list[ChannelIndex], longer: int, codes: int | None, bits: int) -> list[ChannelIndex]:
    return index if (longer, codes, bits) == (1, None, 7) else [rebuild(ci, longer, codes, bits) for ci in index]
