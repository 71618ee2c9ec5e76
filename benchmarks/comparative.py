"""Comparative terms of the exponent on simulated data: a size-dependent exponent and taxa related by a tree.

Study 1, slope. Tables from :func:`allobranch.simulate_junctions` whose exponent falls with the parent's
size (``exponent_slope`` = -0.35 per tenfold larger parent; population exponent 2.65 at 0.3 mm, so about
3.0 at the smallest parents of 0.03 mm and 2.3 at the largest of 3 mm), 3 taxa x 3 specimens x 60
junctions, 5 % relative error. Each replicate is fitted with the covariate ``log_parent_size`` (the parent's
size from its daughters) referenced at 0.3 mm, and tested against the constant-exponent model by
:func:`allobranch.comparison.slopes.compare_covariates` (PSIS-LOO with and without, Savage-Dickey at 0,
verdict). Reported: 90 % HDI coverage of the true slope, mean posterior mean, mean z and |z|, how often LOO
prefers the slope, and the same slope fitted with ``log_parent_reading`` (the parent's own reading, which
carries its measurement error) at 5 % and 10 % error beside ``log_parent_size``.

A reference, without fitting: ``log_parent_size`` is computed from the daughters with the power 2.5, not
from the true parent, so even error-free radii put the truth on a slightly different scale. An ordinary
least-squares fit of every junction's true exponent on the covariate of its error-free daughters (a large
table) gives the slope and reference shift the covariate itself implies.

Study 2, phylogeny. 16 taxa on a balanced ultrametric tree (four levels of branches of length 0.25), taxon
exponents drawn from ``MVN(mu, tau^2 (lambda C + (1 - lambda) I))`` with ``C`` the tree's shared-path
matrix at unit diagonal (:meth:`allobranch.comparative.Phylogeny.correlation`), ``mu`` = 2.5, ``tau`` = 0.3,
``lambda`` = 0 and 1, 2 specimens x 30 junctions per taxon. Each table is fitted with the tree attached
(Pagel's lambda estimated) and without it (``ModelSpec(phylogeny=False)``). Reported: lambda's posterior
mean and 90 % HDI per case, and the 90 % HDI coverage of the population exponent's truth (the MVN's mean
``mu``, not the mean of the drawn taxon exponents) with and without the tree. Beside them an oracle: the
exact posterior (on a grid) of the model's taxon level with the taxon exponents known, which shows what
16 taxa can tell about lambda and mu at all.

Usage::

    python benchmarks/comparative.py            # 20 slope + 2 x 30 tree replicates (about 35-45 min on 2 cores)
    python benchmarks/comparative.py --quick    # 1 replicate each, short chains, nothing written (1-2 min)
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
from scipy.stats import beta as beta_dist

import allobranch as ab
from allobranch.comparative import attach_tree, read_tree
from allobranch.comparison.slopes import compare_covariates

RESULTS = Path(__file__).resolve().parent / "results"
HDI_PROB = 0.9
SIZE, READING = "log_parent_size", "log_parent_reading"

# Study 1: a size-dependent exponent.
SLOPE = -0.35
REFERENCE_MM = 0.3
SLOPE_DESIGN = dict(
    taxa=3,
    specimens_per_taxon=3,
    junctions_per_specimen=60,
    mu=2.65,
    tau_taxon=0.2,
    tau_specimen=0.05,
    parent_range=(0.03, 3.0),
    exponent_slope=SLOPE,
    slope_reference=REFERENCE_MM,
)

# Study 2: taxa on a tree.
TREE_LEVELS = 4  # 2**4 = 16 tips
BRANCH = 0.25  # every branch; root-to-tip 1.0
PHYLO_MU, PHYLO_TAU = 2.5, 0.3
LAMBDAS = (0.0, 1.0)
#: The models each phylogeny table is fitted with: label -> ModelSpec fields.
PHYLO_MODELS: dict[str, dict] = {
    "tree": {},
    "tree, lambda = 1": {"pagel_lambda": 1.0},
    "no tree": {"phylogeny": False},
}
PHYLO_DESIGN = dict(specimens_per_taxon=2, junctions_per_specimen=30, tau_specimen=0.05, rel_error=0.05)


def _interval(draws: np.ndarray, truth: float | None = None) -> dict:
    """Mean, SD, 90 % HDI (ArviZ) of draws, and the truth's position in them."""
    draws = np.asarray(draws).ravel()
    lo, hi = az.hdi(draws, hdi_prob=HDI_PROB)
    out = {
        "mean": float(draws.mean()),
        "sd": float(draws.std(ddof=1)),
        "hdi_low": float(lo),
        "hdi_high": float(hi),
    }
    if truth is not None:
        out["z"] = (out["mean"] - truth) / out["sd"]
        out["covered"] = bool(lo <= truth <= hi)
    return out


def _diagnostics(result) -> dict:
    kept = next(a for a in result.settings["attempts"] if a["kept"])
    r_hat = az.rhat(result.idata.posterior)
    worst = max(r_hat.data_vars, key=lambda v: float(r_hat[v].max()))
    return {
        "attempts": len(result.settings["attempts"]),
        "divergences": int(kept["divergences"]),
        "max_r_hat": float(kept["max_r_hat"]),
        "worst_r_hat_variable": str(worst),
    }


# ----------------------------------------------------------------------------------------------- study 1


