"""A batch on a Dask distributed cluster (``pip install 'tsarchive[cluster]'``).

Each file is one task, :func:`tsarchive.batch.work.pack_one`, run on whichever
worker is free; a Dask worker is a long-lived process, so the packing code is
imported once per worker.  Workers read the sources and write the archives and
their catalog entries themselves: every worker must see the sources and the
output folder at the same paths as this machine (shared storage, see README).
Only outcomes (a few hundred bytes each) travel back to the scheduler; the
batch's shared models (made by this process) are sent to each worker once.
"""

from __future__ import annotations

from typing import Iterator

from ..errors import BadInput
from .plan import BatchPlan, BatchSettings
from .work import FAILED, Outcome, pack_one

CONNECT_TIMEOUT_S = 20


def run_on_dask(address: str, plan: BatchPlan, settings: BatchSettings, learned=None) -> Iterator[Outcome]:
    try:
        from distributed import Client, as_completed
    except ImportError:
        raise BadInput("--scheduler needs Dask's distributed scheduler: pip install 'tsarchive[cluster]'") from None
    try:
        client = Client(address, timeout=CONNECT_TIMEOUT_S)
    except (OSError, TimeoutError, ValueError) as exc:
        raise BadInput(f"cannot reach the Dask scheduler at {address} ({exc}); check the address "
                       "(tcp://HOST:8786) and that the scheduler is running") from None
    try:
        shared = None if learned is None else client.scatter([learned], broadcast=True)[0]   # sent once a worker
        futures = client.map(pack_one, list(plan.jobs), settings=settings, out=plan.out, learned=shared, pure=False)
        jobs = dict(zip((f.key for f in futures), plan.jobs))
        for fut in as_completed(futures):
            try:
                yield fut.result()
            except Exception as exc:  # noqa: BLE001 - a lost worker fails its file, the batch goes on
                job = jobs[fut.key]
                yield Outcome(job.rel, str(job.source), FAILED, f"the Dask task failed ({type(exc).__name__}: "
                              f"{exc}); run the batch again to retry it")
    finally:
        client.close()
