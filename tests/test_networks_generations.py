"""Generation tables: per-step and fitted exponents, checked on exact algebra and a published airway model.

The airway table is Weibel's regular dichotomy model of the adult human lung (Weibel 1963, Morphometry
of the Human Lung), kept in ``tests/data/airway_generations.csv`` with its source note (values written from
memory); ``tests/test_outside_references.py`` reads the same file.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from allobranch.errors import InputError
from allobranch.networks import AVERAGED_CAVEAT, generation_exponents

AIRWAYS = pd.read_csv(Path(__file__).parent / "data" / "airway_generations.csv", comment="#")


def test_regular_dichotomy_with_cube_law_ratio_gives_three():
    # Exact algebra: d_g = d_0 2^(-g/3) gives d_g^3 = 2 d_{g+1}^3 at every step (Murray's law for a symmetric
    # dichotomy), so every step and the fit give a = 3.
    table = pd.DataFrame({"generation": range(8), "diameter": 2.0 * 2.0 ** (-np.arange(8) / 3)})
    res = generation_exponents(table)
    np.testing.assert_allclose(res.steps["exponent"], 3.0, rtol=1e-12)
    assert res.fit["exponent"] == pytest.approx(3.0, rel=1e-12)
    assert res.fit["r_squared"] == pytest.approx(1.0)
    assert res.caveat == AVERAGED_CAVEAT and "already averaged" in res.caveat


def test_branching_factor_enters_the_exponent():
    # Exact algebra: a trifurcation with d_{g+1} / d_g = 3^(-1/2) obeys d^2 = 3 d'^2 (area preserving, a = 2);
    # followed by a dichotomy with ratio 2^(-1/2) (also a = 2).
    table = pd.DataFrame({"g": [0, 1, 2], "d": [1.0, 3**-0.5, 3**-0.5 * 2**-0.5], "n": [3, 2, 2]})
    res = generation_exponents(table, generation="g", size="d", branching="n")
    np.testing.assert_allclose(res.steps["exponent"], [2.0, 2.0], rtol=1e-12)
    assert res.fit["exponent"] == pytest.approx(2.0, rel=1e-12)


def test_weibel_airway_steps_give_the_stated_exponents():
    res = generation_exponents(AIRWAYS, size="diameter_cm")
    d = AIRWAYS["diameter_cm"].to_numpy()
    # Exact algebra for a symmetric dichotomy: d_g^a = 2 d_{g+1}^a, i.e. a = ln 2 / ln(d_g / d_{g+1}) (numpy):
    ok = d[1:] < d[:-1]
    implied = np.log(2.0) / np.log(d[:-1][ok] / d[1:][ok])
    np.testing.assert_allclose(res.steps["exponent"][ok], implied, rtol=1e-12)
    # Stated values (4 decimals): the trachea and main bronchi (steps 0->1, 1->2, 2->3) about 1.78-1.80, near
    # area preservation; steps 7->8 and 9->10 at 3.2644 and 4.0913, above the cube law; in the respiratory zone
    # (17->18 .. 21->22) the diameters barely fall, so the implied exponents exceed 9.
    np.testing.assert_allclose(res.steps["exponent"][[0, 1, 2]], [1.7822, 1.7995, 1.7615], atol=5e-5)
    np.testing.assert_allclose(res.steps["exponent"][[7, 9]], [3.2644, 4.0913], atol=5e-5)
    assert (res.steps["exponent"][17:22] > 9).all()
    # generations 22 and 23 share the diameter 0.041 cm: no exponent balances that step
    last = res.steps.iloc[-1]
    assert np.isnan(last["exponent"]) and last["no_exponent_reason"] == "size_does_not_fall"


def test_weibel_conducting_zone_fit_is_near_the_cube_law():
    res = generation_exponents(AIRWAYS, size="diameter_cm", first=0, last=16)
    g = AIRWAYS["generation"].to_numpy()[:17]
    d = AIRWAYS["diameter_cm"].to_numpy()[:17]
    # The fit is least squares of ln d on g ln 2 (scipy reference): a = -1 / slope
    ref = stats.linregress(g * np.log(2.0), np.log(d))
    assert res.fit["exponent"] == pytest.approx(-1.0 / ref.slope, rel=1e-12)
    assert res.fit["n_generations"] == 17 and (res.fit["first"], res.fit["last"]) == (0, 16)
    # Weibel described the conducting airways (generations 0-16) by d_z = d_0 2^(-z/3), the cube law (from
    # memory); the tabulated means give 3.39 +- 0.17, within 0.5 of it.
    assert res.fit["exponent"] == pytest.approx(3.39, abs=0.01)
    assert abs(res.fit["exponent"] - 3.0) < 0.5
    assert res.fit["exponent_se"] == pytest.approx(ref.stderr / ref.slope**2, rel=1e-12)  # delta method


def test_bad_tables_are_refused_with_rows():
    gap = AIRWAYS.drop(index=3)
    with pytest.raises(
        InputError, match=r"row 5, column 'generation': generations 2 and 4 are not consecutive"
    ):
        generation_exponents(gap, size="diameter_cm")
    twice = pd.concat([AIRWAYS.iloc[:3], AIRWAYS.iloc[[1]]], ignore_index=True)
    with pytest.raises(InputError, match=r"row 5, column 'generation': generation 1 appears twice"):
        generation_exponents(twice, size="diameter_cm")
    text = AIRWAYS.astype({"generation": object})
    text.loc[2, "generation"] = "2b"
    with pytest.raises(InputError, match=r"row 4, column 'generation': '2b' is not a generation number"):
        generation_exponents(text, size="diameter_cm")
    with pytest.raises(InputError, match="fit range 5..5"):
        generation_exponents(AIRWAYS, size="diameter_cm", first=5, last=5)
