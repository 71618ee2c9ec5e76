"""Validation by simulation: simulation-based calibration (reduced and full) and recovery of taxon exponents.

The reduced calibration (eight tiny datasets, under a minute) runs by default; the others sample many
models and are marked slow (run with ``--runslow``). They use ``benchmarks/calibration.py``, which runs the
library's calibration loop (:mod:`allobranch.planning.calibrate`; Talts et al. 2018, arXiv:1804.06788), so
test, benchmark and ``allobranch calibrate`` share one implementation. Coverage thresholds are loose binomial bounds (scipy.stats.binomtest), not rules of thumb.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

import allobranch as ab

BENCHMARKS = Path(__file__).resolve().parents[1] / "benchmarks"


def _load(name: str):
    """Import a benchmark script as a module."""
    spec = importlib.util.spec_from_file_location(f"_bench_{name}", BENCHMARKS / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def calibration():
    return _load("calibration")


def test_reduced_calibration_runs_and_covers(calibration) -> None:
    # Eight datasets from the prior through the library's calibration loop (each an ordinary allobranch.fit):
    # ranks lie in range, and the number of 90 % intervals covering the truth is not implausibly low for
    # X ~ Binomial(n, 0.9): at least the 1 % quantile (scipy.stats.binom.ppf), i.e. 5 of the 8
    # population-exponent intervals (P(X <= 4) = 0.005) and 18 of the 24 taxon intervals (P(X <= 17) = 0.007).
    from allobranch.engine import Engine

    frame = calibration.run(8, base_seed=9100, engine=Engine(workers=1), progress=False)
    assert (frame["status"] == "ok").all()
    assert {"mu", "a_taxon", "sigma_dev"} <= set(frame["quantity"])
    assert frame["dataset"].nunique() == 8
    assert ((frame["rank"] >= 0) & (frame["rank"] <= frame["n_draws"])).all()
    # the ranks are not all at one end (a sampler stuck at its start, or a table that did not reach the
    # model, puts every true value outside the draws)
    assert frame["rank"].nunique() > 1
    mu = frame[frame["quantity"] == "mu"]
    taxa = frame[frame["quantity"] == "a_taxon"]
    assert len(mu) == 8 and len(taxa) == 24
    for rows in (mu, taxa):
        least = int(stats.binom.ppf(0.01, len(rows), 0.9))
        assert int(rows["covered"].sum()) >= least, (len(rows), least)


@pytest.mark.slow
def test_full_calibration_coverage(calibration) -> None:
    # 100 datasets drawn exactly from the model's assumptions: coverage of the 90 % HDI of every exponent
    # must be consistent with 0.90 (exact binomial test, scipy.stats.binomtest, at the 0.001 level) and within
    # 85-95 %, and the ranks uniform (chi-square, scipy.stats.chisquare) for mu and the taxon exponents.
    from allobranch.engine import Engine

    frame = calibration.run(100, base_seed=7000, generator="exact", engine=Engine(workers=1), progress=False)
    table = calibration.summary(frame).set_index("quantity")
    exponents = frame[frame["quantity"].isin(["mu", "a_taxon"])]
    k, n = int(exponents["covered"].sum()), len(exponents)
    assert 0.85 <= k / n <= 0.95, (k, n)
    assert stats.binomtest(k, n, p=0.9).pvalue > 0.001, (k, n)
    for q in ("mu", "a_taxon"):
        assert table.loc[q, "chi2_p"] > 0.001, table.loc[q]


@pytest.mark.slow
def test_model_beats_naive_estimate_at_high_error() -> None:
    # At 15 % relative error the naive median of per-junction roots is badly biased (errors in the
    # daughters and the selective loss of rootless junctions); the model's taxon exponents must be closer
    # to the truth on average and their 90 % HDIs must cover it.
    truth = {"A": 2.0, "B": 3.0}
    sim = ab.simulate_junctions(
        taxa=list(truth),
        taxon_exponents=truth,
        specimens_per_taxon=3,
        junctions_per_specimen=40,
        rel_error=0.15,
        tau_specimen=0.05,
        seed=31,
    )
    table = ab.read_junctions(sim.frame, sim.mapping)
    result = ab.fit(table, seed=3, draws=600, tune=600, chains=2, progress=False)
    exps = result.exponents().set_index("group")
    naive = ab.naive_summary(ab.junction_geometry(table), by=("taxon",)).set_index("taxon")
    model_err = np.array([exps.loc[t, "mean"] - a for t, a in truth.items()])
    naive_err = np.array([naive.loc[t, "median"] - a for t, a in truth.items()])
    assert np.abs(model_err).mean() < np.abs(naive_err).mean()
    for t, a in truth.items():
        assert exps.loc[t, "hdi_low"] <= a <= exps.loc[t, "hdi_high"]
