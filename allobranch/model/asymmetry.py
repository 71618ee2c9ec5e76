"""Empirical estimate of the daughters' asymmetry scale (maximum marginal likelihood)."""

from __future__ import annotations

import numpy as np
from scipy.optimize import minimize_scalar

from allobranch.model.data import ModelData
from allobranch.model.kernel import daughter_loglik

#: Search range of the asymmetry scale (log-radius SD): from near-perfect symmetry to extreme asymmetry.
SIGMA_ASYM_BOUNDS = (1e-3, 3.0)


def estimate_sigma_asym(data: ModelData, rel_error: float) -> np.ndarray:
    """Maximum marginal-likelihood asymmetry scale for every taxon.

    The daughters' contrasts (their log radii about the junction mean) are normal with variance
    ``sigma_asym^2 + s_i^2`` in the model, independent of the exponent, so the scale can be estimated
    from the daughters alone (scipy's bounded scalar minimiser on the log scale).

    Parameters
    ----------
    data : ModelData
    rel_error : float
        Relative measurement error (log-scale SD) of the readings.

    Returns
    -------
    ndarray, shape (n_taxa,)
    """
    out = np.empty(len(data.taxa))
    lo, hi = np.log(SIGMA_ASYM_BOUNDS[0]), np.log(SIGMA_ASYM_BOUNDS[1])
    for t in range(len(data.taxa)):
        rows = data.taxon_idx == t
        Y, M, V = data.log_daughters[rows], data.mask[rows], data.var_abs_daughters[rows]

        def negll(log_s: float, Y=Y, M=M, V=V) -> float:
            return -daughter_loglik(Y, M, V, rel_error, float(np.exp(log_s)))

        res = minimize_scalar(negll, bounds=(lo, hi), method="bounded", options={"xatol": 1e-6})
        out[t] = float(np.exp(res.x))
    return out
