"""Taxon traits and trees: reading, matching to taxa, clear errors, and the Brownian-motion covariance."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import allobranch as ab
from allobranch.comparative import attach_traits, attach_tree, read_tree
from allobranch.errors import InputError
from allobranch.model.data import model_data
from allobranch.model.linear import LOG_PARENT_SIZE, build_linear_terms, covariate_values

TAXA = ["Mus musculus", "Rattus norvegicus", "Sorex araneus", "Talpa europaea"]
# Ultrametric tree of height 3: (Mus, Rattus) split at 2, (Sorex, Talpa) split at 1, root at 0.
NEWICK = "((Mus_musculus:1,Rattus_norvegicus:1):2,(Sorex_araneus:2,Talpa_europaea:2,Extra_tip:2):1);"


@pytest.fixture(scope="module")
def table():
    sim = ab.simulate_junctions(taxa=TAXA, specimens_per_taxon=1, junctions_per_specimen=8, seed=2)
    return ab.read_junctions(sim.frame, sim.mapping)


def _write(tmp_path, text, name="tree.nwk"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_tree_covariance_is_the_shared_branch_length(tmp_path) -> None:
    # Exact algebra for this tree: tips sharing the (Mus, Rattus) ancestor share 2 of their 3 units of
    # path; (Sorex, Talpa) share 1; across the root nothing. Underscores are read as spaces.
    ph = read_tree(_write(tmp_path, NEWICK), TAXA)
    C = ph.shared[np.ix_([ph.tips.index(t) for t in TAXA], [ph.tips.index(t) for t in TAXA])]
    expected = np.array([[3, 2, 0, 0], [2, 3, 0, 0], [0, 0, 3, 1], [0, 0, 1, 3]], dtype=float)
    np.testing.assert_allclose(C, expected, atol=1e-12)
    np.testing.assert_allclose(ph.correlation(TAXA), expected / 3.0, atol=1e-12)
    assert ph.pruned == ["Extra_tip"]
    assert len(ph.segments) > 0


def test_pruned_tips_are_listed_in_the_report(tmp_path, table) -> None:
    out = attach_tree(table, _write(tmp_path, NEWICK))
    messages = [p.message for p in out.report.flags]
    assert any("Extra_tip" in m and "pruned" in m for m in messages)
    assert table.phylogeny is None and out.phylogeny is not None  # the input table is not changed


@pytest.mark.parametrize(
    ("text", "needle"),
    [
        ("((Mus_musculus,Rattus_norvegicus),(Sorex_araneus,Talpa_europaea));", "no length"),
        ("((Mus_musculus:1,Rattus_norvegicus:1):2,(Sorex_araneus:2,Sorex_araneus:2):1);", "more than once"),
        ("((Mus_musculus:1,Rattus_norvegicus:1):2,Sorex_araneus:3);", "Talpa europaea"),
        ("((Mus_musculus:1,Rattus_norvegicus:-1):2,(Sorex_araneus:2,Talpa_europaea:2):1);", "negative"),
        ("this is not a tree (", "Newick"),
    ],
)
def test_bad_trees_are_refused_with_the_file_named(tmp_path, table, text, needle) -> None:
    path = _write(tmp_path, text)
    with pytest.raises(InputError) as info:
        attach_tree(table, path)
    assert needle in str(info.value) and str(path) in str(info.value)


def test_missing_tree_file(tmp_path, table) -> None:
    with pytest.raises(InputError, match="does not exist"):
        attach_tree(table, tmp_path / "nope.nwk")


def test_traits_join_by_taxon_and_list_unused_rows(table) -> None:
    traits = pd.DataFrame({"taxon": [*TAXA, "Homo sapiens"], "log_mass": [1.3, 2.4, 0.9, 1.9, 4.8]})
    out = attach_traits(table, traits, ["log_mass"])
    assert list(out.taxon_traits.index) == TAXA
    assert out.taxon_traits.loc["Sorex araneus", "log_mass"] == 0.9
    assert any("Homo sapiens" in p.message for p in out.report.flags)


def test_taxon_without_trait_is_refused(table) -> None:
    traits = pd.DataFrame({"taxon": TAXA[:3], "log_mass": [1.3, 2.4, 0.9]})
    with pytest.raises(InputError, match="Talpa europaea"):
        attach_traits(table, traits, ["log_mass"])


def test_bad_trait_cells_name_row_and_column(table, tmp_path) -> None:
    path = tmp_path / "traits.csv"
    path.write_text(
        "taxon,log_mass\nMus musculus,1.3\nRattus norvegicus,NA\nSorex araneus,0.9\nSorex araneus,1\n"
    )
    with pytest.raises(InputError) as info:
        attach_traits(table, path, ["log_mass"])
    text = str(info.value)
    assert "row 3" in text and "log_mass" in text and "more than one row" in text


def test_covariate_columns_are_read_and_checked() -> None:
    sim = ab.simulate_junctions(taxa=2, specimens_per_taxon=1, junctions_per_specimen=6, seed=1)
    frame = sim.frame.assign(generation=np.arange(len(sim.frame)) % 5)
    mapping = sim.mapping.__class__(**{**sim.mapping.__dict__, "covariates": ("generation",)})
    table = ab.read_junctions(frame, mapping)
    assert table.covariate_names == ["generation"]
    np.testing.assert_array_equal(covariate_values(table, "generation"), frame["generation"].to_numpy())
    bad = frame.astype({"generation": object})
    bad.loc[2, "generation"] = "n/a"
    with pytest.raises(InputError) as info:
        ab.read_junctions(bad, mapping)
    assert "generation" in str(info.value) and "row 4" in str(info.value)
    with pytest.raises(InputError, match="was not read with the table"):
        covariate_values(table, "order")


def test_log_parent_size_is_log10_of_the_daughters_power_sum() -> None:
    # Exact algebra: two daughters of radius 1 mm give (2 * 1^2.5)^(1/2.5) = 2^0.4 mm; in um as diameters
    # the same junction is 2000 um wide, so the covariate shifts by log10(2000).
    frame = pd.DataFrame({"p": [1.4, 3.0], "d1": [1.0, 2.0], "d2": [1.0, 1.5]})
    mm = ab.read_junctions(frame, parent="p", daughters=["d1", "d2"], unit="mm")
    np.testing.assert_allclose(covariate_values(mm, LOG_PARENT_SIZE)[0], 0.4 * np.log10(2.0))
    um = ab.read_junctions(frame * 2000, parent="p", daughters=["d1", "d2"], unit="um", measure="diameter")
    np.testing.assert_allclose(
        covariate_values(um, LOG_PARENT_SIZE), covariate_values(mm, LOG_PARENT_SIZE) + np.log10(2000)
    )


def test_linear_terms_centre_covariates_at_their_reference(table, tmp_path) -> None:
    t = attach_tree(table, _write(tmp_path, NEWICK))
    data = model_data(t)
    spec = ab.ModelSpec(covariates=(LOG_PARENT_SIZE,), covariate_ref={LOG_PARENT_SIZE: 0.0})
    lin = build_linear_terms(t, data, spec)
    np.testing.assert_allclose(lin.covariates[:, 0], covariate_values(t, LOG_PARENT_SIZE))
    assert lin.phylo and lin.eig_vectors.shape == (4, 4)
    assert build_linear_terms(table, model_data(table), ab.ModelSpec()) is None
