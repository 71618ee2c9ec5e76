"""Per-junction exponents, size ratios and naive summaries."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from allobranch.geometry import NAIVE_NOTE, junction_geometry, naive_summary, solve_exponent
from allobranch.geometry.exponent import GEOMETRY_COLUMNS
from allobranch.intake import read_junctions


def _table(parent, daughters, taxon=None):
    cols = {"p": parent}
    cols.update({f"d{k + 1}": col for k, col in enumerate(np.asarray(daughters, dtype=float).T)})
    if taxon is not None:
        cols["t"] = taxon
    df = pd.DataFrame(cols)
    names = [c for c in df.columns if c.startswith("d")]
    return read_junctions(df, parent="p", daughters=names, taxon="t" if taxon is not None else None)


@pytest.mark.parametrize("a", [3.0, 2.0, 1.5])
def test_symmetric_bifurcation_recovers_exponent(a):
    # exact algebra: two daughters of ratio 2^(-1/a) satisfy 2 * (2^(-1/a))^a = 1
    ratio = 2.0 ** (-1.0 / a)
    exponent, reason = solve_exponent(np.array([1.0]), np.array([[ratio, ratio]]))
    assert exponent[0] == pytest.approx(a, rel=1e-10)
    assert reason[0] is None


@pytest.mark.parametrize("a, ratio", [(3.0, 0.7937), (2.0, 0.7071), (1.5, 0.6300)])
def test_symmetric_ratio_check_values(a, ratio):
    # exact algebra: 2^(-1/a) rounded to 4 decimals, so the root is only accurate to about 1e-3 relative
    exponent, _ = solve_exponent(np.array([1.0]), np.array([[ratio, ratio]]))
    assert exponent[0] == pytest.approx(a, rel=2e-3)


@pytest.mark.parametrize("a", [3.0, 2.0, 1.5])
def test_area_ratio_symmetric_bifurcation(a):
    # exact algebra: 2 * (2^(-1/a))^2 = 2^(1 - 2/a)
    ratio = 2.0 ** (-1.0 / a)
    geo = junction_geometry(_table([5.0], [[5 * ratio, 5 * ratio]]))
    assert geo["area_ratio"].iloc[0] == pytest.approx(2.0 ** (1 - 2 / a), rel=1e-12)
    assert geo["exponent"].iloc[0] == pytest.approx(a, rel=1e-10)


@pytest.mark.parametrize("a", [3.0, 2.0, 1.5])
def test_symmetric_trifurcation(a):
    # exact algebra: three daughters of ratio 3^(-1/a) satisfy 3 * (3^(-1/a))^a = 1
    ratio = 3.0 ** (-1.0 / a)
    exponent, _ = solve_exponent(np.array([2.0]), np.array([[2 * ratio] * 3]))
    assert exponent[0] == pytest.approx(a, rel=1e-10)


@settings(max_examples=100, deadline=None)
@given(
    a=st.floats(1.0, 4.0),
    radii=st.lists(st.floats(0.05, 5.0), min_size=2, max_size=4),
)
def test_property_exponent_recovered(a, radii):
    # exact algebra: r0 = (sum r_i^a)^(1/a) makes a the root of sum (r_i/r0)^a = 1
    r = np.array(radii)
    r0 = np.sum(r**a) ** (1 / a)
    padded = np.full((1, 4), np.nan)
    padded[0, : r.size] = r
    exponent, reason = solve_exponent(np.array([r0]), padded)
    assert reason[0] is None
    assert exponent[0] == pytest.approx(a, rel=1e-8)


def test_roots_match_brentq():
    # reference library: scipy.optimize.brentq on sum (r_i/r0)^a - 1 for asymmetric junctions
    rng = np.random.default_rng(1)
    parent = rng.uniform(1.0, 2.0, size=8)
    daughters = parent[:, None] * rng.uniform(0.3, 0.9, size=(8, 3))
    daughters[:4, 2] = np.nan
    exponent, _ = solve_exponent(parent, daughters)
    for p, d, got in zip(parent, daughters, exponent, strict=True):
        ratios = d[~np.isnan(d)] / p
        want = brentq(lambda x, q=ratios: np.sum(q**x) - 1.0, 0.05, 100.0, xtol=1e-14)
        assert got == pytest.approx(want, rel=1e-9)


def test_no_root_reasons():
    # exact algebra: a daughter >= parent leaves sum (r_i/r0)^a > 1 for every a > 0; two daughters of ratio
    # 0.995 need a > 100 (2 * 0.995^100 = 1.21 > 1); a lone daughter cannot define a junction.
    parent = np.array([1.0, 1.0, 1.0, 1.0, -1.0])
    daughters = np.array([[1.0, 0.5], [1.2, 0.5], [0.995, 0.995], [0.5, np.nan], [0.5, 0.5]])
    exponent, reason = solve_exponent(parent, daughters)
    assert np.isnan(exponent).all()
    assert list(reason) == [
        "daughter_ge_parent",
        "daughter_ge_parent",
        "exponent_above_100",
        "fewer_than_two_daughters",
        "invalid_sizes",
    ]


def test_exponent_below_range():
    # exact algebra: 2 * (1e-9)^0.05 = 2 * 10^(-0.45) < 1, so the root lies below the search range
    exponent, reason = solve_exponent(np.array([1.0]), np.array([[1e-9, 1e-9]]))
    assert np.isnan(exponent[0]) and reason[0] == "exponent_below_0.05"


def test_solve_exponent_rejects_bad_shapes():
    with pytest.raises(ValueError, match="shape"):
        solve_exponent(np.ones(3), np.ones((2, 2)))


def test_junction_geometry_ratios():
    # exact algebra on a 10 / (8, 5, 2) junction and a 10 / (11, 4) junction
    geo = junction_geometry(_table([10.0, 10.0], [[8.0, 5.0, 2.0], [11.0, 4.0, np.nan]]))
    assert tuple(geo.columns) == GEOMETRY_COLUMNS
    first, second = geo.iloc[0], geo.iloc[1]
    assert first["ratio_large"] == pytest.approx(0.8)
    assert first["ratio_small"] == pytest.approx(0.2)
    assert first["asymmetry"] == pytest.approx(0.25)
    assert first["area_ratio"] == pytest.approx((64 + 25 + 4) / 100)
    assert first["n_daughters"] == 3
    assert pd.isna(first["no_root_reason"])
    assert np.isnan(second["exponent"]) and second["no_root_reason"] == "daughter_ge_parent"
    assert second["area_ratio"] == pytest.approx((121 + 16) / 100)


def test_naive_summary_matches_numpy():
    # reference library: numpy median/percentile/mean of the roots that exist, per taxon
    a_values = np.array([1.5, 2.0, 2.5, 3.0, 3.5])
    ratios = 2.0 ** (-1.0 / a_values)
    parent = np.ones(7)
    daughters = np.vstack([np.c_[ratios, ratios], [[1.1, 0.5]], [[0.8, 0.8]]])
    taxon = ["A"] * 6 + ["B"]
    geo = junction_geometry(_table(parent, daughters, taxon))
    summary = naive_summary(geo)
    row_a = summary.set_index("taxon").loc["A"]
    assert row_a["n_junctions"] == 6 and row_a["n_no_root"] == 1
    assert row_a["share_no_root"] == pytest.approx(1 / 6)
    assert row_a["median"] == pytest.approx(np.median(a_values))
    assert row_a["q25"] == pytest.approx(np.percentile(a_values, 25))
    assert row_a["q75"] == pytest.approx(np.percentile(a_values, 75))
    assert row_a["mean"] == pytest.approx(np.mean(a_values))
    assert summary.attrs["note"] == NAIVE_NOTE
    assert "measurement error" in NAIVE_NOTE
    assert (summary["method"] == "naive_per_junction").all()


def test_naive_summary_by_specimen_and_bad_grouping():
    geo = junction_geometry(_table([1.0, 1.0], [[0.8, 0.7], [0.8, 0.6]], ["A", "B"]))
    by_specimen = naive_summary(geo, by=("taxon", "specimen"))
    assert list(by_specimen.columns[:2]) == ["taxon", "specimen"] and len(by_specimen) == 2
    rows = by_specimen.set_index("taxon")
    # exact algebra: 0.8^2 + 0.6^2 = 1, so the second junction's exponent is 2; the first is the root of
    # 0.8^a + 0.7^a = 1 (reference: scipy.optimize.brentq)
    assert rows.loc["B", "median"] == pytest.approx(2.0, rel=1e-10)
    want = brentq(lambda x: 0.8**x + 0.7**x - 1.0, 0.05, 100.0, xtol=1e-14)
    assert rows.loc["A", "median"] == pytest.approx(want, rel=1e-9)
    assert (rows["n_junctions"] == 1).all() and (rows["n_no_root"] == 0).all()
    with pytest.raises(ValueError, match="taxon"):
        naive_summary(geo, by=("junction",))
