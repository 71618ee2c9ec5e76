"""Large tables: the pointwise log-likelihood recomputed in blocks, lean saved fits, LOO from a saved fit."""

from __future__ import annotations

from functools import partial
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy import stats

import allobranch as ab
from allobranch.comparison import loo
from allobranch.errors import InputError
from allobranch.inference import pointwise

SHORT = {"draws": 100, "tune": 100, "chains": 2, "progress": False}


def _fit(seed: int = 1, spec: ab.ModelSpec | None = None, **design) -> ab.FitResult:
    table = ab.simulate(ab.Design(**design), seed=seed).table
    return ab.fit(table, spec, seed=seed, **SHORT)


@pytest.fixture(scope="module")
def result() -> ab.FitResult:
    return _fit(taxa=2, specimens=2, junctions=12, tau_taxon=0.2)


@pytest.fixture()
def small_blocks(monkeypatch):
    """Blocks of 7 junctions (a few per table), so every test crosses block boundaries."""
    monkeypatch.setattr(pointwise, "CHUNK_BYTES", 8 * 200 * 7)
    monkeypatch.setattr(pointwise, "loglik_blocks", partial(pointwise.loglik_blocks, chunk_bytes=8 * 200 * 7))


def _lean(result: ab.FitResult, tmp_path: Path) -> ab.FitResult:
    return ab.FitResult.load(result.save(tmp_path / "fit.nc"))


def test_blocks_cover_every_junction_once_within_the_byte_limit() -> None:
    blocks = pointwise.junction_blocks(1003, 4000, chunk_bytes=8 * 4000 * 100)
    covered = np.concatenate([np.arange(b.start, b.stop) for b in blocks])
    np.testing.assert_array_equal(covered, np.arange(1003))  # exact: each junction once, in order
    assert max(b.stop - b.start for b in blocks) * 8 * 4000 <= 8 * 4000 * 100


@pytest.mark.parametrize(
    "design, spec",
    [
        ({"taxa": 2, "specimens": 2, "junctions": 12, "tau_taxon": 0.2}, None),
        (
            {"taxa": 1, "specimens": 9, "junctions": 1, "trifurcations": 0.5},
            None,
        ),  # as many junctions as specimens
        ({"taxa": 1, "specimens": 2, "junctions": 15}, ab.ModelSpec(deviation="student_t")),
        ({"taxa": 1, "specimens": 2, "junctions": 10, "error_kind": "absolute", "error": 0.01}, None),
        # a linear predictor: the exponent depends on a junction covariate (slopes by taxon)
        (
            {"taxa": 2, "specimens": 2, "junctions": 10},
            ab.ModelSpec(covariates=("log_parent_size",), covariates_by_taxon=True),
        ),
    ],
)
def test_recomputed_log_likelihood_equals_the_fits_own(design, spec) -> None:
    # the fit's log-likelihood (computed for all junctions at once) is the reference
    res = _fit(seed=2, spec=spec, **design)
    if spec is not None and spec.covariates:  # the slopes enter the recomputed terms
        assert {"beta", "beta_taxon"} & set(res.idata.posterior.data_vars)
    blocks = list(pointwise.loglik_blocks(res, chunk_bytes=8 * 200 * 4))
    assert len(blocks) == -(-res.table.n_junctions // 4)
    again = xr.concat([b for _, b in blocks], dim="junction")
    stored = res.idata.log_likelihood["loglik"]
    np.testing.assert_array_equal(again.values, stored.values)
    np.testing.assert_array_equal(again["junction"].values, stored["junction"].values)


def test_saved_fit_is_lean_and_reads_back_the_same(result, tmp_path: Path) -> None:
    lean = _lean(result, tmp_path)
    assert "log_likelihood" not in lean.idata.groups()
    assert lean.idata.posterior_predictive["log_parent"].shape == (1, 50, result.table.n_junctions)
    pd.testing.assert_frame_equal(result.ppc_table(), lean.ppc_table())  # the same draws are shown
    pd.testing.assert_frame_equal(result.exponents(), lean.exponents())
    full = result.save(tmp_path / "full.nc", keep_log_likelihood=True)
    assert "log_likelihood" in ab.FitResult.load(full).idata.groups()
    assert (tmp_path / "fit.nc").stat().st_size < full.stat().st_size


def test_loo_of_a_saved_fit_equals_arviz_on_the_in_memory_fit(result, tmp_path: Path, small_blocks) -> None:
    reference = az.loo(result.idata, pointwise=True)  # ArviZ on the stored log-likelihood
    got = loo.elpd_loo(_lean(result, tmp_path))
    for key in ("elpd_loo", "se", "p_loo", "n_samples", "n_data_points", "warning", "good_k"):
        assert got[key] == pytest.approx(reference[key], rel=1e-12), key
    np.testing.assert_allclose(got.loo_i.values, reference.loo_i.values, rtol=1e-12)
    np.testing.assert_allclose(got.pareto_k.values, reference.pareto_k.values, rtol=1e-12)
    np.testing.assert_array_equal(got.pareto_k["junction"].values, reference.pareto_k["junction"].values)


def test_comparison_from_a_saved_fit_equals_the_in_memory_one(result, tmp_path: Path, small_blocks) -> None:
    kw = {"scopes": ("taxon",), "seed": 1, "workers": 1, "draws": 100, "tune": 100, "chains": 2}
    direct = ab.compare_laws(result.table, ["murray"], fit=result, **kw)
    saved = ab.compare_laws(result.table, ["murray"], fit=_lean(result, tmp_path), **kw)
    pd.testing.assert_frame_equal(direct.evidence, saved.evidence, rtol=1e-10)
    pd.testing.assert_frame_equal(direct.verdicts, saved.verdicts)


def test_recomputing_refuses_a_table_the_fit_was_not_made_from(result) -> None:
    changed = result.table.data.copy()
    changed.loc[0, "parent"] *= 1.01
    other = ab.FitResult(
        result.idata,
        ab.JunctionTable(changed, result.table.mapping, result.table.report),
        result.spec,
        result.settings,
    )
    with pytest.raises(InputError, match="content hash differs"):
        next(pointwise.loglik_blocks(other))


def test_predictive_draws_without_a_log_likelihood_group(result) -> None:
    idata = az.InferenceData(posterior=result.idata.posterior)
    built = pointwise.evaluator(result)
    pointwise.add_predictive(idata, built, seed=3)
    assert "log_likelihood" not in idata.groups()
    pred = idata.posterior_predictive["log_parent"]
    assert pred.shape == (1, pointwise.PREDICTIVE_DRAWS, result.table.n_junctions)
    np.testing.assert_array_equal(idata.observed_data["log_parent"].values, np.log(result.table.parent))
    # standardised by the model's predictive mean and SD of each kept draw, the draws are standard normal
    # (normal deviation; scipy's Kolmogorov-Smirnov test)
    post = result.idata.posterior
    z = []
    for k, flat in enumerate(pred["draw"].values):
        from allobranch.inference.fit import _draw_params

        p = _draw_params(post, int(flat // post.sizes["draw"]), int(flat % post.sizes["draw"]), built)
        _, mean, var = built.pointwise(**p)
        z.append((pred.values[0, k] - mean) / np.sqrt(var))
    assert stats.kstest(np.concatenate(z), "norm").pvalue > 0.001
