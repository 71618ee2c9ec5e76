"""Run independent, seeded jobs on this machine's processes or on a Dask cluster, with a progress line.

A *job* is a plain, picklable description with a ``key`` (its place in the study) and a ``seed``; the
function that runs it is a top-level function (or a :func:`functools.partial` of one), so worker processes
and Dask workers can receive it. Results come back by key, so tables built from them do not depend on the
order the jobs finish in, on how many workers ran them, or on what kind of workers they were.

Where the jobs run (:class:`Engine`):

* **local processes** (the default): a :class:`~concurrent.futures.ProcessPoolExecutor` that starts its
  workers fresh (``spawn``), one per processor core and at most one per job; ``workers=1`` runs every job in
  this process;
* **an executor** the caller passes (anything with the :class:`concurrent.futures.Executor` interface);
* **a Dask distributed cluster**: a ``distributed.Client`` the caller passes, or a scheduler's address
  (connected here and closed at the end). The jobs go through the client's ``concurrent.futures``
  interface (``Client.get_executor``); Dask does the scheduling. Needs the ``dask`` extra
  (``pip install "allobranch[dask]"``) here and on every worker, and allobranch installed on the workers.

A job that raises does not stop the others: it is reported on standard error with its key and seed, and
its result is a :class:`JobFailure`. Callers that cannot go on without it raise :class:`JobsFailed`.
"""

from __future__ import annotations

import multiprocessing
import os
import sys
import time
from collections.abc import Callable, Hashable, Iterable, Sequence
from concurrent.futures import Executor, ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np

from allobranch.errors import AllobranchError, InputError

#: Seconds allowed to reach a Dask scheduler before giving up with a message.
CONNECT_TIMEOUT = 30
#: How the extra that provides Dask is installed (named in messages).
DASK_EXTRA = 'pip install "allobranch[dask]"'


class Job(Protocol):
    """What the engine needs of a job: where it belongs and its seed."""

    @property
    def key(self) -> Hashable: ...

    seed: int


@dataclass(frozen=True)
class JobFailure:
    """The result of a job that raised.

    Attributes
    ----------
    key : hashable
        The job's key.
    seed : int
        The job's seed (rerun the job with it to reproduce the failure).
    error : str
        The exception's type and first line.
    """

    key: Hashable
    seed: int
    error: str

    def describe(self) -> str:
        """One line naming the job, its seed and the error."""
        return f"job {self.key} (seed {self.seed}) failed: {self.error}"


class JobsFailed(AllobranchError):
    """Jobs failed that the study cannot do without; the message names each with its seed."""

    def __init__(self, failures: Sequence[JobFailure]) -> None:
        self.failures = list(failures)
        lines = [f.describe() for f in self.failures]
        super().__init__(
            f"{len(lines)} job(s) failed:\n  "
            + "\n  ".join(lines)
            + "\nEach can be rerun alone with its seed."
        )


def failure_of(job: Job, exc: BaseException) -> JobFailure:
    """A :class:`JobFailure` for ``job`` from the exception it raised."""
    text = str(exc).strip().splitlines()
    return JobFailure(
        job.key, int(job.seed), f"{type(exc).__name__}: {text[0][:300]}" if text else type(exc).__name__
    )


