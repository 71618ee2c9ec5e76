"""Compare branching laws: fit the hypotheses, gather the evidence side by side, and decide per scope."""

from __future__ import annotations

import time
from collections.abc import Iterable, Mapping, Sequence
from concurrent.futures import Executor
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from allobranch.comparison import bayes_factor, jobs, loo, ranges, rope, verdict
from allobranch.comparison.laws import FREE, SCOPES, Law, resolve_laws
from allobranch.comparison.linear_terms import taxon_prior_terms, uses_tree
from allobranch.conventions import (
    BY_TAXON_LAW_COLUMNS,
    EVIDENCE_COLUMNS,
    LAWS_OVER_RANGE_FILE,
    LAWS_TABLE_COLUMNS,
    OLD_POPULATION_SCOPE,
    POPULATION,
)
from allobranch.errors import InputError
from allobranch.inference.fit import LOGLIK_VAR
from allobranch.inference.results import FitResult
from allobranch.intake.table import JunctionTable
from allobranch.model.spec import SAMPLER_DEFAULTS, ModelSpec


@dataclass
class LawComparison:
    """Evidence for and against branching laws, per scope, with a verdict for each scope.

    Attributes
    ----------
    evidence : pandas.DataFrame
        Long table, one row per scope and hypothesis (the free model included), columns
        :data:`~allobranch.conventions.EVIDENCE_COLUMNS`. ``scope`` is ``"population"`` (every taxon shares
        the law's exponent) or a taxon label.
    verdicts : pandas.DataFrame
        Columns ``scope``, ``verdict`` (a law's label, ``"none"`` or ``"undecided"``), ``reason``.
    laws : tuple of Law
    delta : float
        ROPE half-width.
    warnings : list of str
        Everything the reader must know: unreliable LOO (naming junctions), failed diagnostics of any fit,
        overlapping ROPEs, unreliable prior-sensitivity reweighting.
    settings : dict
        Seed, sampler settings, number of fits and runtime in seconds.
    free_fit : FitResult
        The fit of the free model (the source of the Bayes factors and ROPE probabilities).
    over_range : pandas.DataFrame
        Every law's ROPE check over each covariate range asked for (``law_range``), per scope: columns
        :data:`~allobranch.comparison.ranges.RANGE_COLUMNS`; empty when no range was asked for.
    """

    evidence: pd.DataFrame
    verdicts: pd.DataFrame
    laws: tuple[Law, ...]
    delta: float
    warnings: list[str] = field(default_factory=list)
    settings: dict = field(default_factory=dict)
    free_fit: FitResult | None = None
    over_range: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=list(ranges.RANGE_COLUMNS)))

    @property
    def population(self) -> pd.DataFrame:
        """One row per hypothesis of the population scope (columns
        :data:`~allobranch.conventions.EVIDENCE_COLUMNS`)."""
        return self.evidence[self.evidence["scope"] == POPULATION].reset_index(drop=True)

    @property
    def by_taxon(self) -> pd.DataFrame:
        """One row per taxon: ``taxon``, ``verdict``, ``reason``, then per law ``<column>_<label>`` for the
        columns :data:`~allobranch.conventions.BY_TAXON_LAW_COLUMNS`, and ``elpd_diff_free``, ``dse_free``, ``weight_free``."""
        taxa = [t for t in self.settings.get("taxa", []) if t in set(self.evidence["scope"])]
        rows = []
        verdicts = self.verdicts.set_index("scope")
        for taxon in taxa:
            ev = self.evidence[self.evidence["scope"] == taxon].set_index("law")
            row: dict = {
                "taxon": taxon,
                "verdict": verdicts.at[taxon, "verdict"],
                "reason": verdicts.at[taxon, "reason"],
            }
            for law in self.laws:
                row.update({f"{c}_{law.label}": ev.at[law.label, c] for c in BY_TAXON_LAW_COLUMNS})
            row.update({f"{c}_{FREE}": ev.at[FREE, c] for c in ("elpd_diff", "dse", "weight")})
            k = ev["n_high_k"].max()  # NaN when the scope had no LOO (taxa on a tree)
            row["n_high_k"] = int(k) if np.isfinite(k) else 0
            rows.append(row)
        columns = [
            "taxon",
            "verdict",
            "reason",
            *(f"{c}_{law.label}" for law in self.laws for c in BY_TAXON_LAW_COLUMNS),
            *(f"{c}_{FREE}" for c in ("elpd_diff", "dse", "weight")),
            "n_high_k",
        ]
        return pd.DataFrame(rows, columns=columns)

    def laws_table(self) -> pd.DataFrame:
        """Long form for the law-comparison figure: columns :data:`~allobranch.conventions.LAWS_TABLE_COLUMNS`,
        every scope."""
        return self.evidence[list(LAWS_TABLE_COLUMNS)].reset_index(drop=True)

    def to_markdown(self) -> str:
        """A report: verdicts, evidence tables, the decision rule, the caveats and every warning."""
        fmt = {"index": False, "floatfmt": ".3g"}
        s = self.settings
        law_list = ", ".join(f"{law.label} (a = {law.value:g})" for law in self.laws)
        lines = [
            "# Branching-law comparison",
            "",
            f"Laws: {law_list}; free model: exponent estimated. ROPE half-width delta = {self.delta:g}.",
            f"Fits: {s.get('n_fits')} (draws {s.get('draws')}, tune {s.get('tune')}, chains {s.get('chains')}, "
            f"seed {s.get('seed')}); runtime {s.get('seconds', float('nan')):.0f} s.",
            "",
            "## Verdicts",
            "",
            self.verdicts.to_markdown(**fmt),
            "",
        ]
        if not self.population.empty:
            lines += [
                "## Population (all taxa share the exponent)",
                "",
                self.population.to_markdown(**fmt),
                "",
            ]
        by_taxon = self.by_taxon
        if not by_taxon.empty:
            keep = [
                "taxon",
                "verdict",
                *(f"{c}_{law.label}" for law in self.laws for c in ("p_rope", "log10_bf", "elpd_diff")),
            ]
            lines += [
                "## By taxon (one taxon's exponent fixed at a time)",
                "",
                by_taxon[keep].to_markdown(**fmt),
                "",
                "Full per-taxon evidence (Bayes-factor sensitivity, weights): laws_by_taxon.csv / "
                "`LawComparison.by_taxon`.",
                "",
            ]
        if len(self.over_range):
            lines += [
                "## Laws over a covariate range",
                "",
                ranges.RANGE_RULE,
                "",
                *(f"- {line}" for line in ranges.range_lines(self.over_range)),
                "",
                f"Full table: {LAWS_OVER_RANGE_FILE} / `LawComparison.over_range`.",
                "",
            ]
        lines += [
            "## Decision rule",
            "",
            verdict.VERDICT_RULE,
            "",
            "## Caveats",
            "",
            f"- {loo.CAVEAT}",
            f"- {bayes_factor.CAVEAT}",
            f"- {rope.CAVEAT}",
            "",
        ]
        lines += ["## Warnings", ""] + ([f"- {w}" for w in self.warnings] or ["- none"])
        return "\n".join(lines) + "\n"