def covariate_scale_truth(seed: int = 0, junctions: int = 3000) -> dict:
    """Slope and reference shift that ``log_parent_size`` implies on error-free radii (least squares).

    Every junction's true exponent is its specimen's exponent plus ``SLOPE * log10(r / REFERENCE_MM)`` with
    ``r`` the true parent (no biological deviation here, so ``r`` is the simulator's nominal parent); it is
    regressed on ``log10((sum d^2.5)^(1/2.5)) - log10(REFERENCE_MM)`` of the true daughters (numpy lstsq).
    """
    sim = ab.simulate_junctions(
        **{**SLOPE_DESIGN, "taxa": 1, "specimens_per_taxon": 1, "junctions_per_specimen": junctions},
        sigma_dev=0.0,
        rel_error=0.01,
        seed=seed,
    )
    true = sim.true_radii
    a_spec = true["specimen"].map(sim.truth["a_specimen"]).to_numpy()
    a_j = a_spec + SLOPE * np.log10(true["parent"].to_numpy() / REFERENCE_MM)
    d = true[["d1", "d2"]].to_numpy()
    x = np.log10(np.sum(d**2.5, axis=1) ** (1 / 2.5)) - np.log10(REFERENCE_MM)
    design = np.column_stack([x, np.ones_like(x)])
    (slope, shift), *_ = np.linalg.lstsq(design, a_j - a_spec, rcond=None)
    return {"slope": float(slope), "shift": float(shift), "junctions": junctions}


def slope_fit(table, covariate: str, seed: int, draws: int, loo: bool) -> dict:
    """Fit one covariate's slope; with ``loo`` also the constant-exponent comparison."""
    spec = ab.ModelSpec(covariates=(covariate,), covariate_ref={covariate: np.log10(REFERENCE_MM)})
    started = time.perf_counter()
    result = ab.fit(table, spec, draws=draws, tune=draws, seed=seed, progress=False)
    wall = time.perf_counter() - started
    post = result.idata.posterior
    row = {
        **{f"slope_{k}": v for k, v in _interval(post["beta"].values[..., 0], SLOPE).items()},
        **{f"mu_{k}": v for k, v in _interval(post["mu"].values, SLOPE_DESIGN["mu"]).items()},
        **_diagnostics(result),
        "seconds": round(wall, 1),
    }
    if loo:
        started = time.perf_counter()
        test = compare_covariates(result, seed=seed, draws=draws, tune=draws).iloc[0]
        row |= {
            "elpd_gain": float(test["elpd_gain"]),
            "elpd_gain_se": float(test["elpd_gain_se"]),
            "log10_bf_zero": float(test["log10_bf_zero"]),
            "verdict": str(test["verdict"]),
            "seconds_loo": round(time.perf_counter() - started, 1),
        }
    return row


def run_slope(seed: int, draws: int) -> list[dict]:
    """One replicate: 5 % error (size with LOO, reading) and 10 % error (size, reading)."""
    rows = []
    for rel_error in (0.05, 0.10):
        sim = ab.simulate_junctions(**SLOPE_DESIGN, rel_error=rel_error, seed=seed)
        table = ab.read_junctions(sim.frame, sim.mapping)
        for covariate in (SIZE, READING):
            loo = rel_error == 0.05 and covariate == SIZE
            row = slope_fit(table, covariate, seed, draws, loo)
            rows.append({"seed": seed, "rel_error": rel_error, "covariate": covariate, **row})
            print(
                f"slope seed {seed:2d} error {rel_error:.2f} {covariate:18s}: slope {row['slope_mean']:+.3f} "
                f"(sd {row['slope_sd']:.3f}, z {row['slope_z']:+.2f}, covered {row['slope_covered']}), "
                f"mu {row['mu_mean']:.3f}"
                + (
                    f", LOO gain {row['elpd_gain']:.1f} +- {row['elpd_gain_se']:.1f} ({row['verdict']})"
                    if loo
                    else ""
                )
                + f", R-hat {row['max_r_hat']:.3f}, div {row['divergences']}, {row['seconds']:.1f} s",
                flush=True,
            )
    return rows


def summarise_slope(frame: pd.DataFrame) -> pd.DataFrame:
    """One row per error level and covariate."""
    g = frame.groupby(["rel_error", "covariate"], sort=False)
    out = g.agg(
        replicates=("seed", "size"),
        slope_mean=("slope_mean", "mean"),
        slope_bias=("slope_mean", lambda s: s.mean() - SLOPE),
        slope_sd=("slope_sd", "mean"),
        slope_z=("slope_z", "mean"),
        slope_abs_z=("slope_z", lambda s: s.abs().mean()),
        slope_coverage=("slope_covered", "mean"),
        mu_coverage=("mu_covered", "mean"),
        max_r_hat=("max_r_hat", "max"),
        divergences=("divergences", "sum"),
        median_seconds=("seconds", "median"),
    ).reset_index()
    out["slope_bias_se"] = g["slope_mean"].std(ddof=1).to_numpy() / np.sqrt(out["replicates"].to_numpy())
    return out


# ----------------------------------------------------------------------------------------------- study 2


def balanced_newick(levels: int, branch: float) -> tuple[str, list[str]]:
    """A balanced binary ultrametric tree with ``2**levels`` tips ``T1``... and every branch ``branch``."""
    names = [f"T{i + 1}" for i in range(2**levels)]
    nodes = [f"{n}:{branch}" for n in names]
    while len(nodes) > 1:
        nodes = [f"({nodes[i]},{nodes[i + 1]}):{branch}" for i in range(0, len(nodes), 2)]
    return nodes[0].rsplit(":", 1)[0] + ";", names


