"""Posterior predictive checks that can fail: the law's residual and the daughters' split.

Checking the parent's size alone passes for almost any exponent, because the parent's size is mostly
predicted by the daughters' size whatever the exponent. These checks look at what the law adds:

* **law residual** -- observed log parent minus the law's prediction ``logsumexp(a * log daughters) / a``
  from the observed daughters, at each posterior draw of the junction's (specimen) exponent ``a``;
* **split** -- the smaller-to-larger daughter radius ratio of each junction (smallest to largest when a
  junction has more daughters).

Replicated data are drawn from the model's own assumptions (see :mod:`allobranch.model.build`) at each
posterior draw: true log daughters about the junction's observed mean log daughter with the asymmetry
scale ``sigma_asym`` (as contrasts: flat along the common level), readings with the measurement error, the
true parent from the law plus the biological deviation ``sigma_dev`` (normal or Student-t), and its reading
with the measurement error. Both checks are unchanged by a common shift of a junction's log radii, so the
level the replicate is drawn at does not matter.

A check fails when the observed statistic lies in a tail of the replicated ones: posterior predictive
p-values (share of draws whose replicated statistic is at least the observed one) near 0 or 1.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.special import logsumexp

from allobranch.model.data import model_data
from allobranch.model.kernel import S2_FLOOR
from allobranch.model.linear import build_linear_terms, junction_exponents_at

#: The checks, in the order they are reported, with a label for tables and axes.
CHECKS: dict[str, str] = {
    "law_residual": "law residual (log parent minus the law's prediction)",
    "split": "smaller / larger daughter radius",
}
#: Columns of :func:`ppc_checks`.
CHECK_COLUMNS: tuple[str, ...] = ("check", "taxon", "junction", "source", "draw", "value")
#: Sources of a value: the data or a replicate drawn from the model.
SOURCES: tuple[str, ...] = ("observed", "replicated")
#: Posterior draws used by default (evenly spaced over all chains).
PPC_DRAWS = 50
#: Statistics compared per check and taxon: ``corr_split`` is the correlation of the law residual with the
#: log split ratio (zero on average when the exponent and the law fit every kind of junction).
STATISTICS: dict[str, tuple[str, ...]] = {
    "law_residual": ("mean", "sd", "corr_split"),
    "split": ("mean", "sd"),
}
#: A check is marked as failing when its p-value is below this or above one minus this (two-sided 5 %;
#: common practice for posterior predictive p-values, no single source).
PPP_TAIL = 0.025


def _draw_index(n_chain: int, n_draw: int, n_draws: int) -> list[tuple[int, int]]:
    """``(chain, draw)`` pairs evenly spaced over all chains' draws."""
    total = n_chain * n_draw
    flat = np.unique(np.linspace(0, total - 1, min(int(n_draws), total)).astype(int))
    return [(int(i // n_draw), int(i % n_draw)) for i in flat]


def _asymmetry_scale(result, post, c: int, d: int, taxon_idx: np.ndarray, taxa: list[str]) -> np.ndarray:
    """The asymmetry scale of every junction at one draw: sampled, or the empirical per-taxon value."""
    if "sigma_asym" in post:
        return np.full(taxon_idx.shape, float(post["sigma_asym"].values[c, d]))
    empirical = result.settings.get("sigma_asym_empirical") or {}
    missing = [t for t in taxa if t not in empirical]
    if missing:
        raise ValueError(
            f"the fit records no asymmetry scale for taxa {missing} (neither sampled nor empirical)"
        )
    return np.array([float(empirical[t]) for t in taxa])[taxon_idx]


def _law(log_daughters: np.ndarray, mask: np.ndarray, a: np.ndarray) -> np.ndarray:
    """The law's log parent ``logsumexp(a * log daughters) / a`` over the daughters present."""
    terms = np.where(mask, a[:, None] * log_daughters, -np.inf)
    return logsumexp(terms, axis=1) / a


def _split(log_daughters: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Smallest over largest daughter radius of each junction."""
    lo = np.where(mask, log_daughters, np.inf).min(axis=1)
    hi = np.where(mask, log_daughters, -np.inf).max(axis=1)
    return np.exp(lo - hi)


def _replicate(data, a, sdev, rel_error, sasym, nu, rng) -> tuple[np.ndarray, np.ndarray]:
    """One replicated data set (log parent, log daughters) drawn from the model at one posterior draw."""
    mask = data.mask
    k = mask.sum(axis=1)
    ybar = np.where(mask, data.log_daughters, 0.0).sum(axis=1) / k
    dev = np.where(mask, sasym[:, None] * rng.standard_normal(mask.shape), 0.0)
    true_d = ybar[:, None] + dev - (dev.sum(axis=1) / k)[:, None]  # contrasts: flat along the common level
    s_d = np.sqrt(rel_error**2 + np.maximum(data.var_abs_daughters, 0.0) + S2_FLOOR)
    log_d = np.where(mask, true_d + s_d * rng.standard_normal(mask.shape), 0.0)
    shock = rng.standard_t(nu, size=k.shape) if nu is not None else rng.standard_normal(k.shape)
    true_p = _law(true_d, mask, a) + sdev * shock
    s_p = np.sqrt(rel_error**2 + np.maximum(data.var_abs_parent, 0.0) + S2_FLOOR)
    return true_p + s_p * rng.standard_normal(k.shape), log_d


def ppc_checks(result, n_draws: int = PPC_DRAWS, seed: int = 0) -> pd.DataFrame:
    """Observed and replicated values of the law-residual and split checks, long format.

    Parameters
    ----------
    result : FitResult
        A fit with a ``posterior`` holding ``a_specimen`` and ``sigma_dev`` (and ``rel_error``,
        ``sigma_asym``, ``nu`` when the model samples them).
    n_draws : int, default :data:`PPC_DRAWS`
        Posterior draws used, evenly spaced over all chains; one replicated data set per draw.
    seed : int, default 0
        Seed of the replicates; the same seed gives the same table.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`CHECK_COLUMNS`. ``check`` is a key of :data:`CHECKS`; ``draw`` numbers the posterior
        draws used (0, 1, ...). Observed law residuals depend on the draw's exponent and have one row per
        draw; observed splits do not and have ``draw = -1``. ``attrs["n_draws"]`` holds the number of draws.

    Examples
    --------
    >>> checks = ppc_checks(result, seed=1)                                   # doctest: +SKIP
    >>> ppc_pvalues(checks)
    """
    if int(n_draws) < 1:
        raise ValueError(f"n_draws must be at least 1; got {n_draws!r}")
    data = model_data(result.table)
    post = result.idata.posterior
    rng = np.random.default_rng(seed)
    taxa = [str(t) for t in data.taxa]
    taxon = np.asarray(taxa, dtype=object)[data.taxon_idx]
    junction = np.asarray(data.junctions, dtype=object)
    student = result.spec.deviation == "student_t"
    known = float(data.rel_error or 0.0)
    frames = [_frame("split", taxon, junction, "observed", -1, _split(data.log_daughters, data.mask))]
    pairs = _draw_index(post.sizes["chain"], post.sizes["draw"], n_draws)
    lin = build_linear_terms(result.table, data, result.spec)
    X = lin.covariates if lin is not None else None
    for k, (c, d) in enumerate(pairs):
        a = junction_exponents_at(post, c, d, data.specimen_idx, data.taxon_idx, X)
        rel_error = float(post["rel_error"].values[c, d]) if "rel_error" in post else known
        nu = float(post["nu"].values[c, d]) if student and "nu" in post else (30.0 if student else None)
        sasym = _asymmetry_scale(result, post, c, d, data.taxon_idx, taxa)
        rep_p, rep_d = _replicate(data, a, float(post["sigma_dev"].values[c, d]), rel_error, sasym, nu, rng)
        frames += [
            _frame(
                "law_residual",
                taxon,
                junction,
                "observed",
                k,
                data.log_parent - _law(data.log_daughters, data.mask, a),
            ),
            _frame("law_residual", taxon, junction, "replicated", k, rep_p - _law(rep_d, data.mask, a)),
            _frame("split", taxon, junction, "replicated", k, _split(rep_d, data.mask)),
        ]
    out = pd.concat(frames, ignore_index=True)
    out.attrs["n_draws"] = len(pairs)
    return out


def _frame(check: str, taxon, junction, source: str, draw: int, values: np.ndarray) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "check": check,
            "taxon": taxon,
            "junction": junction,
            "source": source,
            "draw": draw,
            "value": values,
        }
    )


def _statistics(values: pd.DataFrame) -> pd.DataFrame:
    """Mean and SD of ``value`` per (check, taxon, source, draw)."""
    grouped = values.groupby(["check", "taxon", "source", "draw"], sort=False)["value"]
    stats = grouped.agg(mean="mean", sd="std").reset_index()
    return stats.melt(id_vars=["check", "taxon", "source", "draw"], var_name="statistic", value_name="stat")


def _split_correlations(checks: pd.DataFrame) -> pd.DataFrame:
    """Correlation of the law residual with the log split ratio per (taxon, source, draw)."""
    resid = checks[checks["check"] == "law_residual"]
    split = checks[checks["check"] == "split"]
    observed_split = split[split["source"] == "observed"].set_index("junction")["value"]
    rows = []
    for (taxon, source, draw), group in resid.groupby(["taxon", "source", "draw"], sort=False):
        if source == "observed":
            ratio = observed_split.reindex(group["junction"]).to_numpy()
        else:
            rep = split[(split["source"] == source) & (split["draw"] == draw)].set_index("junction")["value"]
            ratio = rep.reindex(group["junction"]).to_numpy()
        x, y = np.log(ratio), group["value"].to_numpy()
        r = np.corrcoef(x, y)[0, 1] if len(x) > 2 and np.ptp(x) > 0 and np.ptp(y) > 0 else np.nan
        rows.append(
            {
                "check": "law_residual",
                "taxon": taxon,
                "source": source,
                "draw": draw,
                "statistic": "corr_split",
                "stat": r,
            }
        )
    return pd.DataFrame(rows, columns=["check", "taxon", "source", "draw", "statistic", "stat"])


def ppc_pvalues(checks: pd.DataFrame) -> pd.DataFrame:
    """Posterior predictive p-values of the checks' statistics, per check and taxon.

    Parameters
    ----------
    checks : pandas.DataFrame
        Output of :func:`ppc_checks`.

    Returns
    -------
    pandas.DataFrame
        Columns ``check``, ``taxon``, ``statistic`` (see :data:`STATISTICS`), ``observed`` (the observed
        statistic, averaged over draws where it depends on the draw), ``replicated`` (mean of the replicated
        statistic), ``p_value`` (share of draws whose replicated statistic is at least the observed one at
        the same draw), ``fails`` (p-value outside ``[PPP_TAIL, 1 - PPP_TAIL]``) and ``n_draws``.
    """
    stats = pd.concat([_statistics(checks), _split_correlations(checks)], ignore_index=True)
    stats = stats[[s in STATISTICS.get(c, ()) for c, s in zip(stats["check"], stats["statistic"])]]
    rows = []
    order = {c: i for i, c in enumerate(CHECKS)}
    for (check, taxon, statistic), group in stats.groupby(["check", "taxon", "statistic"], sort=False):
        rep = group[group["source"] == "replicated"].set_index("draw")["stat"]
        obs = group[group["source"] == "observed"].set_index("draw")["stat"]
        observed = (
            obs.reindex(rep.index) if (obs.index >= 0).all() else pd.Series(float(obs.iloc[0]), rep.index)
        )
        valid = rep.notna() & observed.notna()
        p = float((rep[valid] >= observed[valid]).mean()) if valid.any() else np.nan
        rows.append(
            {
                "check": check,
                "taxon": taxon,
                "statistic": statistic,
                "observed": float(observed.mean()),
                "replicated": float(rep.mean()),
                "p_value": p,
                "fails": bool(np.isfinite(p) and (p < PPP_TAIL or p > 1 - PPP_TAIL)),
                "n_draws": int(valid.sum()),
            }
        )
    out = pd.DataFrame(
        rows, columns=["check", "taxon", "statistic", "observed", "replicated", "p_value", "fails", "n_draws"]
    )
    taxa = {t: i for i, t in enumerate(dict.fromkeys(checks["taxon"]))}
    stat_order = {s: i for s, i in zip(("mean", "sd", "corr_split"), range(3))}
    keys = [
        (order.get(c, len(order)), taxa[t], stat_order[s])
        for c, t, s in zip(out["check"], out["taxon"], out["statistic"])
    ]
    return out.iloc[sorted(range(len(out)), key=keys.__getitem__)].reset_index(drop=True)


def ppc_warnings(pvalues: pd.DataFrame) -> list[str]:
    """One warning per failing check and taxon, naming the statistics outside the replicated range.

    Parameters
    ----------
    pvalues : pandas.DataFrame
        Output of :func:`ppc_pvalues`.

    Returns
    -------
    list of str
    """
    out = []
    failing = pvalues[pvalues["fails"]]
    for (check, taxon), group in failing.groupby(["check", "taxon"], sort=False):
        stats = ", ".join(
            f"{s} (observed {o:.3g}, replicated {r:.3g}, p = {p:.2f})"
            for s, o, r, p in group[["statistic", "observed", "replicated", "p_value"]].itertuples(
                index=False
            )
        )
        out.append(
            f"posterior predictive check of the {CHECKS[check]} fails in taxon {taxon}: {stats}. The "
            "model does not reproduce this feature of the data; read the exponent with care."
        )
    return out
