"""Run the validation cases: collect their jobs, run them (in worker processes), evaluate the checks.

Jobs are de-duplicated by key (cases may share simulations) and started in order of decreasing
estimated cost.  With ``workers > 1`` they run in a pool of ``spawn``-ed processes, each single-threaded
for BLAS (``OPENBLAS_NUM_THREADS=1`` unless set otherwise), reporting progress through a queue; with one
worker they run in this process.  A job that raises makes its cases fail (one FAIL row each, the error in
the note) without stopping the others; so does a case whose evaluation raises.
"""

from __future__ import annotations

import multiprocessing as mp
import os
import queue as queue_mod
from collections.abc import Sequence
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from contextlib import contextmanager
from typing import Any, TextIO

from .cases import Case
from .checks import Check, failed_check
from .jobs import Job, execute, worker_init, worker_run
from .progress import SuiteProgress

__all__ = ["collect_jobs", "default_workers", "run_cases", "run_jobs"]


def default_workers() -> int:
    """Cores available to this process (CPU affinity where the platform reports it)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def collect_jobs(cases: Sequence[Case]) -> list[Job]:
    """All jobs of ``cases``, once each, by decreasing cost; ValueError if one key names two jobs."""
    jobs: dict[str, Job] = {}
    for case in cases:
        for job in case.jobs:
            if job.key in jobs and jobs[job.key] != job:
                raise ValueError(f"two different jobs share the key {job.key!r}")
            jobs.setdefault(job.key, job)
    return sorted(jobs.values(), key=lambda j: -j.cost)


@contextmanager
def _single_threaded_blas():
    old = os.environ.get("OPENBLAS_NUM_THREADS")
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    try:
        yield
    finally:
        if old is None:
            os.environ.pop("OPENBLAS_NUM_THREADS", None)


def _drain(q: Any, progress: SuiteProgress) -> None:
    while True:
        try:
            key, fraction = q.get_nowait()
        except queue_mod.Empty:
            return
        progress.update(key, fraction)


def _run_here(jobs: Sequence[Job], progress: SuiteProgress, results: dict, errors: dict) -> None:
    for job in jobs:
        try:
            results[job.key] = execute(job, progress.update)
        except Exception as exc:  # a failing job fails its cases, not the suite
            errors[job.key] = f"{type(exc).__name__}: {exc}"
        progress.finish(job.key)


def _run_pool(jobs: Sequence[Job], progress: SuiteProgress, workers: int, results: dict,
              errors: dict) -> list[Job]:
    """Run ``jobs`` in worker processes; returns the jobs left undone if the pool broke down."""
    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    broken: list[Job] = []
    with _single_threaded_blas():
        pool = ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=worker_init,
                                   initargs=(q,))
        try:
            pending: dict[Future, Job] = {pool.submit(worker_run, job): job for job in jobs}
            while pending:
                done, _ = wait(list(pending), timeout=0.5, return_when=FIRST_COMPLETED)
                _drain(q, progress)
                for fut in done:
                    job = pending.pop(fut)
                    try:
                        results[job.key] = fut.result()
                    except BrokenProcessPool:
                        broken.append(job)
                        continue
                    except Exception as exc:
                        errors[job.key] = f"{type(exc).__name__}: {exc}"
                    progress.finish(job.key)
        except BaseException:
            for proc in list((getattr(pool, "_processes", None) or {}).values()):  # our own workers only
                proc.terminate()
            pool.shutdown(wait=False, cancel_futures=True)
            raise
        pool.shutdown(wait=True)
    return broken


def run_jobs(jobs: Sequence[Job], progress: SuiteProgress, workers: int = 1) -> tuple[dict, dict]:
    """Run ``jobs``; returns ``(results, errors)`` keyed by job key (errors: one-line messages).

    If the worker processes cannot run (e.g. a script without the ``if __name__ == "__main__":`` guard
    that ``spawn`` requires), the jobs left over run in this process."""
    results: dict[str, Any] = {}
    errors: dict[str, str] = {}
    if workers <= 1 or len(jobs) <= 1:
        _run_here(jobs, progress, results, errors)
        return results, errors
    left = _run_pool(jobs, progress, min(workers, len(jobs)), results, errors)
    if left:
        progress.message(f"validate: worker processes failed; running {len(left)} job(s) in this process")
        _run_here(left, progress, results, errors)
    return results, errors


def run_cases(cases: Sequence[Case], *, workers: int | None = None, stream: TextIO | None = None,
              tty: bool | None = None) -> list[Check]:
    """Run every job of ``cases`` (progress with ETA on ``stream``, default standard error) and return
    the checks of all cases, in order."""
    jobs = collect_jobs(cases)
    progress = SuiteProgress(((j.key, j.cost) for j in jobs), stream, tty=tty)
    n_workers = default_workers() if workers is None else int(workers)
    progress.message(f"validate: {len(cases)} cases, {len(jobs)} jobs on {min(n_workers, len(jobs))} "
                     f"worker(s)")
    try:
        results, errors = run_jobs(jobs, progress, n_workers)
    finally:
        progress.close()
    checks: list[Check] = []
    for case in cases:
        failed = [f"{j.key}: {errors[j.key]}" for j in case.jobs if j.key in errors]
        if failed:
            checks.append(failed_check(case.name, case.reference, "job failed: " + "; ".join(failed)))
            continue
        try:
            checks.extend(case.evaluate({j.key: results[j.key] for j in case.jobs}))
        except Exception as exc:
            checks.append(failed_check(case.name, case.reference,
                                       f"{case.name}: evaluation failed: {type(exc).__name__}: {exc}"))
    return checks
