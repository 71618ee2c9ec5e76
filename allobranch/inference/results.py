"""The fitted-results object: InferenceData plus tidy summaries, diagnostics and provenance."""

from __future__ import annotations

import json
import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
import xarray as xr

from allobranch.comparative.phylogeny import restore_attachments
from allobranch.conventions import SUMMARY_STATS
from allobranch.errors import InputError, Problem
from allobranch.geometry import junction_geometry, naive_summary
from allobranch.inference import diagnostics as dg
from allobranch.intake.mapping import ColumnMapping
from allobranch.intake.table import JunctionTable, ValidationReport
from allobranch.intake.units import from_internal_radius
from allobranch.model.spec import ModelSpec
from allobranch.model.structure import HYPER_PARAMETERS

#: Default probability of the highest-density intervals.
HDI_PROB = 0.9
#: Columns of :meth:`FitResult.exponents`.
EXPONENT_COLUMNS = ("level", "group", "taxon", *SUMMARY_STATS, "ess_tail", "fixed")
#: Plain-language meaning of each variance component.
COMPONENTS = {
    "tau_taxon": "between-taxon SD of the exponent",
    "tau_specimen": "between-specimen SD of the exponent (within taxon)",
    "pagel_lambda": "Pagel's lambda: share of the between-taxon variance that follows the tree (0 none, 1 Brownian)",
    "sigma_dev": "junction-level biological deviation of log parent radius from the law",
    "rel_error": "relative measurement error (log-scale SD), estimated",
    "sigma_asym": "SD of true log daughter radius about its junction mean (asymmetry)",
    "nu": "Student-t degrees of freedom of the deviation",
}

#: Posterior-predictive draws a saved fit keeps (all chains together; :meth:`FitResult.ppc_table` shows
#: at most this many by default, and the same ones before and after saving).
SAVED_PREDICTIVE_DRAWS = 50


def _summ(draws: np.ndarray, hdi_prob: float) -> dict[str, float]:
    """Mean, SD and HDI of draws shaped (chain, draw)."""
    flat = draws.reshape(-1)
    if np.ptp(flat) == 0:
        return {
            "mean": float(flat[0]),
            "sd": 0.0,
            "hdi_low": float(flat[0]),
            "hdi_high": float(flat[0]),
            "r_hat": np.nan,
            "ess_bulk": np.nan,
            "ess_tail": np.nan,
        }
    lo, hi = az.hdi(flat, hdi_prob=hdi_prob)  # ArviZ HDI
    return {
        "mean": float(flat.mean()),
        "sd": float(flat.std(ddof=1)),
        "hdi_low": float(lo),
        "hdi_high": float(hi),
        "r_hat": float(az.rhat(draws)),
        "ess_bulk": float(az.ess(draws, method="bulk")),
        "ess_tail": float(az.ess(draws, method="tail")),
    }