@dataclass
class Engine:
    """Where jobs run: local processes (default), a given executor, or a Dask cluster.

    Parameters
    ----------
    workers : int, optional
        Local worker processes (default: one per processor core, at most one per job); 1 runs the jobs in
        this process. Not used with ``executor``, ``client`` or ``scheduler``.
    executor : concurrent.futures.Executor, optional
        Run the jobs on this executor. A ``distributed.Client`` or a Dask scheduler's address is accepted
        here too (as ``client`` or ``scheduler``).
    client : distributed.Client, optional
        Run the jobs on this Dask cluster (left open at the end: it belongs to the caller).
    scheduler : str, optional
        Address of a Dask scheduler, e.g. ``"tcp://10.0.0.5:8786"``: connected for the run and closed after.
    """

    workers: int | None = None
    executor: Any = None
    client: Any = None
    scheduler: str | None = None

    def __post_init__(self) -> None:
        given = [n for n in ("executor", "client", "scheduler") if getattr(self, n) is not None]
        if len(given) > 1:
            raise InputError(f"give one place for the jobs to run, not {' and '.join(given)}")
        if given and self.workers is not None:
            raise InputError(
                f"workers (local processes) and {given[0]} exclude each other: give one of them; the number "
                "of Dask workers is set where they are started"
            )
        if self.workers is not None and int(self.workers) < 1:
            raise InputError(f"workers must be a whole number of at least 1, got {self.workers!r}")
        if hasattr(self.executor, "get_executor"):  # a distributed.Client given as the executor
            self.client, self.executor = self.executor, None
        elif isinstance(self.executor, str):  # a Dask scheduler's address given as the executor
            self.scheduler, self.executor = self.executor, None

    @property
    def remote(self) -> bool:
        """Whether the jobs leave this process tree (a given executor or a Dask cluster)."""
        return any(v is not None for v in (self.executor, self.client, self.scheduler))

    def pool_size(self, n_jobs: int) -> int | None:
        """Local worker processes for ``n_jobs`` jobs (1: in this process); None when the jobs run elsewhere."""
        if self.remote:
            return None
        if self.workers is not None:
            return max(1, int(self.workers))
        return default_workers(n_jobs)

    def describe(self, n_jobs: int) -> str:
        """Where the jobs will run, in a few words."""
        if self.scheduler is not None:
            return f"Dask scheduler {self.scheduler}"
        if self.client is not None:
            return "the given Dask client"
        if self.executor is not None:
            return f"the given executor ({type(self.executor).__name__})"
        n = self.pool_size(n_jobs)
        return "this process" if n == 1 else f"{n} local worker processes"


def derived_seed(*words: int) -> int:
    """A seed in ``[0, 2**31 - 1)`` derived from whole numbers (a user's seed and a job's place).

    :class:`numpy.random.SeedSequence` mixes the words, so nearby inputs give unrelated seeds; the same
    words always give the same seed.
    """
    return int(np.random.SeedSequence([int(w) for w in words]).generate_state(1)[0] % (2**31 - 1))


def default_workers(n_jobs: int) -> int:
    """Worker processes by default: one per processor core, at most one per job."""
    return max(1, min(n_jobs, os.cpu_count() or 1))


class Progress:
    """A plain-text progress line per finished job on standard error (or through ``log``).

    Parameters
    ----------
    label : str
        Shown in brackets at the start of each line, e.g. ``"plan"``.
    total : int
        Number of jobs.
    log : callable, optional
        Receives each line (default: print it to standard error after the bracketed label).
    enabled : bool
        Show the progress lines (notes and failures are shown either way).
    """

    def __init__(
        self, label: str, total: int, log: Callable[[str], None] | None = None, enabled: bool = True
    ) -> None:
        self.label, self.total, self.enabled = label, int(total), enabled
        self.log = log or (lambda line: print(f"[{label}] {line}", file=sys.stderr, flush=True))
        self.done = self.failed = 0
        self.started = time.perf_counter()

    def note(self, message: str) -> None:
        """Show one message (a failure, a fallback) even when the progress lines are off."""
        self.log(message)

    def update(self, what: str, failure: JobFailure | None = None) -> None:
        """Count one finished job and show the progress line."""
        self.done += 1
        if failure is not None:
            self.failed += 1
            self.note(f"FAILED {failure.describe()}")
        if not self.enabled:
            return
        elapsed = time.perf_counter() - self.started
        left = elapsed / self.done * (self.total - self.done)
        bar = _bar(self.done, self.total)
        failed = f", {self.failed} failed" if self.failed else ""
        self.log(
            f"{bar} {self.done}/{self.total} jobs{failed}; {_clock(elapsed)} elapsed, "
            f"about {_clock(left)} left ({what})"
        )


def _bar(done: int, total: int, width: int = 20) -> str:
    filled = int(round(width * done / max(total, 1)))
    return "[" + "#" * filled + "." * (width - filled) + "]"


def _clock(seconds: float) -> str:
    seconds = int(round(seconds))
    return f"{seconds // 3600}:{seconds % 3600 // 60:02d}:{seconds % 60:02d}"


def _call(fn: Callable[[Any], Any], job: Job) -> Any:
    """Run one job, turning an exception into a :class:`JobFailure` (used in this process)."""
    try:
        return fn(job)
    except Exception as exc:  # noqa: BLE001 - any failure of one job is recorded, the others go on
        return failure_of(job, exc)


