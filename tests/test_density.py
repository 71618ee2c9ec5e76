"""The compiled fast-form density, the default sampling route, the comparison's job plan and the advice texts.

References: the PyMC model built from the same spec (an independent implementation of the same log density,
compiled by PyTensor), central finite differences (numerical differentiation), and the rank-normalised R-hat
threshold 1.01 (Vehtari et al. 2021, Bayesian Analysis 16:667).
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

import allobranch as ab
from allobranch.cli import build_parser
from allobranch.inference.diagnostics import ADVICE
from allobranch.model import density as D
from allobranch.model.asymmetry import estimate_sigma_asym
from allobranch.model.build import build_model
from allobranch.model.data import model_data
from allobranch.model.structure import GroupLayout, data_arrays, group_layout


@pytest.fixture(scope="module")
def data():
    sim = ab.simulate_junctions(
        taxa=3, specimens_per_taxon=3, junctions_per_specimen=12, trifurcation_share=0.3, seed=4
    )
    return model_data(ab.read_junctions(sim.frame, sim.mapping))


def _pack(data, spec, layout, arrays, whiten=None):
    return D.pack(
        arrays,
        specimen_taxon_idx=data.specimen_taxon_idx,
        n_taxa=len(data.taxa),
        taxon_level=layout.taxon_level,
        specimen_level=layout.specimen_level,
        student=spec.deviation == "student_t",
        priors=spec.priors,
        fixed_exponent=spec.fixed_exponent,
        fixed_taxa_mask=layout.fixed_taxa,
        fixed_taxa_values=layout.fixed_values,
        w_taxon=layout.w_taxon,
        w_specimen=layout.w_specimen,
        whiten=whiten,
    )


@pytest.mark.parametrize(
    "spec_kwargs",
    [
        {},
        {"deviation": "student_t"},
        {"fixed_taxa": {"T2": 2.0}},
        {"fixed_exponent": 3.0},
        {"specimen_level": False},
        {"taxon_level": False},
    ],
)
def test_compiled_density_equals_pymc_model(data, spec_kwargs) -> None:
    # Same spec, same partial-centring weights: the compiled density and PyMC's log density (PyTensor) may
    # differ only by a constant, and the gradients must agree.
    spec = ab.ModelSpec(**spec_kwargs)
    arrays = data_arrays(data, "fast", estimate_sigma_asym(data, data.rel_error))
    base = group_layout(data, spec, arrays)
    rng = np.random.default_rng(0)
    layout = GroupLayout(
        base.taxon_level,
        base.specimen_level,
        base.fixed_taxa,
        base.fixed_values,
        base.pinned,
        np.where(base.fixed_taxa, 0.0, rng.uniform(size=base.w_taxon.size))
        if base.taxon_level
        else base.w_taxon,
        np.where(base.pinned, 0.0, rng.uniform(size=base.w_specimen.size))
        if base.specimen_level
        else base.w_specimen,
        "auto",
        base.pilot,
    )
    dens = _pack(data, spec, layout, arrays)
    built = build_model(data, spec, layout)
    model = built.model
    logp_fn = model.compile_logp()
    dlogp_fn = model.compile_dlogp()
    point0 = model.initial_point()
    diffs = []
    for _ in range(4):
        x = rng.normal(scale=0.4, size=dens.layout.ndim)
        point = dict(point0)
        for name, sl, shape in zip(dens.layout.names, dens.layout.slices, dens.layout.shapes):
            point[name] = x[sl].reshape(shape) + (2.5 if name == "mu" else 0.0)
            x[sl] = np.ravel(point[name])
        lp, grad = dens.logp(x)
        diffs.append(lp - float(logp_fn(point)))
        g_pymc = dlogp_fn(point)  # PyMC orders the gradient by model.value_vars
        order = [v.name for v in model.value_vars]
        flat = {}
        pos = 0
        for name in order:
            size = int(np.prod(np.shape(point[name]))) if np.shape(point[name]) else 1
            flat[name] = g_pymc[pos : pos + size]
            pos += size
        mine = np.concatenate([grad[sl] for sl in dens.layout.slices])
        theirs = np.concatenate([flat[name] for name in dens.layout.names])
        np.testing.assert_allclose(mine, theirs, rtol=1e-6, atol=1e-6)
    assert np.ptp(diffs) < 1e-6, diffs


@pytest.mark.parametrize(
    "spec_kwargs", [{}, {"deviation": "student_t"}, {"fixed_taxa": {"T1": 3.0}}, {"taxon_level": False}]
)
def test_whitened_gradient_matches_finite_differences(data, spec_kwargs) -> None:
    spec = ab.ModelSpec(**spec_kwargs)
    arrays = data_arrays(data, "fast", estimate_sigma_asym(data, data.rel_error))
    layout = group_layout(data, spec, arrays)
    pe = layout.pilot
    dens = _pack(data, spec, layout, arrays, whiten=(pe.a_specimen, 1.0 / pe.sd_specimen**2))
    x = np.random.default_rng(3).normal(scale=0.5, size=dens.layout.ndim)
    _, grad = dens.logp(x)
    h = 1e-6  # central differences, error O(h^2)
    fd = np.array([(dens.logp(x + h * e)[0] - dens.logp(x - h * e)[0]) / (2 * h) for e in np.eye(x.size)])
    np.testing.assert_allclose(grad, fd, rtol=1e-5, atol=1e-4)


def test_funnel_prone_design_fits_cleanly_by_default() -> None:
    # Many specimens with nearly equal exponents (spread 0.01, far below what 40 junctions can resolve): the
    # classic funnel. Defaults must end with no divergence and R-hat <= 1.01 (Vehtari et al. 2021).
    sim = ab.simulate_junctions(
        taxa=1,
        specimens_per_taxon=12,
        junctions_per_specimen=40,
        tau_specimen=0.01,
        mu=2.6,
        rel_error=0.05,
        seed=11,
    )
    table = ab.read_junctions(sim.frame, sim.mapping)
    res = ab.fit(table, seed=1, draws=500, tune=500, chains=4, progress=False, escalate=False)
    assert res.sampler_checks()["divergences"] == 0
    assert res.diagnostics()["r_hat"].max() <= 1.01
    # and the population exponent is where the truth is (within 3 posterior SDs)
    row = res.exponents().query("level == 'population'").iloc[0]
    assert abs(row["mean"] - sim.truth["a_taxon"]["T1"]) < 3 * row["sd"]


def test_whitened_and_weighted_forms_agree() -> None:
    # The whitened hierarchy is a change of variables, not a new model: its posterior equals the partially
    # centred form's within Monte Carlo error.
    sim = ab.simulate_junctions(taxa=2, specimens_per_taxon=3, junctions_per_specimen=25, seed=8)
    table = ab.read_junctions(sim.frame, sim.mapping)
    kw = dict(seed=3, draws=600, tune=600, chains=4, progress=False)
    white = ab.fit(table, **kw).exponents().set_index(["level", "group"])
    plain = (
        ab.fit(table, ab.ModelSpec(parametrization="noncentered"), **kw)
        .exponents()
        .set_index(["level", "group"])
    )
    for group in [g for g in white.index if g[0] != "specimen"]:  # the population and T1, T2
        diff = abs(white.loc[group, "mean"] - plain.loc[group, "mean"])
        mcse = np.hypot(
            white.loc[group, "sd"] / np.sqrt(white.loc[group, "ess_bulk"]),
            plain.loc[group, "sd"] / np.sqrt(plain.loc[group, "ess_bulk"]),
        )
        assert diff < 4 * mcse + 0.01, (group, diff, mcse)


def test_every_advised_option_exists() -> None:
    # Each command-line option a warning advises must parse for `fit` (the same parser serves compare/demo).
    parser = build_parser()
    base = ["fit", "t.csv", "--parent", "p", "--daughters", "a,b", "--out", "o"]
    flags = sorted({m for text in ADVICE.values() for m in re.findall(r"--[a-z][a-z-]+", text)})
    assert {"--draws", "--target-accept", "--parametrization", "--no-specimen-level"} <= set(flags)
    values = {
        "--draws": "2000",
        "--tune": "2000",
        "--chains": "6",
        "--target-accept": "0.99",
        "--parametrization": "noncentered",
        "--deviation": "student_t",
    }
    for flag in flags:
        args = base + [flag] + ([values[flag]] if flag in values else [])
        parser.parse_args(args)
    for bad in (["--draws", "0"], ["--chains", "-1"], ["--target-accept", "1.5"]):
        with pytest.raises(SystemExit):
            parser.parse_args(base + bad)


def test_comparison_does_not_depend_on_workers() -> None:
    # Every fit's seed comes from its key, so 1 or 2 worker processes give identical evidence tables.
    sim = ab.simulate_junctions(
        taxa=["A"], specimens_per_taxon=2, junctions_per_specimen=20, taxon_exponents={"A": 2.0}, seed=5
    )
    table = ab.read_junctions(sim.frame, sim.mapping)
    kw = dict(laws=["da_vinci", "murray"], seed=7, draws=200, tune=200, chains=2, escalate=False)
    one = ab.compare_laws(table, workers=1, **kw)
    two = ab.compare_laws(table, workers=2, **kw)
    pd.testing.assert_frame_equal(one.evidence, two.evidence)
    pd.testing.assert_frame_equal(one.verdicts, two.verdicts)
