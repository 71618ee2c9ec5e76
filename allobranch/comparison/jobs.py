"""The comparison's job plan: every (scope, law) fit is a plain, picklable job with its own seed.

A job's seed is derived from the user's seed and the job's key (scope and law label) only, so results do not
depend on which scopes were asked for, on the order the jobs run in, or on how many or what kind of workers
run them. Jobs run through :mod:`allobranch.engine`: local worker processes by default, an executor the
caller passes, or a Dask distributed cluster (a client or a scheduler's address).
"""

from __future__ import annotations

import os
import sys
import zlib
from collections.abc import Callable, Sequence
from concurrent.futures import Executor
from dataclasses import dataclass
from functools import partial

from allobranch.comparison.laws import FREE, Law, hypothesis_spec
from allobranch.conventions import POPULATION
from allobranch.engine import Engine, JobsFailed, default_workers, derived_seed, failures, run  # noqa: F401
from allobranch.inference.results import FitResult
from allobranch.intake.table import JunctionTable
from allobranch.model.spec import ModelSpec

#: Scope label of the fits that fix every taxon's exponent (and of the free fit, which serves every scope).
POPULATION_SCOPE = POPULATION
#: Deprecated alias of :data:`POPULATION_SCOPE`, kept for one release.
OVERALL = POPULATION_SCOPE


@dataclass(frozen=True)
class FitJob:
    """One fit of the comparison.

    Attributes
    ----------
    scope : str
        :data:`POPULATION_SCOPE` or a taxon label (the free model's job has the population scope and law
        ``"free"``).
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
        return hypothesis_spec(free, self.value, None if self.scope == POPULATION_SCOPE else self.scope)


def job_seed(seed: int, scope: str, law: str) -> int:
    """Seed of the fit of ``law`` in ``scope``: a function of the user's seed and the key only.

    The free model keeps the user's seed itself, so its fit equals ``allobranch.fit(table, seed=seed)``.
    """
    if law == FREE:
        return int(seed)
    return derived_seed(int(seed), zlib.crc32(scope.encode()), zlib.crc32(law.encode()))


def plan_jobs(
    laws: Sequence[Law], taxa: Sequence[str], scopes: Sequence[str], seed: int, include_free: bool = True
) -> list[FitJob]:
    """Every fit a comparison needs: the free model (unless given), then each law per scope.

    With one taxon the taxon scope is the population one (the same models), so it adds no jobs.
    """
    top = POPULATION_SCOPE
    jobs = [FitJob(top, FREE, None, job_seed(seed, top, FREE))] if include_free else []
    wanted = []
    if top in scopes or len(taxa) == 1:
        wanted.append(top)
    if "taxon" in scopes and len(taxa) > 1:
        wanted += list(taxa)
    for scope in wanted:
        jobs += [FitJob(scope, law.label, law.value, job_seed(seed, scope, law.label)) for law in laws]
    return jobs


def run_job(table: JunctionTable, free_spec: ModelSpec, job: FitJob, sampler_kw: dict) -> FitResult:
    """Run one job (a top-level function, so worker processes can receive it)."""
    from allobranch.inference.fit import fit

    return fit(table, job.spec(free_spec), **{**sampler_kw, "seed": job.seed})


def run_jobs(
    table: JunctionTable,
    free_spec: ModelSpec,
    jobs: Sequence[FitJob],
    sampler_kw: dict,
    *,
    workers: int | None = None,
    executor: Executor | None = None,
    log: Callable[[str], None] | None = None,
    engine: Engine | None = None,
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
        Local worker processes (default :func:`~allobranch.engine.default_workers`); 1 runs the jobs in this
        process.
    executor : concurrent.futures.Executor or distributed.Client, optional
        Run the jobs on this executor (or Dask cluster) instead.
    log : callable, optional
        Called with one progress line per finished job.
    engine : Engine, optional
        Where to run the jobs (instead of ``workers`` / ``executor``), e.g. ``Engine(scheduler=ADDRESS)``.

    Returns
    -------
    dict
        ``(scope, law) -> FitResult``.

    Raises
    ------
    JobsFailed
        When any fit raised (after the others have finished); the message names each with its seed.
    """
    if engine is None:
        engine = Engine(workers=workers, executor=executor)
    pool = engine.pool_size(len(jobs))
    local_kw = sampler_kw
    if pool is not None and pool > 1:  # share the cores between the local worker processes
        local_kw = {**sampler_kw, "cores": max(1, (os.cpu_count() or 1) // pool)}
    results = run(
        partial(_run_keyed, table, free_spec, local_kw),
        jobs,
        engine,
        label="compare",
        progress=True,
        log=log or (lambda message: None),
        describe=lambda job: f"{job.law} ({job.scope})",
        fallback=partial(_run_keyed, table, free_spec, {**sampler_kw, "cores": None}),
    )
    failed = failures(results)
    if failed:
        raise JobsFailed(failed)
    return results


def _run_keyed(table: JunctionTable, free_spec: ModelSpec, sampler_kw: dict, job: FitJob) -> FitResult:
    """:func:`run_job` with the job last (for :func:`functools.partial`)."""
    return run_job(table, free_spec, job, sampler_kw)


def stderr_log(progress: bool) -> Callable[[str], None]:
    """A logger printing to standard error when ``progress`` is set."""

    def log(message: str) -> None:
        if progress:
            print(f"[compare] {message}", file=sys.stderr, flush=True)

    return log