def _check_scopes(scopes: Iterable[str]) -> tuple[str, ...]:
    """The scopes asked for, checked (the older name ``"overall"`` is read as ``"population"``)."""
    given = [scopes] if isinstance(scopes, str) else scopes
    scopes = tuple(dict.fromkeys(POPULATION if s == OLD_POPULATION_SCOPE else str(s) for s in given))
    bad = [s for s in scopes if s not in SCOPES]
    if bad or not scopes:
        raise InputError(f"scopes must be one or both of {', '.join(SCOPES)}; got {', '.join(bad) or 'none'}")
    return scopes


def _free_fit(
    table_or_fit: JunctionTable | FitResult, fit: FitResult | None, spec: ModelSpec | None
) -> tuple[FitResult | None, JunctionTable]:
    """The given free model's fit (None when it is to be fitted here) and the table to fit the laws to."""
    if isinstance(table_or_fit, FitResult):
        if fit is not None:
            raise InputError("the free fit was given twice (as the first argument and as fit=); give it once")
        fit, table = table_or_fit, table_or_fit.table
    elif isinstance(table_or_fit, JunctionTable):
        table = table_or_fit
        if fit is not None:
            made_from = fit.provenance.get("input_sha256")
            if made_from is not None and made_from != table.digest():
                raise InputError(
                    "the saved fit was made from other data than this junction table (different "
                    "content hash): give the table and mapping the fit was made from, or refit"
                )
    else:
        raise InputError(
            f"compare_laws needs a JunctionTable or a FitResult, got {type(table_or_fit).__name__}"
        )
    if fit is not None:
        if fit.spec.fixed_exponent is not None or fit.spec.fixed_taxa:
            raise InputError("the given fit has a fixed exponent; the comparison needs the free model's fit")
        if spec is not None and spec != fit.spec:
            raise InputError(
                "spec differs from the given fit's specification; leave spec out to use the fit's"
            )
        return fit, table
    if spec is not None and (spec.fixed_exponent is not None or spec.fixed_taxa):
        raise InputError("spec must describe the free model: leave fixed_exponent and fixed_taxa empty")
    return None, table