@dataclass
class FitResult:
    """A fitted model with tidy summaries.

    Attributes
    ----------
    idata : arviz.InferenceData
        Groups ``posterior``, ``sample_stats``, ``log_likelihood`` (variable ``loglik``: one term per
        junction), ``posterior_predictive`` and ``observed_data`` (``log_parent``); provenance as JSON in
        ``idata.attrs["allobranch_provenance"]``.
    table : JunctionTable
        The data that were fitted.
    spec : ModelSpec
    settings : dict
        Sampler settings and timing.
    notes : list of str
        Things the user should know that are not diagnostics failures (e.g. a sampler fallback).
    """

    idata: az.InferenceData
    table: JunctionTable
    spec: ModelSpec
    settings: dict
    notes: list[str] = field(default_factory=list)

    # -- summaries ------------------------------------------------------------------------------------
    def exponents(self, hdi_prob: float = HDI_PROB) -> pd.DataFrame:
        """Population, taxon and specimen exponents.

        Returns
        -------
        pandas.DataFrame
            Columns :data:`EXPONENT_COLUMNS`; ``attrs["hdi_prob"]`` records the HDI probability.
        """
        post = self.idata.posterior
        rows = [
            {
                "level": "population",
                "group": "all",
                "taxon": "all",
                **_summ(post["mu"].values, hdi_prob),
                "fixed": self.spec.fixed_exponent is not None,
            }
        ]
        for i, t in enumerate(post["taxon"].values):
            fixed = self.spec.fixed_exponent is not None or str(t) in self.spec.fixed_taxa
            rows.append(
                {
                    "level": "taxon",
                    "group": str(t),
                    "taxon": str(t),
                    **_summ(post["a_taxon"].values[:, :, i], hdi_prob),
                    "fixed": fixed,
                }
            )
        if "tau_specimen" in post:
            spec_taxon = self.table.specimens.set_index("specimen")["taxon"].astype(str)
            for i, s in enumerate(post["specimen"].values):
                rows.append(
                    {
                        "level": "specimen",
                        "group": str(s),
                        "taxon": spec_taxon[str(s)],
                        **_summ(post["a_specimen"].values[:, :, i], hdi_prob),
                        "fixed": spec_taxon[str(s)] in self.spec.fixed_taxa,
                    }
                )
        out = pd.DataFrame(rows, columns=list(EXPONENT_COLUMNS))
        out.attrs["hdi_prob"] = hdi_prob
        return out

    def variance_components(self, hdi_prob: float = HDI_PROB) -> pd.DataFrame:
        """Between-taxon and between-specimen SDs, biological deviation, measurement error, asymmetry."""
        post = self.idata.posterior
        rows = []
        for name, text in COMPONENTS.items():
            if name in post:
                rows.append(
                    {
                        "component": name,
                        "meaning": text,
                        "source": "posterior",
                        **_summ(post[name].values, hdi_prob),
                    }
                )
        if (
            "pagel_lambda" not in post
            and self.spec.pagel_lambda is not None
            and self.settings.get("phylogeny")
        ):
            lam = float(self.spec.pagel_lambda)
            rows.append(
                {
                    "component": "pagel_lambda",
                    "meaning": COMPONENTS["pagel_lambda"],
                    "source": "fixed by the user (pagel_lambda)",
                    "mean": lam,
                    "sd": 0.0,
                    "hdi_low": lam,
                    "hdi_high": lam,
                }
            )
        mode = self.settings.get("error_mode")
        if mode == "known":
            rel = float(self.table.rel_error)
            rows.append(
                {
                    "component": "rel_error",
                    "meaning": "relative measurement error, given by the user",
                    "source": "known",
                    "mean": rel,
                    "sd": 0.0,
                    "hdi_low": rel,
                    "hdi_high": rel,
                }
            )
        for taxon, value in (self.settings.get("sigma_asym_empirical") or {}).items():
            rows.append(
                {
                    "component": "sigma_asym",
                    "meaning": f"{COMPONENTS['sigma_asym']}; taxon {taxon}",
                    "source": "empirical (max. marginal likelihood)",
                    "mean": value,
                    "sd": np.nan,
                    "hdi_low": np.nan,
                    "hdi_high": np.nan,
                }
            )
        out = pd.DataFrame(
            rows,
            columns=[
                "component",
                "meaning",
                "source",
                *SUMMARY_STATS,
                "ess_tail",
            ],
        )
        out.attrs["hdi_prob"] = hdi_prob
        return out

    # -- diagnostics ----------------------------------------------------------------------------------
    def checked_parameters(self) -> list[str]:
        """Hyper-parameters and exponents whose convergence is checked."""
        return [v for v in (*HYPER_PARAMETERS, "a_taxon", "a_specimen") if v in self.idata.posterior]

    def diagnostics(self) -> pd.DataFrame:
        """R-hat, bulk and tail ESS of every checked parameter, and whether each passes."""
        return dg.diagnostics_table(self.idata, self.checked_parameters())

    def sampler_checks(self) -> dict[str, float]:
        """Divergences, minimum E-BFMI, chains and draws."""
        return dg.sampler_checks(self.idata)

    @property
    def warnings(self) -> list[str]:
        """Every failed diagnostic, in plain words with what to try, plus model caveats."""
        out = dg.diagnostic_warnings(self.diagnostics(), self.sampler_checks())
        if self.settings.get("error_mode") == "unknown":
            out.append(
                "no measurement error was given (no relative error, SE column or repeat readings): the model "
                "cannot tell measurement error from biological deviation, so rel_error rests on its prior "
                "and sigma_dev absorbs the rest. Give the error if you know it."
            )
        lam_note = dg.pagel_lambda_caveat(self.idata.posterior, len(self.table.taxa))
        if lam_note:
            out.append(lam_note)
        return out

    @property
    def converged(self) -> bool:
        """True when every diagnostic passes."""
        return not dg.diagnostic_warnings(self.diagnostics(), self.sampler_checks())

    # -- data-side tables -----------------------------------------------------------------------------
    def geometry(self) -> pd.DataFrame:
        """Per-junction descriptive geometry (naive exponents etc.) of the fitted table, with a boolean
        ``flagged`` column marking junctions that validation flagged."""
        geo = junction_geometry(self.table)
        rows = {p.row for p in self.table.report.flags if p.row is not None}
        geo["flagged"] = geo["source_row"].isin(rows).astype(bool)
        return geo

    def naive_vs_model(self, hdi_prob: float = HDI_PROB) -> pd.DataFrame:
        """Taxon exponents from the model beside the naive per-junction summary (which ignores error)."""
        naive = naive_summary(self.geometry(), by=("taxon",))
        naive = naive.rename(
            columns={"median": "naive_median", "q25": "naive_q25", "q75": "naive_q75", "mean": "naive_mean"}
        )
        model = self.exponents(hdi_prob)
        model = model[model["level"] == "taxon"]
        keep = ["taxon", "naive_median", "naive_q25", "naive_q75", "naive_mean", "n_junctions", "n_no_root"]
        out = model.merge(naive[[c for c in keep if c in naive.columns]], on="taxon", how="left")
        out.attrs["hdi_prob"] = hdi_prob
        return out

    def ppc_table(self, max_draws: int = SAVED_PREDICTIVE_DRAWS) -> pd.DataFrame:
        """Observed and posterior-predictive parent radii (user's unit) by taxon, long format."""
        unit = self.table.unit
        taxa = self.table.data["taxon"].astype(str).to_numpy()
        obs = from_internal_radius(np.exp(self.idata.observed_data["log_parent"].values), unit)
        pred = self.idata.posterior_predictive["log_parent"].values
        pred = pred.reshape(-1, pred.shape[-1])
        frames = [pd.DataFrame({"taxon": taxa, "source": "observed", "value": obs, "draw": -1})]
        for k, row in enumerate(pred[_ppc_rows(len(pred), max_draws)]):
            frames.append(
                pd.DataFrame(
                    {
                        "taxon": taxa,
                        "source": "predicted",
                        "value": from_internal_radius(np.exp(row), unit),
                        "draw": k,
                    }
                )
            )
        return pd.concat(frames, ignore_index=True)

    @property
    def provenance(self) -> dict:
        """Input hash, mapping, spec, settings and package versions."""
        return json.loads(self.idata.attrs.get("allobranch_provenance", "{}"))

    # -- persistence ----------------------------------------------------------------------------------
    def save(self, path: str | os.PathLike, *, keep_log_likelihood: bool = False) -> Path:
        """Write to NetCDF atomically (the junction table and validation report go into the attributes).

        The file keeps what later commands need: the posterior and sampler statistics, the observed data,
        :data:`SAVED_PREDICTIVE_DRAWS` posterior-predictive draws (those :meth:`ppc_table` shows), the table
        and the provenance. The pointwise log-likelihood (draws x junctions, 3.2 GB per 10^5 junctions at
        4 x 1000 draws) is left out: it is recomputed exactly from the posterior and the table, in blocks of
        junctions, when LOO needs it (:func:`allobranch.comparison.loo.elpd_loo`).

        Parameters
        ----------
        path : str or path-like
            Destination (``fit.nc``); its folder must exist.
        keep_log_likelihood : bool
            Also store the pointwise log-likelihood.

        Returns
        -------
        Path
        """
        path = Path(path)
        idata = self._lean_idata(keep_log_likelihood)
        idata.attrs["allobranch_table"] = _exact_csv(self.table.data)
        idata.attrs["allobranch_report"] = self.table.report.to_frame().to_json(orient="split")
        idata.attrs["allobranch_settings"] = json.dumps(self.settings, default=str)
        idata.attrs["allobranch_notes"] = json.dumps(self.notes)
        if self.table.repeats is not None:
            idata.attrs["allobranch_repeats"] = _exact_csv(self.table.repeats)
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
        os.close(fd)
        try:
            idata.to_netcdf(tmp)
            os.replace(tmp, path)
        finally:
            if os.path.exists(tmp):
                os.unlink(tmp)
        return path

    def _lean_idata(self, keep_log_likelihood: bool) -> az.InferenceData:
        """The groups a saved fit keeps (shared with this fit, not copied), with its attributes."""
        groups = {g: self.idata[g] for g in self.idata.groups()}
        if not keep_log_likelihood:
            groups.pop("log_likelihood", None)
        if "posterior_predictive" in groups:
            groups["posterior_predictive"] = _kept_draws(
                groups["posterior_predictive"], SAVED_PREDICTIVE_DRAWS
            )
        idata = az.InferenceData(**groups)
        idata.attrs.update(self.idata.attrs)
        return idata

    @classmethod
    def load(cls, path: str | os.PathLike) -> FitResult:
        """Read a result written by :meth:`save`.

        Parameters
        ----------
        path : str or path-like
            The ``fit.nc`` file.

        Returns
        -------
        FitResult
            The fit, its junction table, validation report, spec, settings and notes.

        Raises
        ------
        InputError
            If there is no file at ``path``, or it is not a saved allobranch fit (another NetCDF file, a
            damaged or truncated file, or no NetCDF at all).
        """
        path = Path(path)
        if not path.is_file():
            raise _load_error(
                path, "no saved fit here", "give the fit.nc written by 'allobranch fit'", "file_not_found"
            )
        try:
            idata = az.from_netcdf(path)
        except (
            Exception
        ) as exc:  # h5py, h5netcdf and xarray raise many unrelated types for foreign or damaged files
            raise _not_a_fit(path, exc) from None
        try:
            return cls._from_saved(idata)
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            raise _not_a_fit(path, exc) from None

    @classmethod
    def _from_saved(cls, idata: az.InferenceData) -> FitResult:
        """Rebuild a result from the attributes :meth:`save` wrote (KeyError etc. when they are not there)."""
        attrs = idata.attrs
        prov = json.loads(attrs["allobranch_provenance"])
        data = _read_exact_csv(attrs["allobranch_table"])
        rep = pd.read_json(_io(attrs["allobranch_report"]), orient="split")
        repeats = _read_exact_csv(attrs["allobranch_repeats"]) if "allobranch_repeats" in attrs else None
        problems = [
            Problem(**{k: (None if pd.isna(v) else v) for k, v in r.items()}) for r in rep.to_dict("records")
        ]
        mapping = ColumnMapping(
            **{k: (tuple(v) if isinstance(v, list) else v) for k, v in prov["mapping"].items()}
        )
        table = JunctionTable(
            data=data,
            mapping=mapping,
            report=ValidationReport(problems=problems),
            source=prov.get("source", "<DataFrame>"),
            repeats=repeats,
        )
        settings = json.loads(attrs.get("allobranch_settings", "{}"))
        return cls(
            idata=idata,
            table=restore_attachments(table, settings),  # the tree and traits the fit used
            spec=ModelSpec.from_dict(prov["spec"]),
            settings=settings,
            notes=json.loads(attrs.get("allobranch_notes", "[]")),
        )