def draw_taxa(lam: float, seed: int, C: np.ndarray) -> np.ndarray:
    """Taxon exponents from ``MVN(mu, tau^2 (lambda C + (1 - lambda) I))`` (numpy's generator)."""
    cov = PHYLO_TAU**2 * (lam * C + (1.0 - lam) * np.eye(len(C)))
    return np.random.default_rng(seed).multivariate_normal(np.full(len(C), PHYLO_MU), cov)


def oracle_posterior(a_taxon: np.ndarray, C: np.ndarray, lambda_prior=None) -> dict:
    """Posterior of ``mu`` and lambda given the true taxon exponents, on a grid: the best any fit can do.

    The model's taxon level alone, ``a ~ MVN(mu, tau^2 (lambda C + (1 - lambda) I))``, with the model's
    priors (``Normal(mu_mean, mu_sd)`` on mu, half-normal on tau, uniform on lambda;
    :class:`allobranch.Priors`), evaluated on a (mu, tau, lambda) grid. The density uses the eigenvectors
    of ``C``, which diagonalise ``lambda C + (1 - lambda) I`` for every lambda (eigenvalues
    ``lambda l_i + 1 - lambda``; exact algebra). Marginals are sums over the grid (numerical integration);
    the 90 % HDI of mu takes grid points by descending density until 90 % of the mass.
    """
    from scipy import stats

    priors = ab.Priors()
    eig, V = np.linalg.eigh(C)
    y, ones = V.T @ a_taxon, V.T @ np.ones(len(a_taxon))
    mu = np.linspace(a_taxon.mean() - 1.0, a_taxon.mean() + 1.0, 301)
    tau = np.linspace(0.005, 1.5, 200)
    lam = np.linspace(0.0, 1.0, 101)
    e = lam[:, None] * eig[None, :] + 1.0 - lam[:, None]  # (lambda, taxon)
    quad = (y[None, :] - mu[:, None] * ones[None, :]) ** 2 @ (1.0 / e).T  # (mu, lambda)
    log_p = -0.5 * (
        len(a_taxon) * np.log(tau[None, :, None] ** 2)
        + np.log(e).sum(axis=1)[None, None, :]
        + quad[:, None, :] / tau[None, :, None] ** 2
    )
    log_p += stats.norm.logpdf(mu, priors.mu_mean, priors.mu_sd)[:, None, None]
    log_p += stats.halfnorm.logpdf(tau, scale=priors.tau_taxon)[None, :, None]
    if lambda_prior is not None:  # a density on [0, 1] instead of the model's uniform prior
        log_p += np.log(np.maximum(lambda_prior(lam), 1e-300))[None, None, :]
    p = np.exp(log_p - log_p.max())
    p /= p.sum()
    p_mu, p_lam = p.sum(axis=(1, 2)), p.sum(axis=(0, 1))
    order = np.argsort(p_mu)[::-1]
    inside = order[: int(np.searchsorted(np.cumsum(p_mu[order]), HDI_PROB)) + 1]
    mean = float(p_mu @ mu)
    sd = float(np.sqrt(p_mu @ (mu - mean) ** 2))
    return {
        "oracle_lambda_mean": float(p_lam @ lam),
        "oracle_mu_mean": mean,
        "oracle_mu_sd": sd,
        "oracle_mu_z": (mean - PHYLO_MU) / sd,
        "oracle_mu_covered": bool(mu[inside].min() <= PHYLO_MU <= mu[inside].max()),
    }


#: Priors on lambda the oracle study compares: the model's uniform prior, two leaning towards 1, and lambda
#: fixed at 1 (``ModelSpec(pagel_lambda=1)``, a point mass on the grid's last value).
ORACLE_LAMBDA_PRIORS = {
    "uniform (the model's)": None,
    "Beta(1.5, 1)": lambda lam: beta_dist.pdf(np.clip(lam, 1e-9, 1.0), 1.5, 1.0),
    "Beta(2, 1)": lambda lam: beta_dist.pdf(lam, 2.0, 1.0),
    "fixed at 1 (--pagel-lambda 1)": lambda lam: np.where(lam >= 1.0, 1.0, 0.0),
}
#: Other trees of the oracle study (the model's prior and lambda fixed at 1 only): Yule trees of growing
#: size and a larger balanced tree.
ORACLE_TREES = {"balanced 64": ("balanced", 6), **{f"Yule {n}": ("yule", n) for n in (16, 32, 64, 128)}}
ORACLE_TREE_PRIORS = ("uniform (the model's)", "fixed at 1 (--pagel-lambda 1)")


def yule_newick(n: int, seed: int) -> tuple[str, list[str]]:
    """A pure-birth (Yule) tree of ``n`` tips ``T1``..., ultrametric, as Newick (simulated; numpy's generator).

    Every lineage splits at rate 1; the tips are read one waiting time after the ``n``-th lineage appears.
    """
    rng = np.random.default_rng(seed)
    children: dict[int, list[int]] = {0: []}
    start = {0: 0.0}
    alive = [0]
    t, next_id = 0.0, 1
    while len(alive) < n:
        t += rng.exponential(1.0 / len(alive))
        parent = alive.pop(int(rng.integers(len(alive))))
        for _ in range(2):
            children[parent].append(next_id)
            children[next_id] = []
            start[next_id] = t
            alive.append(next_id)
            next_id += 1
    end = t + rng.exponential(1.0 / len(alive))
    names: list[str] = []

    def text(node: int) -> str:
        kids = children[node]
        length = (start[kids[0]] if kids else end) - start[node]
        if not kids:
            names.append(f"T{len(names) + 1}")
            return f"{names[-1]}:{length:.6f}"
        return "(" + ",".join(text(c) for c in kids) + f"):{length:.6f}"

    return text(0).rsplit(":", 1)[0] + ";", names