def _law_fit_warning(result: FitResult, law: str, scope: str) -> str | None:
    """One line for a law's fit that failed its checks: the problems, not the advice."""
    if not result.warnings:
        return None
    where = POPULATION if scope == POPULATION else f"taxon {scope}"
    problems = "; ".join(w.split(". ")[0] for w in result.warnings)
    return (
        f"fit of {law} ({where}): {problems} -> its LOO terms are less trustworthy; run longer "
        "(--draws/--tune)"
    )


def _scope_rows(
    scope: str,
    loo_result: loo.LooComparison | None,
    bf: pd.DataFrame,
    draws: np.ndarray,
    laws: Sequence[Law],
    delta: float,
) -> list[dict]:
    rows = []
    table = loo_result.table if loo_result is not None else pd.DataFrame(index=[FREE])
    labels = list(table.index) + [law.label for law in laws if law.label not in table.index]
    for label in labels:
        stats = table.loc[label] if label in table.index and len(table.columns) else pd.Series(dtype=float)
        row = {"scope": scope, "law": label, **stats.to_dict()}
        law = next((law for law in laws if law.label == label), None)
        if law is None:
            row.update(
                value=np.nan,
                log10_bf=np.nan,
                bf_method="",
                log10_bf_narrow=np.nan,
                log10_bf_wide=np.nan,
                p_rope=np.nan,
            )
        else:
            b = bf[(bf["scope"] == scope) & (bf["law"] == label)].iloc[0]
            row.update(
                value=law.value,
                **{c: b[c] for c in ("log10_bf", "bf_method", "log10_bf_narrow", "log10_bf_wide")},
                p_rope=rope.p_rope(draws, law.value, delta),
            )
        rows.append(row)
    return rows


