"""Model specification: what to fit, independent of how it is sampled.

A :class:`ModelSpec` can be built and checked without PyMC; :func:`allobranch.model.build.build_model` turns
it and a junction table into a PyMC model in one place.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import asdict, dataclass, field, replace
from typing import Any

#: Allowed likelihood forms.
LIKELIHOODS: tuple[str, ...] = ("marginal", "latent")
#: Allowed distributions of the junction-level biological deviation.
DEVIATIONS: tuple[str, ...] = ("normal", "student_t")
#: How the daughters' asymmetry scale is handled.
ASYMMETRY: tuple[str, ...] = ("empirical", "sampled")
#: Allowed parametrisations of the hierarchy.
PARAMETRIZATIONS: tuple[str, ...] = ("auto", "noncentered", "centered")
#: Allowed sampler names.
SAMPLERS: tuple[str, ...] = ("nutpie", "pymc")
#: Default sampler settings of every fit (the command line, :func:`allobranch.fit` and the comparison's fits).
SAMPLER_DEFAULTS: dict = {"draws": 1000, "tune": 1000, "chains": 4, "target_accept": 0.9, "sampler": "nutpie"}
#: A table counts as large from this many junctions on, with at least :data:`LARGE_PER_SPECIMEN` junctions per
#: specimen on average: then every specimen's exponent is pinned down by its own junctions, the pilot's
#: normal approximation that whitens the hierarchy is close, and a shorter tuning at a lower target
#: acceptance is enough (``benchmarks/large_defaults.py``: at 10,000 junctions, 0.8 instead of 0.9 halves
#: the leapfrog steps per draw, 7 instead of 15, with the same tail ESS and R-hat).
LARGE_TABLE = 20_000
#: Average junctions per specimen a large table needs (see :data:`LARGE_TABLE`).
LARGE_PER_SPECIMEN = 100
#: What a large table's default fit changes in :data:`SAMPLER_DEFAULTS`.
LARGE_TABLE_DEFAULTS: dict = {"tune": 300, "target_accept": 0.8}


def sampler_defaults(n_junctions: int, n_specimens: int) -> dict:
    """The default sampler settings for a table of this size.

    :data:`SAMPLER_DEFAULTS`, with :data:`LARGE_TABLE_DEFAULTS` for a large table (at least
    :data:`LARGE_TABLE` junctions and :data:`LARGE_PER_SPECIMEN` per specimen on average). A fit that fails
    its checks still escalates to higher target acceptances.

    Examples
    --------
    >>> sampler_defaults(500, 10)["tune"], sampler_defaults(100_000, 100)["tune"]
    (1000, 300)
    """
    out = dict(SAMPLER_DEFAULTS)
    if n_junctions >= LARGE_TABLE and n_junctions >= LARGE_PER_SPECIMEN * max(int(n_specimens), 1):
        out.update(LARGE_TABLE_DEFAULTS)
    return out


@dataclass(frozen=True)
class Priors:
    """Weakly informative default priors, on the scale of the problem.

    All scales refer to the exponent ``a`` or to natural-log radii (0.1 on the log scale is about a 10 %
    change of a radius).

    Parameters
    ----------
    mu_mean, mu_sd : float
        Normal prior of the population exponent: ``Normal(2.5, 1)`` puts about 87 % of its mass on
        the plausible range 1-4 and covers every classic law (3/2, 2, 7/3, 3).
    tau_taxon : float
        Half-normal scale of the between-taxon standard deviation of the exponent (default 0.5).
    tau_specimen : float
        Half-normal scale of the between-specimen (within taxon) standard deviation (default 0.25).
    sigma_dev : float
        Half-normal scale of the junction-level biological deviation of log parent radius from the law
        (default 0.1, i.e. about 10 %).
    rel_error : float
        Half-normal scale of the relative measurement error when it is estimated (default 0.1).
    sigma_asym : float
        Half-normal scale of the daughters' asymmetry (SD of a true log daughter radius about its
        junction's mean; default 0.5) when it is sampled.
    nu_alpha, nu_beta : float
        Gamma(alpha, rate beta) prior of the Student-t degrees of freedom (default Gamma(2, 0.1), mean 20).
    """

    mu_mean: float = 2.5
    mu_sd: float = 1.0
    tau_taxon: float = 0.5
    tau_specimen: float = 0.25
    sigma_dev: float = 0.1
    rel_error: float = 0.1
    sigma_asym: float = 0.5
    nu_alpha: float = 2.0
    nu_beta: float = 0.1

    def __post_init__(self) -> None:
        for name, value in asdict(self).items():
            if name != "mu_mean" and not value > 0:
                raise ValueError(f"prior '{name}' must be positive, got {value!r}")


@dataclass(frozen=True)
class ModelSpec:
    """What to fit.

    Parameters
    ----------
    taxon_level, specimen_level : bool or None
        Include the taxon / specimen level of the exponent hierarchy. ``None`` (default) includes a level
        when it has more than one group somewhere.
    deviation : {"normal", "student_t"}
        Distribution of the junction-level biological deviation of the parent from the law.
    likelihood : {"marginal", "latent"}
        ``marginal`` (default, fast) integrates the true daughter radii out with a second-order delta
        method, leaving no per-junction parameters; ``latent`` keeps every true daughter radius as a
        parameter (exact, slow; used to validate the fast form).
    parametrization : {"auto", "noncentered", "centered"}
        Parametrisation of the hierarchy's groups. ``auto`` (default) partially centres every group by the
        ratio of the spread between groups to the group's own posterior SD, both measured by a quick pilot
        (:mod:`allobranch.model.partial_centering`); ``centered`` / ``noncentered`` use one extreme for every
        group.
    asymmetry : {"empirical", "sampled"}
        The true daughters' spread about their junction mean (their asymmetry) has a normal prior with
        scale ``sigma_asym``, which shrinks the apparent asymmetry that measurement error adds.
        ``empirical`` (default) estimates ``sigma_asym`` per taxon by maximum marginal likelihood of the
        daughters' readings before sampling (thousands of daughters pin it down, and it frees the sampler
        from per-junction work); ``sampled`` gives it a prior and samples it (always so when the
        measurement error itself is estimated).
    fixed_exponent : float or None
        Fix the exponent of every junction to this value (a point law for the whole data set: no taxon
        or specimen level).
    fixed_taxa : mapping of str to float
        Fix the exponent of every junction of the named taxa (their taxon and specimen exponents); the rest
        of the model is unchanged.
    priors : Priors
        Prior scales.
    covariates : tuple of str
        Junction covariates of the exponent: columns read with the table (``covariates=`` of
        :func:`allobranch.read_junctions`) or the built-in ``log_parent_size`` (log10 of the parent's size
        in the table's unit). Each adds ``slope * (x - reference)`` to every junction's exponent.
    covariates_by_taxon : bool
        Let the slopes vary by taxon about an overall slope.
    covariate_ref : mapping of str to float
        Reference value of a covariate, where the specimen, taxon and population exponents are reported
        (default: the covariate's mean over the junctions).
    traits : tuple of str
        Taxon traits (columns of the table's attached trait table, :func:`allobranch.comparative.attach_traits`)
        whose slopes act on the taxon exponents (centred at their mean over taxa).
    phylogeny : bool
        Use the tree attached to the table (:func:`allobranch.comparative.attach_tree`): taxon deviations
        correlated by shared ancestry with Pagel's lambda estimated. Ignored when no tree is attached.
    pagel_lambda : float or None
        Fix Pagel's lambda under the tree at this value in [0, 1] (1: Brownian motion along the tree, 0: no
        phylogenetic signal) instead of estimating it (``None``, the default, with a uniform prior). With a
        few dozen taxa or fewer lambda is often poorly determined, and the population exponent's interval
        then depends on it; a fit at ``pagel_lambda=1`` shows how much (the fit warns when this applies).
    """

    taxon_level: bool | None = None
    specimen_level: bool | None = None
    deviation: str = "normal"
    likelihood: str = "marginal"
    parametrization: str = "auto"
    asymmetry: str = "empirical"
    fixed_exponent: float | None = None
    fixed_taxa: Mapping[str, float] = field(default_factory=dict)
    priors: Priors = field(default_factory=Priors)
    covariates: tuple[str, ...] = ()
    covariates_by_taxon: bool = False
    covariate_ref: Mapping[str, float] = field(default_factory=dict)
    traits: tuple[str, ...] = ()
    phylogeny: bool = True
    pagel_lambda: float | None = None

    def __post_init__(self) -> None:
        for name in ("covariates", "traits"):
            value = getattr(self, name)
            object.__setattr__(
                self, name, (value,) if isinstance(value, str) else tuple(str(v) for v in value)
            )
        object.__setattr__(
            self, "covariate_ref", {str(k): float(v) for k, v in dict(self.covariate_ref).items()}
        )
        unknown = set(self.covariate_ref) - set(self.covariates)
        if unknown:
            raise ValueError(f"covariate_ref names covariates not in the model: {', '.join(sorted(unknown))}")
        for name, allowed in (
            ("deviation", DEVIATIONS),
            ("likelihood", LIKELIHOODS),
            ("parametrization", PARAMETRIZATIONS),
            ("asymmetry", ASYMMETRY),
        ):
            if getattr(self, name) not in allowed:
                raise ValueError(f"{name} must be one of {', '.join(allowed)}; got {getattr(self, name)!r}")
        if self.fixed_exponent is not None and self.fixed_taxa:
            raise ValueError("give either fixed_exponent (all taxa) or fixed_taxa (some taxa), not both")
        for label, value in {"fixed_exponent": self.fixed_exponent, **dict(self.fixed_taxa)}.items():
            if value is not None and not (0 < float(value) < 20):
                raise ValueError(f"fixed exponent for {label!r} must lie in (0, 20), got {value!r}")
        object.__setattr__(self, "fixed_taxa", {str(k): float(v) for k, v in dict(self.fixed_taxa).items()})
        if self.pagel_lambda is not None:
            lam = float(self.pagel_lambda)
            if not 0.0 <= lam <= 1.0:
                raise ValueError(f"pagel_lambda must lie in [0, 1] (or be None to estimate it); got {lam!r}")
            object.__setattr__(self, "pagel_lambda", lam)

    def with_(self, **changes: Any) -> ModelSpec:
        """Return a copy with some fields changed."""
        return replace(self, **changes)

    def to_dict(self) -> dict[str, Any]:
        """Plain-dict form for provenance."""
        out = asdict(self)
        out["fixed_taxa"] = dict(self.fixed_taxa)
        out["covariates"] = list(self.covariates)
        out["traits"] = list(self.traits)
        out["covariate_ref"] = dict(self.covariate_ref)
        return out

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> ModelSpec:
        """Inverse of :meth:`to_dict`."""
        data = dict(data)
        data["priors"] = Priors(**data.get("priors", {}))
        return cls(**data)
