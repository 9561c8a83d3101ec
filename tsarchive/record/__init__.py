"""Verification records: what a lab files beside an archive.

* :mod:`.kept`: the small note kept beside the archive after every verification
  (``.tsarchive-checks/<manifest SHA-256>.json``), read back by ``report`` and the app;
* :mod:`.document`: the full record a lab attaches to its files (``record.json``, ``record.md`` and
  PNG plots; matplotlib from the optional extra ``record``), written by
  ``tsarchive verify ARCHIVE --against SOURCE --record FOLDER``.

Importing this package loads neither matplotlib nor textual.
"""

from .document import ChannelRecord, VerificationRecord, write_verification_record
from .kept import CheckRecord, read_record, write_record

__all__ = ["ChannelRecord", "VerificationRecord", "write_verification_record", "CheckRecord", "read_record",
           "write_record"]
