"""Packing many recordings at once: a folder, globs or a list, one archive each into an output folder.

* :mod:`.plan` -- which files, and where each archive goes (:func:`plan_batch`, :class:`BatchSettings`);
* :mod:`.work` -- one file as a worker packs it (:func:`pack_one`), resumable and idempotent;
* :mod:`.run` -- the batch in this process, local worker processes or on Dask (:func:`run_batch`);
* :mod:`.catalog` -- the output folder's ``catalog.parquet`` (:func:`read_catalog`, :func:`compact`);
* :mod:`.console` -- what the command line prints.

    >>> from tsarchive.batch import BatchSettings, plan_batch, run_batch, read_catalog   # doctest: +SKIP
    >>> summary = run_batch(plan_batch(["lab/"], "archives/"), BatchSettings(budget="0.1%"), jobs=2)  # doctest: +SKIP
    >>> read_catalog("archives/").to_pandas()                                          # doctest: +SKIP

Importing this package loads pyarrow only; packing code is imported by the workers.
"""

from .catalog import CATALOG, compact, has_catalog, read_catalog
from .plan import BatchPlan, BatchSettings, Job, is_batch, plan_batch


def run_batch(plan, settings, **options):
    """See :func:`tsarchive.batch.run.run_batch`."""
    from .run import run_batch as run
    return run(plan, settings, **options)


__all__ = ["CATALOG", "BatchPlan", "BatchSettings", "Job", "compact", "has_catalog", "is_batch", "plan_batch",
           "read_catalog", "run_batch"]
