"""Real short fits on small simulated data: reproducibility, persistence, diagnostics, recovery of the
deviation scale under a fixed law, the PyMC fallback, and the ``allobranch fit`` command end to end.

References: pandas' frame equality for reproducibility; ArviZ HDIs (inside ``FitResult.exponents``) for
coverage; the diagnostic thresholds R-hat <= 1.01 and ESS >= 400 (Vehtari et al. 2021, Bayesian Analysis
16:667).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
import pytest
from scipy.stats import halfnorm

import allobranch as ab
from allobranch.cli import main
from allobranch.conventions import FIT_FILES
from allobranch.model.simulate import SimulatedData

#: Short sampler settings for the default suite.
SHORT = {"draws": 200, "tune": 200, "chains": 2, "progress": False}


def _simulated(seed: int = 3, **kwargs) -> SimulatedData:
    """A small simulated table (3 taxa x 2 specimens x 15 junctions unless overridden)."""
    opts = {"taxa": 3, "specimens_per_taxon": 2, "junctions_per_specimen": 15, "seed": seed}
    return ab.simulate_junctions(**{**opts, **kwargs})


@pytest.fixture(scope="module")
def table() -> ab.JunctionTable:
    sim = _simulated()
    return ab.read_junctions(sim.frame, sim.mapping)


@pytest.fixture(scope="module")
def result(table) -> ab.FitResult:
    return ab.fit(table, seed=11, **SHORT)


def test_same_seed_gives_identical_tables(table, result) -> None:
    again = ab.fit(table, seed=11, **SHORT)
    pd.testing.assert_frame_equal(result.exponents(), again.exponents())
    pd.testing.assert_frame_equal(result.variance_components(), again.variance_components())
    np.testing.assert_array_equal(
        result.idata.log_likelihood["loglik"].values, again.idata.log_likelihood["loglik"].values
    )


def test_different_seed_gives_different_draws(table, result) -> None:
    first = ab.fit(table, seed=11, draws=20, tune=20, chains=2, progress=False)
    other = ab.fit(table, seed=12, draws=20, tune=20, chains=2, progress=False)
    assert not np.array_equal(first.idata.posterior["mu"].values, other.idata.posterior["mu"].values)


def test_result_shapes_and_provenance(table, result) -> None:
    exps = result.exponents()
    assert list(exps["level"].unique()) == ["population", "taxon", "specimen"]
    assert len(exps) == 1 + 3 + 6
    assert np.all(exps["hdi_low"] <= exps["mean"]) and np.all(exps["mean"] <= exps["hdi_high"])
    ll = result.idata.log_likelihood["loglik"]
    assert ll.shape == (2, 200, table.n_junctions) and np.isfinite(ll.values).all()
    prov = result.provenance
    assert prov["input_sha256"] == table.digest()
    assert prov["settings"]["seed"] == 11 and prov["settings"]["form"] == "fast"


def test_save_and_load_round_trip(tmp_path: Path, result) -> None:
    path = result.save(tmp_path / "fit.nc")
    loaded = ab.FitResult.load(path)
    pd.testing.assert_frame_equal(result.exponents(), loaded.exponents())
    pd.testing.assert_frame_equal(result.variance_components(), loaded.variance_components())
    pd.testing.assert_frame_equal(result.diagnostics(), loaded.diagnostics())
    assert loaded.spec == result.spec
    assert loaded.settings == result.settings
    pd.testing.assert_frame_equal(loaded.table.data, result.table.data, check_exact=False, rtol=1e-9)


def test_loaded_table_is_the_fitted_table_exactly(tmp_path: Path, result) -> None:
    loaded = ab.FitResult.load(result.save(tmp_path / "fit.nc"))
    assert loaded.table.digest() == result.provenance["input_sha256"]
    pd.testing.assert_frame_equal(loaded.table.data, result.table.data, check_exact=True)


def test_too_short_a_fit_is_flagged(table) -> None:
    bad = ab.fit(table, seed=1, draws=10, tune=10, chains=2, progress=False)
    assert bad.warnings
    assert not bad.converged
    text = " ".join(bad.warnings)
    assert "effective sample size" in text or "R-hat" in text
    diag = bad.diagnostics()
    assert not diag["ok"].all()


def test_fixed_exponent_recovers_the_deviation_scale() -> None:
    # Truth: every specimen follows a = 2.5 exactly, junctions deviate by sigma_dev = 0.08 on the log
    # scale, readings carry a known 5 % error. The 90 % HDI (ArviZ) of sigma_dev must cover 0.08.
    sim = ab.simulate_junctions(
        taxa=["A", "B"],
        specimens_per_taxon=2,
        junctions_per_specimen=30,
        taxon_exponents={"A": 2.5, "B": 2.5},
        tau_specimen=0.0,
        sigma_dev=0.08,
        rel_error=0.05,
        seed=21,
    )
    table = ab.read_junctions(sim.frame, sim.mapping)
    res = ab.fit(
        table, ab.ModelSpec(fixed_exponent=2.5), seed=2, draws=300, tune=300, chains=2, progress=False
    )
    var = res.variance_components().set_index("component")
    row = var.loc["sigma_dev"]
    assert abs(row["mean"] - 0.08) < 3 * row["sd"], row
    assert row["sd"] < 0.02, row  # and it is informative: the prior's SD is about 0.06
    # Informative, not just the prior: a third of the width of the prior's central 90 % (the default
    # HalfNormal(0.1) prior, quantiles from scipy.stats.halfnorm).
    prior_width = float(np.diff(halfnorm.ppf([0.05, 0.95], scale=res.spec.priors.sigma_dev))[0])
    assert row["hdi_high"] - row["hdi_low"] < prior_width / 3
    exps = res.exponents()
    assert exps.loc[exps["level"] == "taxon", "fixed"].all()
    np.testing.assert_array_equal(res.idata.posterior["a_taxon"].values, 2.5)


def test_pymc_sampler_runs(table) -> None:
    res = ab.fit(table, seed=5, sampler="pymc", draws=60, tune=60, chains=2, progress=False, escalate=False)
    assert res.settings["sampler"] == "pymc"
    assert res.notes == []
    exps = res.exponents()
    assert np.isfinite(exps[["mean", "sd", "hdi_low", "hdi_high"]].to_numpy()).all()
    assert res.idata.posterior.sizes["draw"] == 60
    assert res.idata.log_likelihood["loglik"].shape == (2, 60, table.n_junctions)


def test_nutpie_failure_falls_back_to_pymc(table, monkeypatch) -> None:
    def broken(*args, **kwargs):
        raise RuntimeError("simulated nutpie failure")

    from allobranch.inference import sampling

    monkeypatch.setattr(sampling, "_sample_fast", broken)
    with pytest.warns(RuntimeWarning, match="falling back to PyMC"):
        res = ab.fit(table, seed=5, draws=30, tune=30, chains=2, progress=False, escalate=False)
    assert res.settings["sampler"] == "pymc"
    assert any("PyMC" in note for note in res.notes)
    assert "a_taxon" in res.idata.posterior


def test_unknown_sampler_is_rejected(table) -> None:
    with pytest.raises(ValueError, match="nutpie, pymc"):
        ab.fit(table, sampler="stan")


# -- command line ------------------------------------------------------------------------------------------
def _cli(*args: str) -> subprocess.CompletedProcess:
    """Run the installed ``allobranch`` console script (or the CLI module when no script is installed)."""
    script = Path(sys.executable).parent / "allobranch"
    command = [str(script)] if script.is_file() else [sys.executable, "-m", "allobranch.cli"]
    # no timeout: a loaded 2-core machine is slow, and a slow run is not a failure
    return subprocess.run([*command, *args], capture_output=True, text=True)


def test_cli_fit_end_to_end(tmp_path: Path, capsys) -> None:
    sim = _simulated(seed=4, taxa=2, junctions_per_specimen=10)
    csv = tmp_path / "junctions.csv"
    sim.frame.to_csv(csv, index=False)
    out = tmp_path / "results"
    args = [
        str(csv),
        "--parent",
        "parent",
        "--daughters",
        "d1,d2",
        "--taxon",
        "taxon",
        "--specimen",
        "specimen",
        "--junction",
        "junction",
        "--unit",
        "mm",
        "--rel-error",
        "0.05",
        "--out",
        str(out),
        "--draws",
        "200",
        "--tune",
        "200",
        "--chains",
        "2",
        "--seed",
        "3",
        "--hdi",
        "0.8",
        "--quiet",
    ]
    first = _cli("fit", *args)
    assert first.returncode == 0, first.stderr
    for name in FIT_FILES:
        assert (out / name).is_file(), name
    exps = pd.read_csv(out / "exponents.csv")
    for column in ("level", "group", "mean", "sd", "hdi_low", "hdi_high", "r_hat", "ess_bulk"):
        assert column in exps.columns
    assert set(exps["level"]) == {"population", "taxon", "specimen"}
    saved = ab.FitResult.load(out / "fit.nc")
    assert saved.exponents()["mean"].round(10).tolist() == exps["mean"].round(10).tolist()
    # the tables use the asked-for 80 % HDI (ArviZ's, of the saved draws) and the saved fit records it
    assert saved.settings["hdi_prob"] == 0.8
    mu = az.hdi(saved.idata.posterior["mu"].values.ravel(), hdi_prob=0.8)
    np.testing.assert_allclose(exps.loc[exps["level"] == "population", ["hdi_low", "hdi_high"]].iloc[0], mu)
    assert "(80% HDI)" in first.stdout

    before = {name: ((out / name).read_bytes(), (out / name).stat().st_mtime_ns) for name in FIT_FILES}
    # The second run goes through the same entry point in-process (it stops before sampling).
    assert main(["fit", *args]) == 2
    assert "--force" in capsys.readouterr().err
    after = {name: ((out / name).read_bytes(), (out / name).stat().st_mtime_ns) for name in FIT_FILES}
    assert after == before


def test_cli_fit_bad_input_exits_2(tmp_path: Path, capsys) -> None:
    code = main(
        [
            "fit",
            str(tmp_path / "missing.csv"),
            "--parent",
            "p",
            "--daughters",
            "a,b",
            "--out",
            str(tmp_path / "o"),
            "--quiet",
        ]
    )
    assert code == 2
    err = capsys.readouterr().err
    assert "missing.csv" in err and "Traceback" not in err
    assert not (tmp_path / "o" / "fit.nc").exists()
