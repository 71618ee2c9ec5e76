"""One sampling attempt, and the escalation from one attempt to the next when a fit fails its checks.

Route: the default ``fast`` form sampled with nutpie runs on the compiled density
(:mod:`allobranch.inference.direct`); every other form, and PyMC's sampler, go through the PyMC model
(:mod:`allobranch.model.build`). Both routes use the same partially centred hierarchy
(:mod:`allobranch.model.partial_centering`).

Escalation (measured on the robustness benchmark, ``benchmarks/robustness.py``): a fit is clean when it has
no divergent transition and every checked R-hat is at most :data:`~allobranch.inference.diagnostics.RHAT_MAX`.
When the first attempt is not clean it is repeated with a higher target acceptance and the other extreme
parametrisation, then with the pilot weights at the highest target acceptance; the first clean attempt is
kept, otherwise the one with the fewest problems, and the fit says loudly that it failed.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass

import arviz as az
import numpy as np

from allobranch.inference import diagnostics as dg
from allobranch.inference.nuts_run import NutsRun
from allobranch.model.data import ModelData
from allobranch.model.spec import ModelSpec
from allobranch.model.structure import HYPER_PARAMETERS, GroupLayout

#: Target acceptance of the escalation steps.
ESCALATED_TARGET_ACCEPT = (0.95, 0.99)


@dataclass(frozen=True)
class AttemptPlan:
    """How one attempt samples: the parametrisation (``auto`` pilot weights, ``centered`` or
    ``noncentered``) and NUTS's target acceptance."""

    parametrization: str
    target_accept: float


def escalation_plan(
    spec: ModelSpec,
    layout: GroupLayout,
    target_accept: float,
    escalate: bool,
    *,
    whitened_only: bool = False,
) -> list[AttemptPlan]:
    """The attempts to try in order (only the first unless ``escalate``).

    With ``parametrization="auto"`` the second attempt flips to the extreme the pilot leaned away from
    (centred when most weights were below 1/2, non-centred otherwise); with an explicit parametrisation the
    escalation keeps it and only raises the target acceptance. ``whitened_only`` (models with covariates,
    traits or a tree, which only the whitened form samples) keeps ``auto`` and raises the target acceptance.
    """
    if whitened_only:
        spec = spec.with_(parametrization="auto")
        first = AttemptPlan("auto", float(target_accept))
        higher = [t for t in ESCALATED_TARGET_ACCEPT if t > target_accept] or [max(target_accept, 0.99)]
        return [first] + (
            [AttemptPlan("auto", t) for t in higher if t != first.target_accept] if escalate else []
        )
    first = AttemptPlan(spec.parametrization, float(target_accept))
    if not escalate:
        return [first]
    plans = [first]
    higher = [t for t in ESCALATED_TARGET_ACCEPT if t > target_accept] or [max(target_accept, 0.99)]
    if spec.parametrization == "auto":
        weights = np.concatenate([layout.w_taxon, layout.w_specimen])
        other = "centered" if weights.size and np.mean(weights) < 0.5 else "noncentered"
        plans.append(AttemptPlan(other, higher[0]))
        plans.append(AttemptPlan("auto", higher[-1]))
    else:
        plans += [AttemptPlan(spec.parametrization, t) for t in higher]
    out: list[AttemptPlan] = []
    for plan in plans:  # drop repeats (e.g. a target acceptance already at the top)
        if plan not in out:
            out.append(plan)
    return out


def attempt_layout(layout: GroupLayout, plan: AttemptPlan) -> GroupLayout:
    """The group layout an attempt samples with."""
    return layout if plan.parametrization == "auto" else layout.with_weights(plan.parametrization)


def initial_point(
    density_layout, layout: GroupLayout, spec: ModelSpec, specimen_taxon_idx: np.ndarray
) -> np.ndarray:
    """Centre of the chains' starting points on the unconstrained scale, from the pilot.

    Raw group values are set so that the exponents equal the pilot's, their standardised deviations clipped
    to +/- 2.5; scales start at the pilot's spreads (floored at a tenth of the prior scale).
    """
    pe = layout.pilot
    x = np.zeros(density_layout.ndim)
    pos = {name: sl for name, sl in zip(density_layout.names, density_layout.slices)}
    if pe is None:
        return x
    pr = spec.priors

    def raw(a: np.ndarray, parent: np.ndarray, tau: float, w: np.ndarray) -> np.ndarray:
        z = np.clip((a - parent) / tau, -2.5, 2.5)
        return w * parent + tau**w * z

    mu = float(np.clip(pe.mu, 0.5, 6.0))
    if "mu" in pos:
        x[pos["mu"]] = mu  # ("mu_z", the conditioned form, starts at its centre, 0)
    a_taxon = np.where(layout.fixed_taxa, layout.fixed_values, np.clip(pe.a_taxon, 0.5, 6.0))
    if layout.whiten:  # standardised deviations start at 0 (the conditional means), spreads at the pilot's
        for name, prior, tau in (
            ("tau_taxon_log__", pr.tau_taxon, pe.tau_taxon),
            ("tau_specimen_log__", pr.tau_specimen, pe.tau_specimen),
        ):
            if name in pos:
                x[pos[name]] = np.log(max(float(tau), 0.1 * prior))
        x[pos["sigma_dev_log__"]] = np.log(np.clip(pe.sigma_dev, 1e-3, 1.0))
        if "nu_log__" in pos:
            x[pos["nu_log__"]] = np.log(20.0)
        return x
    if "r_taxon" in pos:
        tau = max(float(pe.tau_taxon), 0.1 * pr.tau_taxon)
        x[pos["tau_taxon_log__"]] = np.log(tau)
        x[pos["r_taxon"]] = np.where(
            layout.fixed_taxa, 0.0, raw(a_taxon, np.full_like(a_taxon, mu), tau, layout.w_taxon)
        )
    if "r_specimen" in pos:
        tau = max(float(pe.tau_specimen), 0.1 * pr.tau_specimen)
        parent = a_taxon[np.asarray(specimen_taxon_idx)]
        x[pos["tau_specimen_log__"]] = np.log(tau)
        x[pos["r_specimen"]] = np.where(
            layout.pinned, 0.0, raw(np.clip(pe.a_specimen, 0.5, 6.0), parent, tau, layout.w_specimen)
        )
    x[pos["sigma_dev_log__"]] = np.log(np.clip(pe.sigma_dev, 1e-3, 1.0))
    if "nu_log__" in pos:
        x[pos["nu_log__"]] = np.log(20.0)
    return x


