"""The kept verification record now lives in the library (:mod:`tsarchive.record.kept`), so that the CLI's
``verify`` and ``report`` read and write the same file as the app; this name stays for the app's screens."""

from tsarchive.record.kept import FOLDER, CheckRecord, read_record, record_path, write_record

__all__ = ["FOLDER", "CheckRecord", "read_record", "record_path", "write_record"]