def _load_error(path: Path, message: str, hint: str, code: str) -> InputError:
    return InputError([Problem("fatal", str(path), None, None, message, hint, code)])


def _not_a_fit(path: Path, exc: Exception) -> InputError:
    """The error for a file that :meth:`FitResult.load` cannot read as a saved fit; names the cause briefly."""
    cause = str(exc).splitlines()[0][:160] if str(exc) else ""
    reason = f"{type(exc).__name__}: {cause}" if cause else type(exc).__name__
    return _load_error(
        path,
        f"not a saved allobranch fit or damaged ({reason})",
        "refit with 'allobranch fit' (or allobranch.fit in Python), or give the fit.nc that it wrote",
        "not_a_fit",
    )


def _ppc_rows(n_rows: int, max_draws: int) -> np.ndarray:
    """Positions of the (chain-major) predictive draws shown or kept: every ``n_rows // max_draws``-th."""
    step = max(1, n_rows // max_draws)
    return np.arange(0, n_rows, step)[:max_draws]


def _kept_draws(group: xr.Dataset, max_draws: int) -> xr.Dataset:
    """The draws :func:`_ppc_rows` picks from every variable of a (chain, draw, ...) group, as one chain."""
    n_rows = group.sizes["chain"] * group.sizes["draw"]
    rows = _ppc_rows(n_rows, max_draws)
    out = {}
    for name, var in group.data_vars.items():
        values = var.transpose("chain", "draw", ...).values
        out[name] = (var.dims, values.reshape(n_rows, *values.shape[2:])[rows][None])
    coords = {k: v for k, v in group.coords.items() if k not in ("chain", "draw")}
    return xr.Dataset(out, coords={**coords, "chain": [0], "draw": rows}, attrs=group.attrs)


#: Text columns of saved tables.
_LABELS = ("taxon", "specimen", "junction", "segment")


def _exact_csv(df: pd.DataFrame) -> str:
    """CSV text that round-trips every float exactly (17 significant digits)."""
    return df.to_csv(index=False, float_format="%.17g")


def _read_exact_csv(text: str) -> pd.DataFrame:
    """Inverse of :func:`_exact_csv` (labels stay text)."""
    head = text.split("\n", 1)[0].split(",")
    return pd.read_csv(_io(text), dtype={c: str for c in _LABELS if c in head}, keep_default_na=True)


def _io(text: str):
    from io import StringIO

    return StringIO(text)
