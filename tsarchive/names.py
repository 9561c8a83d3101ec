"""File-name conventions, in one place (a convention only: the reader never looks at a name).

An archive is a folder named ``NAME.tsarchive``. Archives written before that name
was chosen end in ``.tsa``; the app still lists and opens them, and every reader
function takes a folder of any name.
"""

from __future__ import annotations

#: Ending of the archive folders tsarchive writes by default.
ARCHIVE_SUFFIX = ".tsarchive"

#: Endings the app lists as archives: the current one first, then older ones still read.
ARCHIVE_SUFFIXES = (ARCHIVE_SUFFIX, ".tsa")