def connect(address: str):
    """A ``distributed.Client`` connected to the Dask scheduler at ``address``.

    Raises
    ------
    InputError
        When Dask is not installed or the scheduler cannot be reached (the message says what to do).
    """
    try:
        import distributed
    except ImportError:
        raise InputError(
            f"running on a Dask cluster needs the dask extra: {DASK_EXTRA} (here and on the workers)"
        ) from None
    try:
        return distributed.Client(address, timeout=CONNECT_TIMEOUT)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(
            f"could not reach a Dask scheduler at {address!r} ({type(exc).__name__}: {exc}). Start one with "
            "`dask scheduler` and workers with `dask worker ADDRESS` (see the README), check the address and "
            "port, or leave out --scheduler to run on this machine"
        ) from None


def _dask_executor(engine: Engine) -> tuple[Executor, Callable[[], None]]:
    """An executor on the engine's Dask cluster and a function that closes what was opened here."""
    if engine.client is not None:
        return engine.client.get_executor(pure=False), lambda: None
    client = connect(engine.scheduler)
    return client.get_executor(pure=False), client.close


def run(
    fn: Callable[[Any], Any],
    jobs: Sequence[Job],
    engine: Engine | None = None,
    *,
    label: str = "jobs",
    progress: bool = True,
    log: Callable[[str], None] | None = None,
    describe: Callable[[Any], str] = str,
    fallback: Callable[[Any], Any] | None = None,
) -> dict[Hashable, Any]:
    """Run ``fn(job)`` for every job and return the results by key.

    Parameters
    ----------
    fn : callable
        A top-level function of one job (picklable: worker processes and Dask workers receive it).
    jobs : sequence of Job
        Jobs with distinct keys.
    engine : Engine, optional
        Where to run them (default: local processes).
    label : str
        Name shown in the progress lines.
    progress : bool
        Show a progress line per finished job (failures are always shown).
    log : callable, optional
        Receives the progress lines (default: standard error).
    describe : callable
        Short text for a job in the progress line.
    fallback : callable, optional
        Used instead of ``fn`` for jobs run in this process after local worker processes could not start
        (default ``fn``).

    Returns
    -------
    dict
        ``key -> result``, or ``key ->`` :class:`JobFailure` for a job that raised.
    """
    engine = engine or Engine()
    keys = [job.key for job in jobs]
    if len(set(keys)) != len(keys):
        raise ValueError("jobs must have distinct keys")
    bar = Progress(label, len(jobs), log, progress)
    results: dict[Hashable, Any] = {}
    if not jobs:
        return results
    if progress:
        bar.note(f"{len(jobs)} jobs on {engine.describe(len(jobs))}")
    pool = engine.pool_size(len(jobs))
    if pool == 1:
        return _run_here(fn, jobs, results, bar, describe)
    close: Callable[[], None] = lambda: None  # noqa: E731
    own = pool is not None
    if own:
        executor: Executor = ProcessPoolExecutor(
            max_workers=pool, mp_context=multiprocessing.get_context("spawn")
        )
    elif engine.executor is not None:
        executor = engine.executor
    else:
        executor, close = _dask_executor(engine)
    from concurrent.futures.process import BrokenProcessPool

    try:
        futures = {executor.submit(fn, job): job for job in jobs}
        for future in as_completed(futures):
            job = futures[future]
            try:
                results[job.key] = future.result()
            except BrokenProcessPool:
                raise
            except Exception as exc:  # noqa: BLE001 - recorded with the job's seed; the others go on
                results[job.key] = failure_of(job, exc)
            failure = results[job.key] if isinstance(results[job.key], JobFailure) else None
            bar.update(describe(job), failure)
    except BrokenProcessPool:
        if not own:
            raise
        # worker processes could not start (typically a script without an `if __name__ == "__main__":`
        # guard, which spawned workers re-run): run the remaining jobs here; seeds make the results the same
        bar.note(
            "worker processes could not start; running the remaining jobs in this process (add an "
            '`if __name__ == "__main__":` guard to your script, or use one worker)'
        )
        rest = [job for job in jobs if job.key not in results]
        _run_here(fallback or fn, rest, results, bar, describe)
    finally:
        if own:
            executor.shutdown(wait=True, cancel_futures=True)
        close()
    return results


def _run_here(
    fn: Callable[[Any], Any],
    jobs: Iterable[Job],
    results: dict,
    bar: Progress,
    describe: Callable[[Any], str],
) -> dict:
    for job in jobs:
        results[job.key] = _call(fn, job)
        failure = results[job.key] if isinstance(results[job.key], JobFailure) else None
        bar.update(describe(job), failure)
    return results


def failures(results: dict[Hashable, Any]) -> list[JobFailure]:
    """The failed jobs among ``results`` (in the order of the results)."""
    return [r for r in results.values() if isinstance(r, JobFailure)]