def sample_once(
    data: ModelData,
    spec: ModelSpec,
    form: str,
    layout: GroupLayout,
    arrays: dict,
    sigma_asym: np.ndarray | None,
    *,
    plan: AttemptPlan,
    draws: int,
    tune: int,
    chains: int,
    seed: int,
    sampler: str,
    progress: bool,
    cores: int | None = None,
) -> tuple[az.InferenceData, str, list[str]]:
    """Run one attempt; returns the draws, the sampler actually used and notes (e.g. a fallback)."""
    lay = attempt_layout(layout, plan)
    settings = NutsRun(
        draws=draws, tune=tune, chains=chains, seed=seed, progress=progress, target_accept=plan.target_accept
    )
    notes: list[str] = []
    if sampler == "nutpie" and form == "fast":
        try:
            return _sample_fast(data, spec, lay, arrays, settings, cores), "nutpie", notes
        except Exception as exc:  # noqa: BLE001 - any failure of the fast path falls back, loudly
            if data.linear is not None:  # PyMC's model has no covariates, traits or tree: never swap models
                raise
            warnings.warn(
                f"nutpie failed ({exc!r}); falling back to PyMC's NUTS", RuntimeWarning, stacklevel=2
            )
            notes.append(f"nutpie failed ({type(exc).__name__}); sampled with PyMC's NUTS instead")
            sampler = "pymc"
    from allobranch.inference.backends import sample_nutpie, sample_pymc
    from allobranch.model.build import build_model

    built = build_model(data, spec, lay)
    if sampler == "nutpie":
        try:
            return sample_nutpie(built.model, settings), "nutpie", notes
        except Exception as exc:  # noqa: BLE001
            warnings.warn(
                f"nutpie failed ({exc!r}); falling back to PyMC's NUTS", RuntimeWarning, stacklevel=2
            )
            notes.append(f"nutpie failed ({type(exc).__name__}); sampled with PyMC's NUTS instead")
    return sample_pymc(built.model, settings), "pymc", notes


def _sample_fast(
    data: ModelData, spec: ModelSpec, layout: GroupLayout, arrays: dict, settings: NutsRun, cores: int | None
) -> az.InferenceData:
    from allobranch.inference.direct import sample_direct
    from allobranch.model.density import pack

    density = pack(
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
        condition_mu=layout.condition_mu,
        whiten=_pilot_precision(layout) if (layout.whiten or data.linear is not None) else None,
        linear=data.linear,
    )
    init = initial_point(density.layout, layout, spec, data.specimen_taxon_idx)
    coords = {"taxon": data.taxa, "specimen": data.specimens}
    if data.linear is not None:
        coords.update(covariate=list(data.linear.covariate_names), trait=list(data.linear.trait_names))
    return sample_direct(density, init, coords, settings, cores=cores)


def _pilot_precision(layout: GroupLayout) -> tuple[np.ndarray, np.ndarray]:
    """The pilot's specimen exponents and precisions (0 where a specimen's likelihood is flat)."""
    pe = layout.pilot
    sd = np.asarray(pe.sd_specimen, dtype=float)
    with np.errstate(divide="ignore"):
        prec = np.where(np.isfinite(sd) & (sd > 0), 1.0 / sd**2, 0.0)
    return np.asarray(pe.a_specimen, dtype=float), prec


def attempt_record(idata: az.InferenceData, plan: AttemptPlan, layout: GroupLayout, seconds: float) -> dict:
    """What one attempt gave: divergences, worst R-hat, lowest bulk ESS, time (for provenance)."""
    names = [v for v in (*HYPER_PARAMETERS, "a_taxon", "a_specimen") if v in idata.posterior]
    table = dg.diagnostics_table(idata, names)
    checks = dg.sampler_checks(idata)
    return {
        "parametrization": plan.parametrization,
        "weights": attempt_layout(layout, plan).describe(),
        "target_accept": plan.target_accept,
        "divergences": int(checks["divergences"]),
        "max_r_hat": float(table["r_hat"].max()) if len(table) else float("nan"),
        "min_ess_bulk": float(table["ess_bulk"].min()) if len(table) else float("nan"),
        "seconds": round(seconds, 2),
        "kept": False,
    }


def clean(record: dict) -> bool:
    """No divergence and every R-hat within the threshold."""
    r = record["max_r_hat"]
    return record["divergences"] == 0 and (not np.isfinite(r) or r <= dg.RHAT_MAX)


def badness(record: dict) -> tuple[float, float]:
    """Order of preference among failed attempts: fewer divergences, then lower R-hat."""
    r = record["max_r_hat"] if np.isfinite(record["max_r_hat"]) else 1.0
    return (record["divergences"], r)


def timed(fn, *args, **kwargs):
    """Call ``fn`` and return its result and the wall time in seconds."""
    started = time.perf_counter()
    out = fn(*args, **kwargs)
    return out, time.perf_counter() - started