def tree_correlation(newick: str, names: list[str]) -> np.ndarray:
    """The model's tree correlation of a Newick string (read by :func:`allobranch.comparative.read_tree`)."""
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "tree.nwk"
        path.write_text(newick + "\n", encoding="utf-8")
        return read_tree(path, names).correlation(names)


def oracle_coverage(C: np.ndarray, lam: float, priors: dict, replicates: int) -> dict[str, int]:
    """How many of ``replicates`` exact posteriors (one per prior) hold mu in their 90 % HDI."""
    covered = {name: 0 for name in priors}
    for seed in range(10_000, 10_000 + replicates):
        a_taxon = draw_taxa(lam, seed, C)
        for name, prior in priors.items():
            covered[name] += oracle_posterior(a_taxon, C, prior)["oracle_mu_covered"]
    return covered


def oracle_study(C: np.ndarray, replicates: int, out: Path | None, tree_replicates: int = 200) -> str:
    """Coverage of mu's 90 % HDI by the exact posterior with the true taxon exponents known, over many
    replicates (cheap: no fit): on the phylogeny study's tree at lambda 0, 0.5 and 1 for each prior in
    :data:`ORACLE_LAMBDA_PRIORS`; on :data:`ORACLE_TREES` at lambda 0 and 1 for the model's prior and
    lambda fixed at 1.

    This separates what the model's posterior does (the oracle) from what the sampler does (the fits):
    when the oracle under-covers, the shortfall belongs to the design and the prior, not to the fit.
    """
    rows = []
    designs = [(f"balanced {len(C)} (the fits' tree)", C, (0.0, 0.5, 1.0), ORACLE_LAMBDA_PRIORS, replicates)]
    for label, (shape, size) in ORACLE_TREES.items():
        newick, names = (
            balanced_newick(size, 1.0 / size) if shape == "balanced" else yule_newick(size, seed=size)
        )
        priors = {k: ORACLE_LAMBDA_PRIORS[k] for k in ORACLE_TREE_PRIORS}
        designs.append((label, tree_correlation(newick, names), (0.0, 1.0), priors, tree_replicates))
    for label, Ct, lambdas, priors, reps in designs:
        n_eff = float(np.ones(len(Ct)) @ np.linalg.solve(Ct, np.ones(len(Ct))))
        for lam in lambdas:
            for name, k in oracle_coverage(Ct, lam, priors, reps).items():
                rows.append(
                    {
                        "tree": label,
                        "taxa": len(Ct),
                        "effective_taxa_at_lambda_1": n_eff,
                        "lambda_true": lam,
                        "lambda_prior": name,
                        "replicates": reps,
                        "coverage": k / reps,
                        "se": np.sqrt(max(k, 1) * max(reps - k, 1) / reps**3),
                    }
                )
            print(f"oracle {label} lambda {lam:g} done", flush=True)
    frame = pd.DataFrame(rows)
    table = frame.pivot_table(
        index=["tree", "effective_taxa_at_lambda_1", "lambda_prior"],
        columns="lambda_true",
        values="coverage",
        sort=False,
    ).reset_index()
    text = "\n".join(
        [
            "# Oracle coverage of the population exponent",
            "",
            f"Generated by `benchmarks/comparative.py --oracle-replicates {replicates}`. Taxon exponents drawn "
            f"from MVN({PHYLO_MU}, {PHYLO_TAU}^2 (lambda C + (1 - lambda) I)) on each tree (simulated); the exact "
            "posterior of mu given the true taxon exponents on a (mu, tau, lambda) grid with the model's priors "
            "on mu and tau and the listed prior on lambda; coverage of mu's 90 % HDI at each true lambda "
            f"(columns). Replicates: {replicates} on the fits' tree (binomial SE about "
            f"{float(frame[frame['replicates'] == replicates]['se'].max()):.3f}), {tree_replicates} on the "
            f"others (SE about {float(frame[frame['replicates'] == tree_replicates]['se'].max()):.3f}). Yule "
            "trees: pure-birth, seed = number of tips. Effective taxa at lambda 1: 1' C^-1 1, the number of "
            "independent taxa that would pin mu down as well under Brownian motion.",
            "",
            table.to_markdown(index=False, floatfmt=".3f"),
            "",
        ]
    )
    if out is not None:
        out.mkdir(parents=True, exist_ok=True)
        frame.to_csv(out / "comparative_oracle.csv", index=False)
        (out / "comparative_oracle.md").write_text(text, encoding="utf-8")
    return text


