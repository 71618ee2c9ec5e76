"""The job engine: seeds, failures that do not sink a study, executors, and a Dask cluster on loopback."""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import pytest

from allobranch import engine
from allobranch.cli import main
from allobranch.engine import Engine, JobFailure, JobsFailed, derived_seed, run
from allobranch.errors import InputError


@dataclass(frozen=True)
class Square:
    """A test job: its value squared, unless the value is negative."""

    value: int
    seed: int

    @property
    def key(self) -> tuple[int]:
        return (self.value,)


def square(job: Square) -> int:
    if job.value < 0:
        raise ValueError(f"negative value {job.value}")
    return job.value**2


JOBS = [Square(v, derived_seed(11, i)) for i, v in enumerate([3, -2, 5, 7])]


def test_derived_seeds_are_reproducible_and_in_range() -> None:
    seeds = [derived_seed(7, r) for r in range(200)]
    assert seeds == [derived_seed(7, r) for r in range(200)]
    assert len(set(seeds)) == 200 and all(0 <= s < 2**31 - 1 for s in seeds)
    assert derived_seed(7, 1) != derived_seed(8, 1)


def test_a_failed_job_is_reported_with_its_seed_and_the_others_finish() -> None:
    lines: list[str] = []
    results = run(square, JOBS, Engine(workers=1), label="t", log=lines.append)
    assert [results[(v,)] for v in (3, 5, 7)] == [9, 25, 49]  # exact arithmetic
    failure = results[(-2,)]
    assert isinstance(failure, JobFailure) and failure.seed == JOBS[1].seed
    assert "ValueError: negative value -2" in failure.error
    assert any(f"seed {JOBS[1].seed}" in line and "FAILED" in line for line in lines)
    assert engine.failures(results) == [failure]
    assert "rerun alone with its seed" in str(JobsFailed([failure]))


def test_any_executor_gives_the_same_results_as_this_process() -> None:
    here = run(square, JOBS, Engine(workers=1), progress=False)
    with ThreadPoolExecutor(max_workers=3) as pool:
        there = run(square, JOBS, Engine(executor=pool), progress=False)
    assert here == there


def test_engine_refuses_two_places() -> None:
    with pytest.raises(InputError, match="exclude each other"):
        Engine(workers=2, scheduler="tcp://127.0.0.1:8786")
    with pytest.raises(InputError, match="one place"):
        Engine(client=object(), scheduler="tcp://127.0.0.1:8786")
    with pytest.raises(InputError, match="at least 1"):
        Engine(workers=0)
    # what compare_laws(executor=...) receives for --scheduler: an address, connected for the run only
    assert Engine(executor="tcp://127.0.0.1:8786").scheduler == "tcp://127.0.0.1:8786"


def test_an_unreachable_scheduler_is_a_user_error(monkeypatch) -> None:
    pytest.importorskip("distributed")
    monkeypatch.setattr(engine, "CONNECT_TIMEOUT", 2)
    with pytest.raises(InputError, match="could not reach a Dask scheduler") as exc:
        engine.connect("tcp://127.0.0.1:9")
    assert "dask scheduler" in str(exc.value) and "dask worker" in str(exc.value)


def test_compare_raises_naming_a_failed_fit_and_its_seed(monkeypatch) -> None:
    import allobranch as ab
    from allobranch.comparison import jobs
    from allobranch.comparison.laws import resolve_laws

    table = ab.simulate(ab.Design(specimens=1, junctions=6), seed=1).table
    plan = jobs.plan_jobs(resolve_laws(["murray"]), table.taxa, ("taxon",), seed=3)

    def broken(table, free_spec, job, sampler_kw):
        raise RuntimeError(f"sampler crashed on {job.law}")

    monkeypatch.setattr(jobs, "run_job", broken)
    with pytest.raises(JobsFailed) as exc:
        jobs.run_jobs(table, ab.ModelSpec(), plan, {}, workers=1)
    text = str(exc.value)
    assert all(f"seed {job.seed}" in text for job in plan) and "sampler crashed on murray" in text


PLAN_ARGS = [
    "plan",
    "--specimens", "2",
    "--junctions", "8",
    "--alternative", "2.7",
    "--replicates", "2",
    "--sweep", "junctions=6,8",
    "--draws", "100",
    "--tune", "100",
    "--chains", "2",
    "--seed", "5",
    "--quiet",
]  # fmt: skip


def test_a_plan_on_a_dask_cluster_equals_the_local_plan(tmp_path: Path) -> None:
    # The same seeds give the same table whatever runs the jobs: a Dask scheduler with two worker processes
    # on loopback, reached through --scheduler, against this process (plan, and compare's law fits).
    distributed = pytest.importorskip("distributed")
    import allobranch as ab

    sim = ab.simulate(ab.Design(specimens=2, junctions=8), seed=2)
    sim.frame.to_csv(tmp_path / "table.csv", index=False)
    compare = ["compare", str(tmp_path / "table.csv"), "--specimen", "specimen", "--parent", "parent",
               "--daughters", "d1,d2", "--rel-error", "0.05", "--law", "murray", "--draws", "100", "--tune",
               "100", "--chains", "2", "--quiet"]  # fmt: skip
    assert main([*PLAN_ARGS, "--workers", "1", "--out", str(tmp_path / "local")]) == 0
    assert main([*compare, "--workers", "1", "--out", str(tmp_path / "local")]) == 0
    with distributed.LocalCluster(
        n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None
    ) as cluster:
        address = cluster.scheduler_address
        assert main([*PLAN_ARGS, "--scheduler", address, "--out", str(tmp_path / "dask")]) == 0
        assert main([*compare, "--scheduler", address, "--out", str(tmp_path / "dask")]) == 0
    laws = [pd.read_csv(tmp_path / where / "laws.csv") for where in ("local", "dask")]
    pd.testing.assert_frame_equal(*laws, check_exact=True)
    for name in ("plan.csv", "plan_replicates.csv"):
        local = pd.read_csv(tmp_path / "local" / name, keep_default_na=False)
        dask = pd.read_csv(tmp_path / "dask" / name, keep_default_na=False)
        pd.testing.assert_frame_equal(local, dask, check_exact=True)
    local = pd.read_csv(tmp_path / "local" / "plan_replicates.csv")
    assert len(local) == 4 and (local["status"] == "ok").all()
    assert (tmp_path / "dask" / "plan.png").stat().st_size > 0
