"""The simulation API: ``allobranch.simulate(design, seed)`` on the package's one generator."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import allobranch as ab
from allobranch.errors import InputError
from allobranch.planning.design import SWEEP_VARIABLES, Design, simulate


def test_exported_lazily_from_the_package() -> None:
    import allobranch.planning.design as design

    assert ab.simulate is design.simulate and ab.Design is design.Design


def test_table_has_the_designed_shape() -> None:
    # exact arithmetic: taxa x specimens x junctions rows, specimens x taxa specimen labels
    sim = simulate(Design(taxa=3, specimens=2, junctions=7), seed=4)
    assert sim.table.n_junctions == 3 * 2 * 7 == sim.design.n_junctions
    assert sim.table.taxa == ["T1", "T2", "T3"]
    assert len(sim.table.specimens) == 6
    assert sim.table.data.groupby("specimen").size().eq(7).all()
    assert sim.table.rel_error == 0.05
    assert set(sim.truth["a_specimen"]) == set(sim.table.specimens["specimen"])


def test_same_seed_same_table_other_seed_other_table() -> None:
    design = Design(specimens=2, junctions=12)
    a, b, c = simulate(design, 5), simulate(design, 5), simulate(design, 6)
    pd.testing.assert_frame_equal(a.table.data, b.table.data)
    assert not np.allclose(a.table.parent, c.table.parent)


def test_it_is_the_benchmarks_generator() -> None:
    # no second generator: the design's table is exactly simulate_junctions' table for the same choices
    design = Design(
        taxa=2, specimens=2, junctions=9, exponent=2.4, tau_taxon=0.2, trifurcations=0.3, split="uniform"
    )
    sim = simulate(design, seed=8)
    raw = ab.simulate_junctions(
        taxa=2,
        specimens_per_taxon=2,
        junctions_per_specimen=9,
        mu=2.4,
        tau_taxon=0.2,
        tau_specimen=design.tau_specimen,
        sigma_dev=design.sigma_dev,
        rel_error=0.05,
        trifurcation_share=0.3,
        split="uniform",
        split_concentration=design.split_concentration,
        seed=8,
    )
    pd.testing.assert_frame_equal(sim.frame, raw.frame)
    assert sim.truth == raw.truth


@pytest.mark.parametrize("split", ["dirichlet", "uniform", "lognormal", "side_branch"])
def test_error_free_tables_obey_the_law_exactly(split) -> None:
    # exact algebra: with no spread, no deviation and (almost) no error every junction satisfies
    # r_p^a = sum r_d^a at the design's exponent, whatever the split and the daughter count
    design = Design(
        taxa=1, specimens=2, junctions=15, exponent=2.6, tau_specimen=0.0, sigma_dev=0.0, error=1e-12,
        trifurcations=0.4, split=split,
    )  # fmt: skip
    table = simulate(design, seed=1).table
    a = 2.6
    lhs = table.parent**a
    rhs = np.nansum(table.daughters**a, axis=1)
    np.testing.assert_allclose(lhs, rhs, rtol=1e-9)
    assert set(table.data["n_daughters"]) == {2, 3}


def test_absolute_error_gives_a_standard_error_column() -> None:
    sim = simulate(Design(error_kind="absolute", error=0.01, junctions=5), seed=2)
    assert sim.table.rel_error is None
    np.testing.assert_array_equal(sim.table.se, np.full_like(sim.table.se, 0.01))


@pytest.mark.parametrize(
    "changes, word",
    [
        ({"junctions": 0}, "junctions"),
        ({"specimens": 2.5}, "specimens"),
        ({"exponent": -1}, "exponent"),
        ({"error": 0}, "error"),
        ({"error_kind": "percent"}, "error_kind"),
        ({"split": "even"}, "split"),
        ({"trifurcations": 1.5}, "trifurcations"),
        ({"size_range": (2.0, 1.0)}, "size_range"),
        ({"tau_specimen": -0.1}, "tau_specimen"),
    ],
)
def test_bad_designs_are_refused_naming_the_field(changes, word) -> None:
    with pytest.raises(InputError, match=word):
        Design(**changes)


def test_with_changes_and_checks_fields() -> None:
    design = Design().with_(junctions=100)
    assert design.junctions == 100 and design.specimens == Design().specimens
    with pytest.raises(InputError, match="no field named colour"):
        Design().with_(colour="red")
    for variable in SWEEP_VARIABLES:  # every sweepable variable is a design field
        assert hasattr(design, variable)