def run_phylo(
    lam: float, seed: int, tree_path: Path, names: list[str], C: np.ndarray, draws: int
) -> list[dict]:
    """One replicate: taxon exponents from the MVN, fitted with and without the tree."""
    a_taxon = draw_taxa(lam, seed, C)
    oracle = oracle_posterior(a_taxon, C)
    sim = ab.simulate_junctions(
        taxa=names, taxon_exponents=dict(zip(names, a_taxon)), **PHYLO_DESIGN, seed=seed
    )
    table = attach_tree(ab.read_junctions(sim.frame, sim.mapping), tree_path)
    rows = []
    for model, fields in PHYLO_MODELS.items():
        with_tree = model != "no tree"
        started = time.perf_counter()
        result = ab.fit(table, ab.ModelSpec(**fields), draws=draws, tune=draws, seed=seed, progress=False)
        wall = time.perf_counter() - started
        post = result.idata.posterior
        row = {
            "lambda_true": lam,
            "seed": seed,
            "tree": with_tree,
            "model": model,
            "taxon_mean_true": float(a_taxon.mean()),
            **oracle,
            **{f"mu_{k}": v for k, v in _interval(post["mu"].values, PHYLO_MU).items()},
            **{f"tau_{k}": v for k, v in _interval(post["tau_taxon"].values).items()},
            **_diagnostics(result),
            "seconds": round(wall, 1),
        }
        if "pagel_lambda" in post:
            lam_draws = post["pagel_lambda"].values
            row |= {f"lambda_{k}": v for k, v in _interval(lam_draws).items()}
            row["lambda_p_above_half"] = float((lam_draws > 0.5).mean())
            row["lambda_r_hat"] = float(az.rhat(post["pagel_lambda"]).to_array().max())
            row["lambda_ess_bulk"] = float(az.ess(post["pagel_lambda"], method="bulk").to_array().min())
        rows.append(row)
        print(
            f"phylo lambda {lam:.0f} seed {seed:3d} {model:<16}: mu {row['mu_mean']:.3f} "
            f"(sd {row['mu_sd']:.3f}, covered {row['mu_covered']}; taxon mean {row['taxon_mean_true']:.3f}), "
            f"tau {row['tau_mean']:.3f}"
            + (
                f", lambda {row['lambda_mean']:.2f} [{row['lambda_hdi_low']:.2f}, {row['lambda_hdi_high']:.2f}]"
                if "pagel_lambda" in post
                else ""
            )
            + f", R-hat {row['max_r_hat']:.3f}, div {row['divergences']}, {row['seconds']:.1f} s",
            flush=True,
        )
    return rows


def taxon_average_sd(lam: float, C: np.ndarray) -> float:
    """SD of the average of the drawn taxon exponents about ``mu``: ``tau sqrt(1' S 1) / n`` with ``S`` the
    MVN's correlation (exact algebra for the variance of a mean of correlated normals)."""
    S = lam * C + (1.0 - lam) * np.eye(len(C))
    return float(PHYLO_TAU * np.sqrt(S.sum()) / len(C))


def summarise_phylo(frame: pd.DataFrame) -> pd.DataFrame:
    """One row per true lambda and with / without the tree."""
    frame = frame.assign(
        mu_sq_error=(frame["mu_mean"] - PHYLO_MU) ** 2,
        oracle_sq_error=(frame["oracle_mu_mean"] - PHYLO_MU) ** 2,
    )
    g = frame.groupby(["lambda_true", "model"], sort=False)
    out = g.agg(
        replicates=("seed", "size"),
        mu_coverage=("mu_covered", "mean"),
        mu_sd=("mu_sd", "mean"),
        mu_rmse=("mu_sq_error", lambda s: float(np.sqrt(s.mean()))),
        mu_z_sd=("mu_z", lambda s: s.std(ddof=1)),
        tau_mean=("tau_mean", "mean"),
        lambda_mean=("lambda_mean", "mean"),
        lambda_hdi_low=("lambda_hdi_low", "mean"),
        lambda_hdi_high=("lambda_hdi_high", "mean"),
        lambda_above_half=("lambda_mean", lambda s: float((s > 0.5).mean())),
        lambda_p_above_half=("lambda_p_above_half", "mean"),
        max_r_hat=("max_r_hat", "max"),
        r_hat_over=("max_r_hat", lambda s: int((s > 1.01).sum())),
        lambda_r_hat_over=("lambda_r_hat", lambda s: int((s > 1.01).sum())),
        lambda_min_ess=("lambda_ess_bulk", "min"),
        max_attempts=("attempts", "max"),
        divergences=("divergences", "sum"),
        median_seconds=("seconds", "median"),
        oracle_lambda_mean=("oracle_lambda_mean", "mean"),
        oracle_lambda_above_half=("oracle_lambda_mean", lambda s: float((s > 0.5).mean())),
        oracle_mu_coverage=("oracle_mu_covered", "mean"),
        oracle_mu_sd=("oracle_mu_sd", "mean"),
        oracle_mu_rmse=("oracle_sq_error", lambda s: float(np.sqrt(s.mean()))),
        oracle_mu_z_sd=("oracle_mu_z", lambda s: s.std(ddof=1)),
    ).reset_index()
    return out


# ----------------------------------------------------------------------------------------------- output


