"""Running a batch: in this process, in a pool of local worker processes, or on a Dask cluster.

Every worker process imports the packing code once (:func:`tsarchive.batch.work.warm`)
and then packs file after file, so the interpreter's start and the library's
imports are paid once per worker, not once per file.  Results arrive in the
order files finish; ``on_outcome`` is called for each in the calling process,
which also keeps the catalog compacted (every few seconds and at the end, even
when the batch is interrupted).  Archive bytes never depend on where a file was
packed: the same source, settings and tool version give the same archive.
"""

from __future__ import annotations

import multiprocessing
import os
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterator

from .catalog import Compactor
from .plan import BatchPlan, BatchSettings, Job
from .work import FAILED, PACKED, SKIPPED, Outcome, pack_one, warm

#: Environment variable naming the Dask scheduler (``tcp://host:8786``) a batch runs on when
#: ``--scheduler`` is not given.
SCHEDULER_ENV = "TSARCHIVE_SCHEDULER"

#: How many times a local pool whose worker died (out of memory, a crash) is started again.
POOL_RESTARTS = 3


@dataclass(frozen=True)
class BatchSummary:
    out: Path
    outcomes: tuple[Outcome, ...]
    elapsed_s: float
    where: str               # "this process", "N local workers" or the scheduler's address
    learned: object = None   # the shared models (tsarchive.batch.shared.Learned), or None

    def count(self, status: str) -> int:
        return sum(o.status == status for o in self.outcomes)

    @property
    def ok(self) -> bool:
        return all(o.ok for o in self.outcomes)

    def to_dict(self) -> dict:
        shared = None if self.learned is None else {"files": self.learned.files, "notes": list(self.learned.notes),
                                                     "seconds": round(self.learned.seconds, 3)}
        return {"output": str(self.out), "where": self.where, "elapsed_s": round(self.elapsed_s, 3),
                "shared_model": shared,
                "packed": self.count(PACKED), "already_packed": self.count(SKIPPED), "failed": self.count(FAILED),
                "files": [o.to_dict() for o in self.outcomes]}


def default_jobs() -> int:
    return max(1, os.cpu_count() or 1)


def run_batch(plan: BatchPlan, settings: BatchSettings, *, jobs: int | None = None, scheduler: str | None = None,
              on_outcome: Callable[[Outcome, int, int], None] | None = None) -> BatchSummary:
    """Pack every job of ``plan``; see the module doc.  ``jobs`` local processes (1: this process), or the
    Dask scheduler at ``scheduler``.  With ``settings.shared_model`` the models are learned here first
    (:func:`tsarchive.batch.shared.learn_models`) and handed to every worker."""
    t0 = time.perf_counter()
    plan.out.mkdir(parents=True, exist_ok=True)
    compactor = Compactor(plan.out)
    jobs = default_jobs() if jobs is None else jobs
    learned = None
    if settings.shared_model:
        from .shared import learn_models
        learned = learn_models(plan, settings)
    if scheduler:
        from .dask_run import run_on_dask
        stream, where = run_on_dask(scheduler, plan, settings, learned), scheduler
    elif jobs <= 1 or len(plan.jobs) <= 1:
        stream, where = _in_process(plan, settings, learned), "this process"
    else:
        n = min(jobs, len(plan.jobs))
        stream, where = _in_pool(plan, settings, n, learned), f"{n} local worker processes"
    outcomes: list[Outcome] = []
    try:
        for outcome in stream:
            outcomes.append(outcome)
            if on_outcome is not None:
                on_outcome(outcome, len(outcomes), len(plan.jobs))
            compactor.maybe()
    finally:
        stream.close()
        compactor.final()
    return BatchSummary(plan.out, tuple(outcomes), time.perf_counter() - t0, where, learned)


def _in_process(plan: BatchPlan, settings: BatchSettings, learned) -> Iterator[Outcome]:
    for job in plan.jobs:
        yield pack_one(job, settings, plan.out, learned)


def _in_pool(plan: BatchPlan, settings: BatchSettings, n: int, learned) -> Iterator[Outcome]:
    """Pack in ``n`` worker processes (started fresh, not forked from this one); a pool whose worker died is
    started again for the files not yet finished, at most :data:`POOL_RESTARTS` times."""
    threads = max(1, (os.cpu_count() or 1) // n)
    todo: list[Job] = list(plan.jobs)
    for attempt in range(POOL_RESTARTS + 1):
        died: list[Job] = []
        pool = ProcessPoolExecutor(n, mp_context=multiprocessing.get_context("spawn"), initializer=warm,
                                   initargs=(threads, learned))   # the shared models, once a worker
        try:
            futures = {pool.submit(pack_one, job, settings, plan.out): job for job in todo}
            for fut in as_completed(futures):
                try:
                    yield fut.result()
                except BrokenProcessPool:
                    died.append(futures[fut])
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
        if not died:
            return
        todo = died
    for job in todo:
        yield Outcome(job.rel, str(job.source), FAILED, "its worker process died (out of memory or a crash) "
                      f"{POOL_RESTARTS + 1} times; pack it alone to see why")
