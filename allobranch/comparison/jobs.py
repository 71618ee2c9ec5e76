"""The comparison's job plan: every (scope, law) fit is a plain, picklable job with its own seed.

A job's seed is derived from the user's seed and the job's key (scope and law label) only, so results do not
depend on which scopes were asked for, on the order the jobs run in, or on how many workers run them. Jobs
run through any ``concurrent.futures``-style executor: local worker processes by default, or one the caller
passes (for example a distributed engine's executor).
"""

from __future__ import annotations

import multiprocessing
import os
import sys
import zlib
from collections.abc import Callable, Sequence
from concurrent.futures import Executor, ProcessPoolExecutor
from dataclasses import dataclass

import numpy as np

from allobranch.comparison.laws import FREE, Law, hypothesis_spec
from allobranch.inference.results import FitResult
from allobranch.intake.table import JunctionTable
from allobranch.model.spec import ModelSpec

#: Scope label of fits that fix every taxon (or of the free fit, which serves every scope).
OVERALL = "population"


@dataclass(frozen=True)
class FitJob:
    """One fit of the comparison.

    Attributes
    ----------
    scope : str
        ``"overall"`` or a taxon label (the free model's job has scope ``"overall"`` and law ``"free"``).
    law : str
        A law's label, or ``"free"``.
    value : float or None
        The law's exponent (None for the free model).
    seed : int
        The fit's seed (:func:`job_seed`).
    """

    scope: str
    law: str
    value: float | None
    seed: int

    @property
    def key(self) -> tuple[str, str]:
        return (self.scope, self.law)

    def spec(self, free: ModelSpec) -> ModelSpec:
        """The model specification of this job, derived from the free model's."""
        if self.value is None:
            return free
        return hypothesis_spec(free, self.value, None if self.scope == OVERALL else self.scope)


def job_seed(seed: int, scope: str, law: str) -> int:
    """Seed of the fit of ``law`` in ``scope``: a function of the user's seed and the key only.

    The free model keeps the user's seed itself, so its fit equals ``allobranch.fit(table, seed=seed)``.
    """
    if law == FREE:
        return int(seed)
    words = [int(seed), zlib.crc32(scope.encode()), zlib.crc32(law.encode())]
    return int(np.random.SeedSequence(words).generate_state(1)[0] % (2**31 - 1))


def plan_jobs(
    laws: Sequence[Law], taxa: Sequence[str], scopes: Sequence[str], seed: int, include_free: bool = True
) -> list[FitJob]:
    """Every fit a comparison needs: the free model (unless given), then each law per scope.

    With one taxon the taxon scope is the overall one (the same models), so it adds no jobs.
    """
    jobs = [FitJob(OVERALL, FREE, None, job_seed(seed, OVERALL, FREE))] if include_free else []
    wanted = []
    if OVERALL in scopes or len(taxa) == 1:
        wanted.append(OVERALL)
    if "taxon" in scopes and len(taxa) > 1:
        wanted += list(taxa)
    for scope in wanted:
        jobs += [FitJob(scope, law.label, law.value, job_seed(seed, scope, law.label)) for law in laws]
    return jobs


def run_job(table: JunctionTable, free_spec: ModelSpec, job: FitJob, sampler_kw: dict) -> FitResult:
    """Run one job (a top-level function, so worker processes can receive it)."""
    from allobranch.inference.fit import fit

    return fit(table, job.spec(free_spec), **{**sampler_kw, "seed": job.seed})


def default_workers(n_jobs: int) -> int:
    """Worker processes by default: one per processor core, at most one per job."""
    return max(1, min(n_jobs, os.cpu_count() or 1))


def run_jobs(
    table: JunctionTable,
    free_spec: ModelSpec,
    jobs: Sequence[FitJob],
    sampler_kw: dict,
    *,
    workers: int | None = None,
    executor: Executor | None = None,
    log: Callable[[str], None] | None = None,
) -> dict[tuple[str, str], FitResult]:
    """Run the jobs and return their fits by key.

    Parameters
    ----------
    table : JunctionTable
    free_spec : ModelSpec
        The free model's specification (each job derives its own from it).
    jobs : sequence of FitJob
    sampler_kw : dict
        Sampler settings of every fit (draws, tune, chains, sampler, target_accept, ...).
    workers : int, optional
        Local worker processes (default :func:`default_workers`); 1 runs the jobs in this process.
    executor : concurrent.futures.Executor, optional
        Run the jobs on this executor instead (its ``submit`` must accept top-level functions).
    log : callable, optional
        Called with one line per finished job.

    Returns
    -------
    dict
        ``(scope, law) -> FitResult``.
    """
    log = log or (lambda message: None)
    results: dict[tuple[str, str], FitResult] = {}
    n = len(jobs)
    if not jobs:
        return results
    workers = default_workers(n) if workers is None else max(1, int(workers))
    if executor is None and workers == 1:
        for i, job in enumerate(jobs):
            results[job.key] = run_job(table, free_spec, job, sampler_kw)
            log(f"{i + 1}/{n} done: {job.law} ({job.scope})")
        return results
    own = executor is None
    if own:
        cores = max(1, (os.cpu_count() or 1) // workers)
        sampler_kw = {**sampler_kw, "cores": cores}
        executor = ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn"))
    from concurrent.futures import as_completed
    from concurrent.futures.process import BrokenProcessPool

    try:
        futures = {executor.submit(run_job, table, free_spec, job, sampler_kw): job for job in jobs}
        done = 0
        for future in as_completed(futures):
            job = futures[future]
            results[job.key] = future.result()
            done += 1
            log(f"{done}/{n} done: {job.law} ({job.scope})")
    except BrokenProcessPool:
        if not own:
            raise
        # worker processes could not start (typically a script without an `if __name__ == "__main__":`
        # guard, which spawned workers re-run): run the remaining jobs here; seeds make the results the same
        log(
            "worker processes could not start; running the fits in this process (add an "
            '`if __name__ == "__main__":` guard to your script, or pass workers=1)'
        )
        for job in jobs:
            if job.key not in results:
                results[job.key] = run_job(table, free_spec, job, {**sampler_kw, "cores": None})
    finally:
        if own:
            executor.shutdown(wait=True, cancel_futures=True)
    return results


def stderr_log(progress: bool) -> Callable[[str], None]:
    """A logger printing to standard error when ``progress`` is set."""

    def log(message: str) -> None:
        if progress:
            print(f"[compare] {message}", file=sys.stderr, flush=True)

    return log