def figure(slopes: pd.DataFrame, phylo: pd.DataFrame, path: Path) -> None:
    """Slope intervals per replicate and setting; lambda intervals; mu's z with and without the tree."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(1, 3, figsize=(15, 5), constrained_layout=True)
    ax = axes[0]
    settings = list(slopes.groupby(["rel_error", "covariate"], sort=False).groups)
    for i, (err, cov) in enumerate(settings):
        d = slopes[(slopes["rel_error"] == err) & (slopes["covariate"] == cov)].reset_index(drop=True)
        y = i + np.linspace(-0.35, 0.35, len(d))
        ax.hlines(y, d["slope_hdi_low"], d["slope_hdi_high"], color=f"C{i}", lw=1)
        ax.plot(d["slope_mean"], y, "o", color=f"C{i}", ms=3)
    ax.axvline(SLOPE, color="k", lw=1)
    ax.set_yticks(range(len(settings)), [f"{c}\n{e:.0%} error" for e, c in settings])
    ax.set_xlabel(f"slope per tenfold parent (truth {SLOPE}; 90 % HDI)")
    ax.set_title("Size-dependent exponent")
    ax.invert_yaxis()
    ax = axes[1]
    tree = phylo[phylo["model"] == "tree"].reset_index(drop=True)
    for i, lam in enumerate(LAMBDAS):
        d = tree[tree["lambda_true"] == lam].reset_index(drop=True)
        y = i + np.linspace(-0.35, 0.35, len(d))
        ax.hlines(y, d["lambda_hdi_low"], d["lambda_hdi_high"], color=f"C{i}", lw=1)
        ax.plot(d["lambda_mean"], y, "o", color=f"C{i}", ms=3)
        ax.plot([lam, lam], [i - 0.45, i + 0.45], color="k", lw=1)
    ax.set_yticks(range(len(LAMBDAS)), [f"true lambda {lam:g}" for lam in LAMBDAS])
    ax.set_xlim(-0.02, 1.02)
    ax.set_xlabel("Pagel's lambda (posterior mean, 90 % HDI)")
    ax.set_title(f"{2**TREE_LEVELS} taxa on a balanced tree")
    ax.invert_yaxis()
    ax = axes[2]
    labels = []
    colours = {model: f"C{k}" for k, model in enumerate(PHYLO_MODELS)}
    for i, ((lam, model), d) in enumerate(phylo.groupby(["lambda_true", "model"], sort=False)):
        jitter = np.random.default_rng(i).uniform(-0.2, 0.2, len(d))
        ax.plot(d["mu_z"], i + jitter, "o", ms=3, color=colours[model])
        labels.append(f"true lambda {lam:g}: {model}")
    for x in (-1.645, 1.645):
        ax.axvline(x, color="grey", ls="--", lw=0.8)
    ax.set_yticks(range(len(labels)), labels)
    ax.set_xlabel("population exponent: (mean - truth) / sd")
    ax.set_title("mu's truth in its posterior")
    ax.invert_yaxis()
    fig.suptitle("Comparative terms on simulated data (benchmarks/comparative.py)")
    fig.savefig(path, dpi=120)
    plt.close(fig)


def markdown(slopes, slope_summary, scale, phylo, phylo_summary, C, args, minutes) -> str:
    """The result file."""
    lines = [
        "# Comparative terms: a size-dependent exponent and a phylogeny",
        "",
        "Simulated data (`benchmarks/comparative.py`); every fit uses the default fast model, "
        f"4 chains, tune = draws = {args.draws}, retries as `allobranch.fit` decides; intervals are 90 % HDIs "
        "(ArviZ).",
        "",
        "## 1. Size-dependent exponent",
        "",
        f"Truth: exponent = specimen exponent {SLOPE:+.2f} x log10(parent / {REFERENCE_MM} mm); population "
        f"exponent {SLOPE_DESIGN['mu']} at {REFERENCE_MM} mm (about 3.0 at 0.03 mm, 2.3 at 3 mm), taxon spread "
        f"{SLOPE_DESIGN['tau_taxon']}, specimen spread {SLOPE_DESIGN['tau_specimen']}, "
        f"{SLOPE_DESIGN['taxa']} taxa x {SLOPE_DESIGN['specimens_per_taxon']} specimens x "
        f"{SLOPE_DESIGN['junctions_per_specimen']} junctions, parents log-uniform on "
        f"{SLOPE_DESIGN['parent_range'][0]}-{SLOPE_DESIGN['parent_range'][1]} mm, Dirichlet(4) splits; "
        f"{slopes['seed'].nunique()} replicates (seeds {slopes['seed'].min()}-{slopes['seed'].max()}). "
        f"Covariate reference log10({REFERENCE_MM}) for both covariates. `log_parent_size` is the parent's "
        "size from its daughters, `log_parent_reading` the parent's own reading (carries its error).",
        "",
        f"Scale of the covariate itself (no fit; {scale['junctions']} error-free junctions, least squares of the "
        "true exponent on `log_parent_size` of the true daughters): slope "
        f"{scale['slope']:+.3f} (truth {SLOPE:+.3f}), shift at the reference {scale['shift']:+.4f}. The "
        "daughter-based size moves the truth by this much before any noise; the tables below score "
        f"against {SLOPE}.",
        "",
        "| error | covariate | replicates | mean posterior mean | bias (+- se) | bias vs the covariate's scale "
        "| mean posterior SD | mean z | mean abs(z) "
        "| 90 % HDI coverage of slope | 90 % HDI coverage of mu | max R-hat | divergences (sum) | median s per fit |",
        "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for _, r in slope_summary.iterrows():
        lines.append(
            f"| {r['rel_error']:.0%} | `{r['covariate']}` | {r['replicates']} | {r['slope_mean']:+.3f} "
            f"| {r['slope_bias']:+.3f} +- {r['slope_bias_se']:.3f} | {r['slope_mean'] - scale['slope']:+.3f} "
            f"| {r['slope_sd']:.3f} | {r['slope_z']:+.2f} "
            f"| {r['slope_abs_z']:.2f} | {r['slope_coverage']:.0%} | {r['mu_coverage']:.0%} | {r['max_r_hat']:.3f} "
            f"| {r['divergences']} | {r['median_seconds']:.1f} |"
        )
    loo = slopes.dropna(subset=["elpd_gain"])
    if len(loo):
        clear = (loo["elpd_gain"] > 4) & (loo["elpd_gain"] > 2 * loo["elpd_gain_se"])
        verdicts = loo["verdict"].value_counts()
        lines += [
            "",
            f"Constant exponent vs slope, PSIS-LOO (`compare_covariates`, 5 % error, `{SIZE}`): the slope model "
            f"predicted better in {int((loo['elpd_gain'] > 0).sum())}/{len(loo)} replicates, clearly (gain > 4 and > "
            f"2 se) in {int(clear.sum())}/{len(loo)}; mean elpd gain {loo['elpd_gain'].mean():.1f} (range "
            f"{loo['elpd_gain'].min():.1f} to {loo['elpd_gain'].max():.1f}), mean se {loo['elpd_gain_se'].mean():.1f}; "
            f"mean log10 BF(slope = 0) {loo['log10_bf_zero'].mean():.1f}. Verdicts: "
            + ", ".join(f"{k} {v}" for k, v in verdicts.items())
            + ".",
        ]
    lines += [
        "",
        "## 2. Phylogeny",
        "",
        f"{2**TREE_LEVELS} taxa on a balanced ultrametric tree ({TREE_LEVELS} levels, every branch {BRANCH}); taxon "
        f"exponents ~ MVN({PHYLO_MU}, {PHYLO_TAU}^2 (lambda C + (1 - lambda) I)), C the shared-path matrix at "
        f"unit diagonal; {PHYLO_DESIGN['specimens_per_taxon']} specimens x {PHYLO_DESIGN['junctions_per_specimen']} "
        f"junctions per taxon, specimen spread {PHYLO_DESIGN['tau_specimen']}, "
        f"{PHYLO_DESIGN['rel_error']:.0%} error. Same tables fitted with the tree (Pagel's lambda estimated, "
        "uniform prior), with the tree at lambda fixed at 1 (`--pagel-lambda 1`, Brownian motion) and without "
        "the tree. Coverage is of the MVN's mean "
        f"{PHYLO_MU} (the population parameter), not of the drawn taxa's average.",
        "",
        "| true lambda | model | replicates | lambda: mean posterior mean | lambda: mean 90 % HDI "
        "| lambda: mean P(lambda > 0.5) | share of replicates with lambda mean > 0.5 | mu: 90 % HDI coverage "
        "| mu: mean posterior SD | mu: RMSE | SD of taxa's average about mu (exact) | SD of mu's z "
        "| tau_taxon mean | max R-hat | fits with R-hat > 1.01 (of them on lambda) | lambda: min bulk ESS "
        "| max attempts | divergences (sum) | median s per fit |",
        "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for _, r in phylo_summary.iterrows():
        lam = (
            (
                f"{r['lambda_mean']:.2f} | [{r['lambda_hdi_low']:.2f}, {r['lambda_hdi_high']:.2f}] "
                f"| {r['lambda_p_above_half']:.2f} | {r['lambda_above_half']:.0%}"
            )
            if r["model"] == "tree"
            else ("fixed at 1 | - | - | -" if r["model"] == "tree, lambda = 1" else "- | - | - | -")
        )
        lines.append(
            f"| {r['lambda_true']:g} | {r['model']} | {r['replicates']} | {lam} "
            f"| {r['mu_coverage']:.0%} | {r['mu_sd']:.3f} | {r['mu_rmse']:.3f} "
            f"| {taxon_average_sd(r['lambda_true'], C):.3f} | {r['mu_z_sd']:.2f} "
            f"| {r['tau_mean']:.3f} | {r['max_r_hat']:.3f} | {r['r_hat_over']}"
            + (f" ({r['lambda_r_hat_over']}) | {r['lambda_min_ess']:.0f}" if r["model"] == "tree" else " | -")
            + f" | {r['max_attempts']} "
            f"| {r['divergences']} | {r['median_seconds']:.1f} |"
        )
        if r["model"] == "no tree":
            lines.append(
                f"| {r['lambda_true']:g} | oracle: true taxon exponents, exact posterior on a grid | "
                f"{r['replicates']} | {r['oracle_lambda_mean']:.2f} | - | - | {r['oracle_lambda_above_half']:.0%} "
                f"| {r['oracle_mu_coverage']:.0%} | {r['oracle_mu_sd']:.3f} | {r['oracle_mu_rmse']:.3f} "
                f"| {taxon_average_sd(r['lambda_true'], C):.3f} | {r['oracle_mu_z_sd']:.2f} | - | - | - | - | - | - "
                "| - |"
            )
    slow = phylo[phylo["max_r_hat"] > 1.01]
    paired = phylo.pivot_table(index=["lambda_true", "seed"], columns="model", values="mu_mean")
    shift = (paired["tree"] - paired["no tree"]).abs().groupby(level=0).mean()
    lines += [
        "",
        "An SD of mu's z near 1 means the posterior SD matches the actual scatter of the estimate; above 1, "
        "the intervals are too narrow. The exact SD of the taxa's average about mu (from the MVN) is the "
        "expected RMSE of the plain average of the true taxon exponents: about what any estimate of mu from "
        "these 16 taxa can achieve (RMSEs over 30 replicates carry about 10 % sampling error). Mean |difference| of mu's posterior mean "
        "with and without the tree on the same table: "
        + ", ".join(f"{v:.3f} (lambda {k:g})" for k, v in shift.items())
        + " (on a balanced tree the generalised least-squares weights of the taxa are equal, so the tree "
        "changes mu's width, not its centre).",
        "",
        "The oracle rows use only the model's taxon level and priors with the taxon exponents known exactly "
        "(`oracle_posterior`): what the posterior of lambda and mu is when the junction data leave no doubt "
        "about the taxa. Where the fitted rows match them, the fit loses nothing to the junction level and "
        "the remaining miscoverage belongs to the posterior itself (16 taxa, uniform prior on lambda), not to "
        "the sampler or the density.",
        "",
        f"Convergence: {len(slow)} of {len(phylo)} fits ended with R-hat > 1.01 after their retries "
        "(" + ", ".join(f"{n} {m}" for m, n in slow["model"].value_counts().items()) + "); the variable with "
        "the largest R-hat in those fits: "
        + (", ".join(f"{k} {v}" for k, v in slow["worst_r_hat_variable"].value_counts().items()) or "none")
        + ". Fits that needed a retry (the first attempt had a divergence or R-hat > 1.01): "
        + ", ".join(
            f"{m} {int((phylo[phylo['model'] == m]['attempts'] > 1).sum())} of {int((phylo['model'] == m).sum())}"
            for m in PHYLO_MODELS
        )
        + ".",
        "",
        f"Load average when written: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores. Total run time "
        f"{minutes:.1f} min.",
        "",
    ]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--slope-replicates", type=int, default=20)
    parser.add_argument("--phylo-replicates", type=int, default=30, help="per true lambda")
    parser.add_argument("--draws", type=int, default=500, help="draws and tuning steps per chain")
    parser.add_argument("--quick", action="store_true", help="1 replicate each, 200 draws; nothing written")
    parser.add_argument(
        "--phylo-only",
        action="store_true",
        help="re-run only the phylogeny study; the slope study is read from comparative_slopes.csv",
    )
    parser.add_argument("--out", type=Path, default=RESULTS)
    parser.add_argument(
        "--oracle-replicates",
        type=int,
        help="only the oracle study (no fits): mu's coverage by the exact posterior over N replicates per "
        "lambda, for the model's and two other lambda priors; writes comparative_oracle.md",
    )
    args = parser.parse_args(argv)
    if args.oracle_replicates:
        newick, names = balanced_newick(TREE_LEVELS, BRANCH)
        with tempfile.TemporaryDirectory() as tmp:
            tree_path = Path(tmp) / "balanced.nwk"
            tree_path.write_text(newick + "\n", encoding="utf-8")
            C = read_tree(tree_path, names).correlation(names)
        print(oracle_study(C, args.oracle_replicates, args.out))
        return 0
    if args.quick:
        args.slope_replicates, args.phylo_replicates, args.draws = 1, 1, 200
    started = time.perf_counter()
    scale = covariate_scale_truth()
    print(
        f"covariate scale (error-free): slope {scale['slope']:+.4f}, shift {scale['shift']:+.4f}", flush=True
    )
    if args.phylo_only:
        slopes = pd.read_csv(args.out / "comparative_slopes.csv")
    else:
        slope_rows = []
        for seed in range(1, args.slope_replicates + 1):
            slope_rows += run_slope(seed, args.draws)
        slopes = pd.DataFrame(slope_rows)
    slope_summary = summarise_slope(slopes)

    newick, names = balanced_newick(TREE_LEVELS, BRANCH)
    phylo_rows = []
    with tempfile.TemporaryDirectory() as tmp:
        tree_path = Path(tmp) / "balanced.nwk"
        tree_path.write_text(newick + "\n", encoding="utf-8")
        C = read_tree(tree_path, names).correlation(names)
        for lam in LAMBDAS:
            for seed in range(101, 101 + args.phylo_replicates):
                phylo_rows += run_phylo(lam, seed, tree_path, names, C, args.draws)
    phylo = pd.DataFrame(phylo_rows)
    phylo_summary = summarise_phylo(phylo)
    minutes = (time.perf_counter() - started) / 60

    with pd.option_context("display.width", 250, "display.max_columns", 40):
        print(slope_summary.round(3).to_string(index=False))
        print(phylo_summary.round(3).to_string(index=False))
    if args.quick:
        print(f"quick run: {minutes:.1f} min; nothing written")
        return 0
    args.out.mkdir(parents=True, exist_ok=True)
    slopes.to_csv(args.out / "comparative_slopes.csv", index=False)
    phylo.to_csv(args.out / "comparative_phylogeny.csv", index=False)
    figure(slopes, phylo, args.out / "comparative.png")
    text = markdown(slopes, slope_summary, scale, phylo, phylo_summary, C, args, minutes)
    (args.out / "comparative.md").write_text(text, encoding="utf-8")
    print(f"wrote {args.out / 'comparative.md'}, comparative_*.csv and comparative.png ({minutes:.1f} min)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