def compare_laws(
    table_or_fit: JunctionTable | FitResult,
    laws: Iterable[str | Law] | Mapping[str, float | str] | None = None,
    *,
    delta: float = rope.DEFAULT_DELTA,
    scopes: Iterable[str] = SCOPES,
    seed: int = 0,
    draws: int | None = None,
    tune: int | None = None,
    chains: int | None = None,
    sampler: str = "nutpie",
    target_accept: float | None = None,
    spec: ModelSpec | None = None,
    progress: bool = False,
    fit: FitResult | None = None,
    workers: int | None = None,
    executor: Executor | None = None,
    escalate: bool = True,
    law_range: Mapping[str, tuple[float, float]] | None = None,
) -> LawComparison:
    """Compare point laws for the branching exponent with the free model, for the population and per taxon.

    For each scope the free model and every law (the exponent fixed at the law's value) are fitted to the
    same junctions. Three kinds of evidence are reported side by side, each with its caveat: PSIS-LOO
    (ELPD differences, stacking weights, Pareto-k counts; :mod:`allobranch.comparison.loo`), Savage–Dickey
    Bayes factors of each law against the free model with their prior sensitivity
    (:mod:`allobranch.comparison.bayes_factor`), and the posterior probability that the exponent lies
    within ``+/- delta`` of each law (:mod:`allobranch.comparison.rope`). A conservative rule turns them
    into a verdict per scope (:mod:`allobranch.comparison.verdict`).

    Parameters
    ----------
    table_or_fit : JunctionTable or FitResult
        The junctions, or a fit of the free model (whose table and specification are then used).
    laws : iterable of str or Law, or mapping of label to value, optional
        Laws to compare: classic names (``"murray"``, ``"da_vinci"``, ``"rall"``) or ``"LABEL=VALUE"``
        (fractions allowed, e.g. ``"turbulent=7/3"``). Default: Rall (3/2), da Vinci (2), Murray (3).
    delta : float
        Half-width of each law's region of practical equivalence (default 0.25, half the gap between 3/2
        and 2).
    scopes : iterable of {"population", "taxon"}
        ``population``: all taxa share the law's exponent; ``taxon``: one taxon at a time has it. With one
        taxon, the taxon scope re-uses the population fits (the two models are then the same).
    seed : int
        Seed of the free model's fit (as in :func:`allobranch.fit`); every law's fit gets its own seed
        derived from it, and it seeds the prior Monte Carlo.
    draws, tune, chains : int, optional
        Sampler settings of every fit; default: the given free fit's settings, else
        :data:`~allobranch.model.spec.SAMPLER_DEFAULTS`.
    sampler : {"nutpie", "pymc"}
        NUTS implementation.
    target_accept : float, optional
        NUTS target acceptance of the first attempt of every fit (default:
        :func:`~allobranch.model.spec.sampler_defaults` for the table; each fit escalates on its own when
        it fails its checks).
    spec : ModelSpec, optional
        Specification of the free model when it is fitted here (no fixed exponents); the laws' models
        differ from it only in the fixed exponent.
    progress : bool
        Print which hypothesis is being fitted and show the sampler's progress.
    fit : FitResult, optional
        A saved fit of the free model of ``table_or_fit`` to re-use instead of refitting it.
    workers : int, optional
        Local worker processes running the fits (default: one per processor core, at most one per fit;
        1 runs them in this process). The results do not depend on it: every fit's seed is derived from
        ``seed`` and the fit's scope and law only (:mod:`allobranch.comparison.jobs`).
    executor : concurrent.futures.Executor, optional
        Run the fits on this executor instead of local processes.
    escalate : bool
        Let every fit refit itself when its first attempt fails its checks (as :func:`allobranch.fit`).
    law_range : mapping of covariate name to (low, high), optional
        Also check every law over these ranges of the model's covariates (e.g.
        ``{"log_parent_size": (-1, 1)}``): per scope, the joint probability that the exponent stays within
        ``+/- delta`` of the law over the whole range, a verdict (holds / rejected / undecided) and the
        sub-range where the law is supported (:mod:`allobranch.comparison.ranges`;
        :attr:`LawComparison.over_range`).

    Returns
    -------
    LawComparison
        ``.population``, ``.by_taxon``, ``.verdicts``, ``.warnings``, ``.laws_table()``, ``.to_markdown()``.

    Raises
    ------
    InputError
        For unknown or badly written laws, bad ``delta`` or ``scopes``, a taxon named ``"population"``, or a
        given fit that is not the free model of this table.

    Examples
    --------
    >>> import allobranch as ab                                            # doctest: +SKIP
    >>> sim = ab.simulate_junctions(taxa=2, seed=1)
    >>> table = ab.read_junctions(sim.frame, sim.mapping)
    >>> result = ab.compare_laws(table, ["murray", "da_vinci", "turbulent=7/3"], seed=1)
    >>> result.verdicts
    """
    started = time.perf_counter()
    laws = resolve_laws(laws)
    try:
        delta = rope.check_delta(delta)
    except ValueError as exc:
        raise InputError(str(exc)) from None
    scopes = _check_scopes(scopes)
    given = fit if fit is not None else (table_or_fit if isinstance(table_or_fit, FitResult) else None)
    base = given.settings if given is not None else {}
    defaults = SAMPLER_DEFAULTS
    sampler_kw = {
        "draws": int(draws or base.get("draws", defaults["draws"])),
        "tune": tune or base.get("tune"),  # None: the fit's default for the table's size
        "chains": int(chains or base.get("chains", defaults["chains"])),
        "sampler": sampler,
        "target_accept": target_accept,  # None: the fit's default for the table's size
        "escalate": bool(escalate),
    }
    given_fit, table = _free_fit(table_or_fit, fit, spec)
    taxa = [str(t) for t in table.taxa]
    if "taxon" in scopes and POPULATION in taxa:
        raise InputError(
            f"a taxon is named '{POPULATION}', which is the name of the all-taxa scope; rename the taxon"
        )
    free_spec = given_fit.spec if given_fit is not None else (spec or ModelSpec())
    law_range = ranges.check_law_ranges(law_range, free_spec.covariates)  # before the long fits
    plan = jobs.plan_jobs(laws, taxa, scopes, seed, include_free=given_fit is None)
    tree = uses_tree(table, free_spec)
    if tree:  # a law pinning one taxon of a tree is not a model the fitter samples: no per-taxon LOO
        plan = [j for j in plan if j.scope == POPULATION]
    log = jobs.stderr_log(progress)
    log(f"{len(plan)} fits to run")
    fits = jobs.run_jobs(
        table, free_spec, plan, {**sampler_kw, "progress": False}, workers=workers, executor=executor, log=log
    )
    free = given_fit if given_fit is not None else fits[(POPULATION, FREE)]

    warnings = rope.overlapping_laws(laws, delta)
    warnings += [f"fit of the free model: {w}" for w in free.warnings]
    per_scope: dict[str, dict] = {}
    scope_names = [
        scope for scope in [POPULATION, *taxa] if any(j.scope == scope and j.law != FREE for j in plan)
    ]
    if tree and "taxon" in scopes and len(taxa) > 1:
        scope_names += list(taxa)
        warnings.append(
            "taxa share a tree: the per-taxon verdicts rest on P(ROPE) and the Bayes factor only (a law "
            "fixing one taxon's exponent under the tree is not refitted, so there is no per-taxon LOO)"
        )
    for scope in scope_names:
        per_scope[scope] = {FREE: free}  # fits, so LOO can recompute a saved fit's log-likelihood
        for law in laws:
            if (scope, law.label) not in fits:
                continue
            result = fits[(scope, law.label)]
            message = _law_fit_warning(result, law.label, scope)
            if message:
                warnings.append(message)
            per_scope[scope][law.label] = result
    if "taxon" in scopes and len(taxa) == 1:
        per_scope[taxa[0]] = per_scope[POPULATION]
        warnings.append(f"one taxon ({taxa[0]}): its comparison is the population one (same models)")
    if POPULATION not in scopes:
        per_scope.pop(POPULATION, None)
    n_fits = len(plan)

    bf, bf_warnings = bayes_factor.bayes_factor_table(
        free.idata,
        free.spec.priors,
        laws,
        taxa if "taxon" in scopes else None,
        include_population=POPULATION in scopes,
        seed=seed,
        taxon_priors=taxon_prior_terms(table, free.spec),
    )
    warnings += bf_warnings
    post = free.idata.posterior
    rows = []
    for scope, idatas in per_scope.items():
        result = loo.compare_loo(idatas, var_name=LOGLIK_VAR) if len(idatas) > 1 else None
        message = loo.high_k_warning(scope, result) if result is not None else None
        if message:
            warnings.append(message)
        draws_ = post["mu"].values if scope == POPULATION else post["a_taxon"].sel(taxon=scope).values
        rows += _scope_rows(scope, result, bf, draws_, laws, delta)
    tail = bf[bf["bf_method"] == "normal_approx"]
    if len(tail):
        warnings.append(
            f"{len(tail)} Bayes factor(s) use a normal approximation to the posterior (the law lies "
            "in the far tail of the draws): only their order of magnitude is meaningful"
        )
    evidence = pd.DataFrame(rows, columns=list(EVIDENCE_COLUMNS))
    range_scopes = ([POPULATION] if POPULATION in scopes else []) + (taxa if "taxon" in scopes else [])
    over_range, range_warnings = ranges.laws_over_range(
        free, laws, law_range, delta=delta, scopes=range_scopes
    )
    warnings += range_warnings
    first = (free.settings.get("attempts") or [{}])[0]
    settings = {
        **sampler_kw,
        "tune": sampler_kw["tune"] or free.settings.get("tune"),  # as used, when left to the default
        "target_accept": sampler_kw["target_accept"] or first.get("target_accept"),
        "seed": seed,
        "taxa": taxa,
        "scopes": list(scopes),
        "n_fits": n_fits,
        "seconds": round(time.perf_counter() - started, 1),
    }
    return LawComparison(
        evidence=evidence,
        verdicts=verdict.verdict_table(evidence),
        laws=laws,
        delta=delta,
        warnings=warnings,
        settings=settings,
        free_fit=free,
        over_range=over_range,
    )
