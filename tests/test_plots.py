"""Figures: content drawn from small fake tables, house style, saving; no sampling."""

from __future__ import annotations

import copy
import json

import arviz as az
import matplotlib
import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest
from matplotlib.collections import PathCollection
from matplotlib.image import imread

import allobranch as ab
from allobranch.geometry.curves import iso_exponent_band, iso_exponent_curve, smaller_ratio, symmetric_ratio
from allobranch.inference.results import FitResult
from allobranch.model.asymmetry import estimate_sigma_asym
from allobranch.model.data import model_data
from allobranch.model.spec import ModelSpec
from allobranch.reporting.checks import CHECK_COLUMNS, PPP_TAIL, ppc_checks, ppc_pvalues, ppc_warnings
from allobranch.reporting.plots import (
    plot_diagnostics,
    plot_exponents,
    plot_law_comparison,
    plot_naive_vs_model,
    plot_ppc_check,
    plot_ratio_plane,
)
from allobranch.reporting.plots.laws import ELPD_DIFF_MAX, LOG10_BF_LIMITS
from allobranch.reporting.style import (
    CLASSIC_LAW_STYLES,
    HOUSE_RC,
    MM_PER_INCH,
    SMALL_PT,
    TEXT_PT,
    WIDTHS_MM,
    figure,
    house_style,
    law_styles,
    save_figure,
)

LAWS = {"Rall (a=1.5)": 1.5, "da Vinci (a=2)": 2.0, "Murray (a=3)": 3.0}


# ---------------------------------------------------------------------------------------------------------
# fake tables with the schemas the other stages produce


def fake_exponents(seed: int = 0, taxa=("Rattus", "Sus", "Quercus"), n_specimens=(3, 2, 4)) -> pd.DataFrame:
    """Exponents table: one population row, one row per taxon, its specimens after it."""
    rng = np.random.default_rng(seed)
    rows = [("population", "population", "population")]
    for taxon, k in zip(taxa, n_specimens):
        rows.append(("taxon", taxon, taxon))
        rows += [("specimen", f"{taxon[:1]}{j + 1}", taxon) for j in range(k)]
    df = pd.DataFrame(rows, columns=["level", "group", "taxon"])
    df["mean"] = rng.uniform(2.0, 3.0, len(df))
    df["sd"] = rng.uniform(0.05, 0.3, len(df))
    df["hdi_low"] = df["mean"] - 1.645 * df["sd"]
    df["hdi_high"] = df["mean"] + 1.645 * df["sd"]
    df["r_hat"] = rng.uniform(1.0, 1.01, len(df))
    df["ess_bulk"] = rng.uniform(400, 2000, len(df))
    df.attrs["hdi_prob"] = 0.9
    return df


def fake_geometry(seed: int = 0, n: int = 60, a: float = 2.6, noise: float = 0.05) -> pd.DataFrame:
    """Junction geometry with bifurcations obeying exponent ``a`` up to relative noise, a few trifurcations."""
    rng = np.random.default_rng(seed)
    asym = rng.uniform(0.3, 1.0, n)  # smaller / larger daughter
    x = (1 + asym**a) ** (-1 / a)
    x_obs = x * np.exp(rng.normal(0, noise, n))
    y_obs = asym * x * np.exp(rng.normal(0, noise, n))
    large, small = np.maximum(x_obs, y_obs), np.minimum(x_obs, y_obs)
    return pd.DataFrame(
        {
            "taxon": rng.choice(["Rattus", "Sus", "Quercus"], n),
            "specimen": [f"s{k % 7}" for k in range(n)],
            "junction": [f"j{k}" for k in range(n)],
            "n_daughters": np.where(np.arange(n) % 15 == 14, 3, 2),
            "exponent": np.where(large < 1, a, np.nan),
            "ratio_large": large,
            "ratio_small": small,
            "flagged": np.arange(n) % 10 == 3,
        }
    )


def fake_laws() -> pd.DataFrame:
    """Laws table for an population scope and one taxon scope."""
    rows = []
    for scope in ("population", "Rattus"):
        for law, value in [("free", np.nan), *LAWS.items()]:
            rows.append({"scope": scope, "law": law, "value": value})
    df = pd.DataFrame(rows)
    df["elpd"] = [-120.0, -131.5, -124.2, -121.1, -50.2, -61.0, -55.3, -50.0]
    best = df.groupby("scope")["elpd"].transform("max")
    df["elpd_diff"] = best - df["elpd"]  # arviz.compare convention: 0 for the best, positive for worse
    df["dse"] = np.where(df["elpd_diff"] == 0, 0.0, 1.5)
    df["weight"] = [0.6, 0.0, 0.1, 0.3, 0.2, 0.0, 0.1, 0.7]
    df["log10_bf"] = np.where(df["value"].isna(), np.nan, [0, -3.1, -1.2, 0.4, 0, -2.5, -0.6, 0.8])
    df["p_rope"] = np.where(df["value"].isna(), np.nan, [0, 0.0, 0.05, 0.3, 0, 0.01, 0.1, 0.6])
    return df


def fake_checks(seed: int = 0, n_draws: int = 30) -> pd.DataFrame:
    """Posterior predictive checks table: law residuals (observed per draw) and splits (observed once)."""
    rng = np.random.default_rng(seed)
    parts = []
    for taxon, n in (("Rattus", 25), ("Sus", 40), ("Quercus", 18)):
        junction = [f"{taxon}/j{k}" for k in range(n)]
        base = rng.normal(0, 0.06, n)
        split = rng.uniform(0.4, 1.0, n)
        parts.append(
            pd.DataFrame(
                {
                    "check": "split",
                    "taxon": taxon,
                    "junction": junction,
                    "source": "observed",
                    "draw": -1,
                    "value": split,
                }
            )
        )
        for d in range(n_draws):
            parts += [
                pd.DataFrame(
                    {
                        "check": "law_residual",
                        "taxon": taxon,
                        "junction": junction,
                        "source": "observed",
                        "draw": d,
                        "value": base + rng.normal(0, 0.005),
                    }
                ),
                pd.DataFrame(
                    {
                        "check": "law_residual",
                        "taxon": taxon,
                        "junction": junction,
                        "source": "replicated",
                        "draw": d,
                        "value": rng.normal(0, 0.06, n),
                    }
                ),
                pd.DataFrame(
                    {
                        "check": "split",
                        "taxon": taxon,
                        "junction": junction,
                        "source": "replicated",
                        "draw": d,
                        "value": rng.uniform(0.4, 1.0, n),
                    }
                ),
            ]
    return pd.concat(parts, ignore_index=True)


def fake_fit(
    seed: int = 0, exponent: float | None = None, asymmetry_factor: float = 1.0, settings: dict | None = None
) -> FitResult:
    """A FitResult without sampling: simulated junctions and posterior draws scattered about the truth.

    ``exponent`` puts every specimen's exponent at that value instead (a wrong posterior);
    ``asymmetry_factor`` scales the asymmetry scale the fit records.
    """
    sim = ab.simulate_junctions(
        taxa=2, specimens_per_taxon=2, junctions_per_specimen=15, rel_error=0.05, seed=seed
    )
    table = ab.read_junctions(sim.frame, sim.mapping)
    data = model_data(table)
    rng = np.random.default_rng(seed)
    chains, draws = 2, 100
    shape = (chains, draws)
    truth = np.array([sim.truth["a_specimen"][s] for s in data.specimens])
    a_specimen = (np.full(truth.shape, float(exponent)) if exponent is not None else truth) + rng.normal(
        0, 0.03, (*shape, len(truth))
    )
    a_taxon = np.stack(
        [a_specimen[..., data.specimen_taxon_idx == t].mean(-1) for t in range(len(data.taxa))], -1
    )
    posterior = {
        "mu": a_taxon.mean(-1) + rng.normal(0, 0.02, shape),
        "a_taxon": a_taxon,
        "a_specimen": a_specimen,
        "tau_taxon": np.abs(rng.normal(0.2, 0.05, shape)),
        "tau_specimen": np.abs(rng.normal(0.1, 0.03, shape)),
        "sigma_dev": np.abs(rng.normal(sim.truth["sigma_dev"], 0.003, shape)),
    }
    idata = az.from_dict(
        posterior=posterior,
        sample_stats={"diverging": np.zeros(shape, bool), "energy": rng.normal(0, 1, shape)},
        observed_data={"log_parent": data.log_parent},
        coords={"taxon": data.taxa, "specimen": data.specimens, "junction": data.junctions},
        dims={"a_taxon": ["taxon"], "a_specimen": ["specimen"], "log_parent": ["junction"]},
    )
    asym = estimate_sigma_asym(data, 0.05) * asymmetry_factor
    base = {
        "draws": draws,
        "tune": draws,
        "chains": chains,
        "seed": seed,
        "sampler": "nutpie",
        "target_accept": 0.9,
        "seconds": 1.0,
        "form": "fast",
        "error_mode": "known",
        "sigma_asym_empirical": dict(zip(data.taxa, map(float, asym))),
    }
    settings = {**base, **(settings or {})}
    idata.attrs["allobranch_provenance"] = json.dumps(
        {
            "input_sha256": table.digest(),
            "source": table.source,
            "settings": settings,
            "versions": {"allobranch": ab.__version__},
        }
    )
    return FitResult(idata=idata, table=table, spec=ModelSpec(), settings=settings)


def fake_naive(seed: int = 0) -> pd.DataFrame:
    """Taxon-level exponents with naive columns."""
    ex = fake_exponents(seed)
    df = ex[ex["level"] == "taxon"].reset_index(drop=True)
    df["naive_median"] = df["mean"] + 0.4
    df["naive_q25"] = df["naive_median"] - 0.8
    df["naive_q75"] = df["naive_median"] + 1.1
    df["n_junctions"] = [40, 25, 61]
    df["n_no_root"] = [5, 2, 9]
    df.attrs["hdi_prob"] = 0.9
    return df


def fake_idata(seed: int = 0, energy: bool = True) -> az.InferenceData:
    """InferenceData from random arrays: 4 chains x 100 draws, a scalar and a 3-vector."""
    rng = np.random.default_rng(seed)
    posterior = {
        "mu": rng.normal(2.5, 0.1, (4, 100)),
        "tau_taxon": rng.gamma(2, 0.1, (4, 100)),
        "a_taxon": rng.normal(2.5, 0.2, (4, 100, 3)),
    }
    stats = {"energy": rng.normal(0, 1, (4, 100)), "diverging": np.zeros((4, 100), bool)} if energy else None
    return az.from_dict(
        posterior=posterior,
        sample_stats=stats,
        dims={"a_taxon": ["taxon"]},
        coords={"taxon": ["Rattus", "Sus", "Quercus"]},
    )


def _rc_snapshot() -> dict:
    return copy.deepcopy({k: v for k, v in matplotlib.rcParams.items() if k != "backend"})


def _legend_texts(ax) -> list[str]:
    """Legend entries of an Axes, or of its figure when the plot put the legend there."""
    legends = [ax.get_legend()] if ax.get_legend() is not None else ax.figure.legends
    return [t.get_text() for lg in legends for t in lg.get_texts() if t.get_text()]


def _law_line_values(ax, prefix: str) -> list[float]:
    return sorted(
        float(a.get_gid().split(":")[1]) for a in ax.get_children() if (a.get_gid() or "").startswith(prefix)
    )


# ---------------------------------------------------------------------------------------------------------
# iso-exponent curves (exact algebra)


@pytest.mark.parametrize("a", [1.5, 2.0, 7 / 3, 3.0, 4.2])
def test_iso_curve_satisfies_law(a):
    # exact algebra: every point of the curve satisfies x^a + y^a = 1, with x >= y
    x, y = iso_exponent_curve(a, n=57)
    np.testing.assert_allclose(x**a + y**a, 1.0, rtol=1e-12)
    assert np.all(x >= y - 1e-15)
    assert (x[0], y[0]) == (1.0, 0.0)
    np.testing.assert_allclose(smaller_ratio(x, a), y, atol=1e-12)


def test_da_vinci_curve_passes_through_symmetric_point():
    # exact algebra: for a = 2 the symmetric bifurcation has both ratios 1/sqrt(2)
    x, y = iso_exponent_curve(2.0)
    assert x[-1] == pytest.approx(1 / np.sqrt(2), abs=1e-15)
    assert y[-1] == pytest.approx(1 / np.sqrt(2), abs=1e-15)
    assert smaller_ratio(1 / np.sqrt(2), 2.0) == pytest.approx(1 / np.sqrt(2), rel=1e-12)
    # and a = 3 ends at 2^(-1/3) = 0.7937 (exact algebra, symmetric ratio of the cube law)
    assert symmetric_ratio(3.0) == pytest.approx(0.7937, abs=1e-4)


def test_band_outline_and_bad_inputs():
    bx, by = iso_exponent_band(2.0, 3.0, n=11)
    assert bx.shape == (22,)
    np.testing.assert_allclose(bx[:11] ** 2 + by[:11] ** 2, 1.0)
    np.testing.assert_allclose(bx[11:] ** 3 + by[11:] ** 3, 1.0)
    with pytest.raises(ValueError, match="positive"):
        iso_exponent_curve(0.0)
    with pytest.raises(ValueError, match=r"\[0, 1\]"):
        smaller_ratio(1.2, 2.0)


# ---------------------------------------------------------------------------------------------------------
# style and saving


def test_figure_width_in_millimetres():
    fig, _ = figure("single", aspect=0.5)
    assert fig.get_figwidth() * MM_PER_INCH == pytest.approx(WIDTHS_MM["single"])
    assert fig.get_figheight() * MM_PER_INCH == pytest.approx(WIDTHS_MM["single"] * 0.5)
    fig2, _ = figure("double", height_mm=60)
    assert fig2.get_figwidth() * MM_PER_INCH == pytest.approx(180.0)
    with pytest.raises(ValueError, match="single"):
        figure("triple")


# Journal guidance for figures at final print size:
# - Nature research figure guide, "Building and exporting figure panels": single column 89 mm, double column
#   183 mm; text between 5 pt and 7 pt; fonts embedded (TrueType, Type 42).
# - Elsevier, "Artwork sizing": lettering 7 pt for normal text, no smaller than 6 pt (sub/superscripts);
#   "a rule-of-thumb rather than a strict rule". Elsevier's column widths (single 90 mm, 1.5 columns 140 mm,
#   double 190 mm) are written from memory.
NATURE_WIDTHS_MM = {"single": 89.0, "double": 183.0}
ELSEVIER_WIDTHS_MM = {"single": 90.0, "double": 190.0}  # from memory
NATURE_TEXT_PT = (5.0, 7.0)
ELSEVIER_TEXT_PT, ELSEVIER_MIN_PT = 7.0, 6.0


def test_widths_fit_journal_columns():
    for name in ("single", "double"):
        # a figure at our width fits the column without being scaled down (Nature guide; Elsevier from memory)
        assert WIDTHS_MM[name] <= NATURE_WIDTHS_MM[name]
        assert WIDTHS_MM[name] <= ELSEVIER_WIDTHS_MM[name]
    # and fills most of it, so it is not blown up either (common practice, no single source)
    assert WIDTHS_MM["single"] >= 0.9 * NATURE_WIDTHS_MM["single"]
    assert WIDTHS_MM["double"] >= 0.9 * NATURE_WIDTHS_MM["double"]


def test_house_style_font_sizes_follow_journal_guidance():
    # ordinary text at 7 pt: the top of Nature's 5-7 pt range and Elsevier's 7 pt; fonts embedded (Nature guide)
    assert TEXT_PT == ELSEVIER_TEXT_PT and NATURE_TEXT_PT[0] <= TEXT_PT <= NATURE_TEXT_PT[1]
    assert max(NATURE_TEXT_PT[0], ELSEVIER_MIN_PT) <= SMALL_PT <= TEXT_PT
    for key in (
        "font.size",
        "axes.titlesize",
        "axes.labelsize",
        "xtick.labelsize",
        "ytick.labelsize",
        "legend.fontsize",
        "legend.title_fontsize",
        "figure.titlesize",
    ):
        assert HOUSE_RC[key] == TEXT_PT, key
    assert HOUSE_RC["pdf.fonttype"] == 42


def _texts(fig) -> list:
    return [t for t in fig.findobj(matplotlib.text.Text) if t.get_visible() and t.get_text().strip()]


def test_every_figure_text_within_journal_sizes():
    # every visible text of every figure, ArviZ's panels included, between Elsevier's 6 pt minimum and
    # Nature's 7 pt maximum (sources above)
    figures = [
        plot_exponents(fake_exponents(), laws=LAWS).figure,
        plot_ratio_plane(fake_geometry(), LAWS, fake_exponents()).figure,
        plot_law_comparison(fake_laws())[0].figure,
        plot_ppc_check(fake_checks(), "law_residual", pvalues=ppc_pvalues(fake_checks(n_draws=5)))[0].figure,
        plot_ppc_check(fake_checks(), "split")[0].figure,
        plot_naive_vs_model(fake_naive()).figure,
        plot_diagnostics(fake_idata(), ["mu", "a_taxon"])[0].figure,
    ]
    for fig in figures:
        sizes = {round(t.get_fontsize(), 3) for t in _texts(fig)}
        assert sizes and min(sizes) >= ELSEVIER_MIN_PT and max(sizes) <= NATURE_TEXT_PT[1], sizes
        width_mm = fig.get_figwidth() * MM_PER_INCH
        assert any(width_mm == pytest.approx(w) for w in WIDTHS_MM.values()), width_mm


def test_law_styles_distinct_in_greyscale():
    styles = law_styles([1.5, 2.0, 3.0, 7 / 3, 2.5, 1.75])
    assert len({s.linestyle for s in styles.values()}) == 6
    assert len({s.marker for s in styles.values()}) == 6
    assert styles[3.0] == CLASSIC_LAW_STYLES[3.0]


def test_plots_leave_user_rcparams_unchanged():
    before = _rc_snapshot()
    plot_exponents(fake_exponents(), laws=LAWS)
    plot_ratio_plane(fake_geometry(), LAWS, fake_exponents())
    plot_law_comparison(fake_laws())
    plot_ppc_check(fake_checks(), "law_residual")
    plot_naive_vs_model(fake_naive())
    plot_diagnostics(fake_idata(), ["mu"])
    assert _rc_snapshot() == before


def test_house_style_applies_inside_plots_only():
    with matplotlib.rc_context({"axes.labelsize": 15, "font.size": 15}):
        ax = plot_exponents(fake_exponents())
        assert ax.xaxis.label.get_fontsize() == HOUSE_RC["axes.labelsize"]
        assert matplotlib.rcParams["axes.labelsize"] == 15
        with house_style():
            assert matplotlib.rcParams["axes.labelsize"] == HOUSE_RC["axes.labelsize"]
        assert matplotlib.rcParams["axes.labelsize"] == 15


def test_save_figure_writes_all_formats_at_300_dpi(tmp_path):
    ax = plot_exponents(fake_exponents(), laws=LAWS)
    fig = ax.figure
    paths = save_figure(fig, tmp_path / "forest")
    assert [p.name for p in paths] == ["forest.pdf", "forest.svg", "forest.png"]
    assert all(p.stat().st_size > 1000 for p in paths)
    img = imread(paths[2])
    w_in, h_in = fig.get_size_inches()
    assert img.shape[1] == pytest.approx(w_in * 300, abs=2)
    assert img.shape[0] == pytest.approx(h_in * 300, abs=2)
    assert paths[0].read_bytes().startswith(b"%PDF")
    assert b"FontFile2" in paths[0].read_bytes()  # TrueType font embedded (pdf.fonttype 42)
    svg = paths[1].read_text()
    assert "<text" in svg or "font-family" in svg  # text kept as text (svg.fonttype "none")
    assert not [p.name for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temporary files left


def test_save_figure_rejects_suffix_and_unknown_format(tmp_path):
    fig, _ = figure()
    with pytest.raises(ValueError, match="suffix"):
        save_figure(fig, tmp_path / "x.pdf")
    with pytest.raises(ValueError, match="formats"):
        save_figure(fig, tmp_path / "x", formats=("bmp",))
    with pytest.raises(FileNotFoundError):
        save_figure(fig, tmp_path / "missing" / "x")


# ---------------------------------------------------------------------------------------------------------
# forest plot


def test_exponents_forest_rows_and_laws():
    ex = fake_exponents()
    ax = plot_exponents(ex, laws=fake_laws())
    bars = [c for c in ax.containers if (c.lines[0].get_gid() or "").startswith("exponent:")]
    labels = [t.get_text() for t in ax.get_yticklabels()]
    assert len(labels) == len(ex) == len(bars)
    assert labels[0] == "population"  # the population row comes first
    assert labels[1] == "Rattus" and labels[2] == "R1"
    assert _law_line_values(ax, "law-line:") == [1.5, 2.0, 3.0]
    legend = _legend_texts(ax)
    assert {"population", "taxon", "specimen", *LAWS} <= set(legend)
    assert "free" not in legend
    assert "90% HDI" in ax.get_xlabel()


def test_exponents_error_bars_span_hdi():
    ex = fake_exponents(seed=3)
    ax = plot_exponents(ex)
    pop = ax.containers[0]
    segs = pop.lines[2][0].get_segments()
    np.testing.assert_allclose([segs[0][0][0], segs[0][1][0]], ex.loc[0, ["hdi_low", "hdi_high"]], rtol=1e-12)


def test_exponents_without_taxon_rows_label_specimens_with_taxon():
    ex = fake_exponents()
    ex = ex[ex["level"] != "taxon"]
    ax = plot_exponents(ex)
    labels = [t.get_text() for t in ax.get_yticklabels()]
    assert len(labels) == len(ex)
    assert "R1 (Rattus)" in labels


def test_exponents_reject_bad_level_and_missing_columns():
    ex = fake_exponents()
    ex.loc[0, "level"] = "genus"
    with pytest.raises(ValueError, match="genus"):
        plot_exponents(ex)
    with pytest.raises(ValueError, match="hdi_high"):
        plot_exponents(fake_exponents().drop(columns="hdi_high"))


def test_exponents_draw_into_given_axes():
    fig, ax = plt.subplots()
    assert plot_exponents(fake_exponents(), laws=LAWS, ax=ax) is ax
    assert len(fig.axes) == 1
    assert not fig.legends and ax.get_legend() is not None  # the caller's figure is left to the caller
    fig, ax = figure("single")  # a single Axes with the constrained layout: the legend spans the figure
    plot_exponents(fake_exponents(), laws=LAWS, ax=ax)
    assert len(fig.legends) == 1 and ax.get_legend() is None


# ---------------------------------------------------------------------------------------------------------
# ratio plane


def test_ratio_plane_points_curves_and_flags():
    geo = fake_geometry()
    ex = fake_exponents()
    ax = plot_ratio_plane(geo, fake_laws(), ex)
    assert _law_line_values(ax, "law-curve:") == [1.5, 2.0, 3.0]
    pop = ex[ex["level"] == "population"].iloc[0]
    assert _law_line_values(ax, "hdi-curve:") == pytest.approx(sorted([pop["hdi_low"], pop["hdi_high"]]))
    scatters = {c.get_gid(): c for c in ax.collections if isinstance(c, PathCollection)}
    flagged = scatters["flagged"].get_offsets()
    assert len(flagged) == geo["flagged"].sum()
    np.testing.assert_allclose(np.asarray(flagged), geo.loc[geo["flagged"], ["ratio_large", "ratio_small"]])
    n_multi = int(((geo["n_daughters"] > 2) & ~geo["flagged"]).sum())
    assert len(scatters["multi"].get_offsets()) == n_multi
    assert len(scatters["junctions"].get_offsets()) == len(geo) - geo["flagged"].sum() - n_multi
    assert ax.get_xlabel() == "Larger daughter / parent radius"
    assert ax.get_ylabel() == "Smaller daughter / parent radius"
    legend = _legend_texts(ax)
    assert "flagged junction" in legend and "Murray (a=3)" in legend
    # fake_geometry has junctions with a daughter larger than the parent: the x = 1 boundary is drawn
    assert (geo["ratio_large"] >= 1).any() and "daughter = parent" in legend
    assert any(t.startswith("population a, 90% HDI") for t in legend)


def test_ratio_plane_da_vinci_curve_through_symmetric_point():
    ax = plot_ratio_plane(fake_geometry(), {"da Vinci (a=2)": 2.0})
    (line,) = [ln for ln in ax.lines if ln.get_gid() == "law-curve:2.0"]
    xy = np.column_stack(line.get_data())
    # exact algebra: x^2 + y^2 = 1 meets x = y at (1/sqrt 2, 1/sqrt 2)
    assert np.min(np.hypot(xy[:, 0] - 2**-0.5, xy[:, 1] - 2**-0.5)) < 1e-12


def test_ratio_plane_counts_unplaceable_and_checks_flags():
    geo = fake_geometry().drop(columns="flagged")
    geo.loc[[0, 1], "ratio_large"] = np.nan
    geo.loc[2, "n_daughters"] = 1
    ax = plot_ratio_plane(geo, LAWS)
    note = [t for t in ax.texts if t.get_gid() == "missing-note"]
    assert note and note[0].get_text().startswith("3 junction")
    drawn = sum(len(c.get_offsets()) for c in ax.collections if c.get_gid() in {"junctions", "multi"})
    assert drawn == len(geo) - 3
    assert "flagged" not in {c.get_gid() for c in ax.collections}
    geo["flagged"] = "yes"
    with pytest.raises(ValueError, match="flagged"):
        plot_ratio_plane(geo, LAWS)


def test_ratio_plane_needs_one_population_row():
    ex = fake_exponents()
    with pytest.raises(ValueError, match="population"):
        plot_ratio_plane(fake_geometry(), LAWS, ex[ex["level"] != "population"])


# ---------------------------------------------------------------------------------------------------------
# law comparison


def test_law_comparison_two_panels_rows_and_scopes():
    laws = fake_laws()
    axes = plot_law_comparison(laws)
    assert axes.shape == (2,)
    ax_elpd, ax_bf = axes
    assert len(ax_elpd.get_yticklabels()) == len(laws)
    elpd_bars = [c for c in ax_elpd.containers if (c.lines[0].get_gid() or "").startswith("elpd:")]
    assert len(elpd_bars) == len(laws)
    bf_points = [ln for ln in ax_bf.lines if (ln.get_gid() or "").startswith("bf:")]
    assert len(bf_points) == laws["log10_bf"].notna().sum()
    np.testing.assert_allclose(
        sorted(ln.get_xdata()[0] for ln in bf_points), sorted(laws["log10_bf"].dropna())
    )
    headings = [t.get_text() for t in ax_elpd.texts if (t.get_gid() or "").startswith("scope:")]
    assert headings == ["population", "Rattus"]
    assert sum(t.get_text() == "reference" for t in ax_bf.texts) == 2
    assert "ELPD" in ax_elpd.get_xlabel() and "BF" in ax_bf.get_xlabel()
    assert ax_elpd.get_yticklabels()[0].get_text() == "free"
    weights = {t.get_gid(): t.get_text() for t in ax_elpd.texts if (t.get_gid() or "").startswith("weight:")}
    assert len(weights) == len(laws) and weights["weight:population:free"] == "w 0.60"
    p_rope = [t for t in ax_bf.texts if (t.get_gid() or "").startswith("p_rope:")]
    assert len(p_rope) == laws["p_rope"].notna().sum()


def test_law_comparison_error_bars_are_plus_minus_se():
    laws = fake_laws()
    ax_elpd, _ = plot_law_comparison(laws)
    for _, row in laws.iterrows():
        gid = f"elpd:{row['scope']}:{row['law']}"
        container = next(c for c in ax_elpd.containers if c.lines[0].get_gid() == gid)
        (lo, _), (hi, _) = container.lines[2][0].get_segments()[0]
        assert (lo, hi) == pytest.approx((row["elpd_diff"] - row["dse"], row["elpd_diff"] + row["dse"]))


def test_law_comparison_rejects_wrong_axes():
    fig, ax = plt.subplots()
    with pytest.raises(ValueError, match="two Axes"):
        plot_law_comparison(fake_laws(), axes=[ax])


def test_law_comparison_clips_far_points_at_stated_limits():
    laws = fake_laws()
    laws.loc[1, "log10_bf"] = -87.0  # population, Rall: far below the lower limit
    laws.loc[7, "log10_bf"] = 6.2  # Rattus, Murray: above the upper limit
    laws.loc[5, "elpd_diff"] = 43.0  # Rattus, Rall: a far worse ELPD
    ax_elpd, ax_bf = plot_law_comparison(laws)
    lo, hi = LOG10_BF_LIMITS
    points = {ln.get_gid(): ln for ln in ax_bf.lines if (ln.get_gid() or "").startswith("bf:")}
    # the clipped points sit on the limits, hollow (white face); the others where they are
    assert points["bf:population:Rall (a=1.5)"].get_xdata()[0] == lo
    assert points["bf:Rattus:Murray (a=3)"].get_xdata()[0] == hi
    assert points["bf:population:Rall (a=1.5)"].get_markerfacecolor() == "white"
    assert points["bf:population:Murray (a=3)"].get_xdata()[0] == pytest.approx(0.4)
    notes = {t.get_gid(): t.get_text() for t in ax_bf.texts if (t.get_gid() or "").startswith("bf-clipped:")}
    assert notes == {
        "bf-clipped:population:Rall (a=1.5)": "\u2190 -87",
        "bf-clipped:Rattus:Murray (a=3)": "6.2 \u2192",
    }
    # the axis keeps the region around 0 readable: it ends just beyond the limits, not at -87
    x0, x1 = ax_bf.get_xlim()
    assert lo - 1.5 < x0 < lo and hi < x1 < hi + 1.5
    elpd = next(c for c in ax_elpd.containers if c.lines[0].get_gid() == "elpd:Rattus:Rall (a=1.5)")
    assert elpd.lines[0].get_xdata()[0] == ELPD_DIFF_MAX
    assert any(
        t.get_gid() == "elpd-clipped:Rattus:Rall (a=1.5)" and "43" in t.get_text() for t in ax_elpd.texts
    )
    assert ax_elpd.get_xlim()[1] < ELPD_DIFF_MAX * 1.2
    # the limits are stated on the axes
    assert f"clipped at {ELPD_DIFF_MAX:g}" in ax_elpd.get_xlabel()
    assert f"clipped at {lo:g} and {hi:g}" in ax_bf.get_xlabel()


# ---------------------------------------------------------------------------------------------------------
# posterior predictive checks: plots


def test_ppc_panels_per_taxon_and_legend():
    checks = fake_checks(n_draws=30)
    axes = plot_ppc_check(checks, "law_residual", max_draws=20)
    assert [ax.get_title() for ax in axes] == ["Rattus (n = 25)", "Sus (n = 40)", "Quercus (n = 18)"]
    for ax in axes:
        replicated = [ln for ln in ax.lines if (ln.get_gid() or "").startswith("replicated:")]
        observed = [ln for ln in ax.lines if (ln.get_gid() or "").startswith("observed:")]
        assert len(replicated) == 20 and len(observed) == 20  # the observed residual depends on the draw
    (legend,) = axes[0].figure.legends
    assert [t.get_text() for t in legend.get_texts()] == [
        "replicated (20 draws)",
        "observed, at each\ndraw's exponent (20)",
    ]
    assert "Law residual" in axes[0].figure.get_supxlabel()
    assert len(axes[0].figure.axes) == 3  # the fourth grid cell is removed


def test_ppc_split_observed_once_and_pvalues_printed():
    checks = fake_checks()
    pvalues = ppc_pvalues(checks)
    axes = plot_ppc_check(checks, "split", pvalues=pvalues)
    observed = [ln for ln in axes[0].lines if (ln.get_gid() or "").startswith("observed:")]
    assert len(observed) == 1
    obs = np.sort(
        checks.loc[
            (checks["check"] == "split") & (checks["source"] == "observed") & (checks["taxon"] == "Rattus"),
            "value",
        ]
    )
    x, y = observed[0].get_data()
    # reference definition: the empirical CDF reaches k/n at the k-th smallest value
    assert set(np.round(y, 12)) >= set(np.round(np.arange(1, obs.size + 1) / obs.size, 12))
    assert set(obs) <= set(x)
    note = next(t for t in axes[0].texts if t.get_gid() == "pvalues:Rattus").get_text()
    p_sd = pvalues.query("check == 'split' and taxon == 'Rattus' and statistic == 'sd'")["p_value"].iloc[0]
    assert f"SD: p = {p_sd:.2f}" in note


def test_ppc_plot_rejects_bad_input():
    with pytest.raises(ValueError, match="check must be"):
        plot_ppc_check(fake_checks(), "parent")
    checks = fake_checks()
    checks.loc[0, "source"] = "simulated"
    with pytest.raises(ValueError, match="simulated"):
        plot_ppc_check(checks, "split")
    checks = fake_checks()
    checks.loc[0, "value"] = np.inf
    with pytest.raises(ValueError, match="finite"):
        plot_ppc_check(checks, "split")
    fig, ax = plt.subplots()
    with pytest.raises(ValueError, match="one Axes per taxon"):
        plot_ppc_check(fake_checks(), "split", axes=[ax])


# ---------------------------------------------------------------------------------------------------------
# posterior predictive checks: the computation (checks that can fail)


def test_ppc_checks_table_shape_and_seed():
    fit = fake_fit()
    checks = ppc_checks(fit, n_draws=10, seed=3)
    assert tuple(checks.columns) == CHECK_COLUMNS
    n = fit.table.n_junctions
    # split observed once; law residual observed and replicated per draw; split replicated per draw
    assert len(checks) == n + 3 * 10 * n
    assert checks.attrs["n_draws"] == 10
    pd.testing.assert_frame_equal(checks, ppc_checks(fit, n_draws=10, seed=3))  # same seed, same table
    assert not checks.equals(ppc_checks(fit, n_draws=10, seed=4))


def test_law_residual_observed_is_exact_algebra():
    # exact algebra: at exponent a, the law's prediction is log((sum r_i^a)^(1/a)) from the observed daughters
    fit = fake_fit()
    checks = ppc_checks(fit, n_draws=1)
    first = checks[(checks["check"] == "law_residual") & (checks["source"] == "observed")].iloc[0]
    row = fit.table.data.iloc[0]
    a = float(fit.idata.posterior["a_specimen"].sel(specimen=row["specimen"]).values[0, 0])
    expected = np.log(row["parent"]) - np.log((row["d1"] ** a + row["d2"] ** a) ** (1 / a))
    assert first["value"] == pytest.approx(expected, rel=1e-12)
    split = checks[(checks["check"] == "split") & (checks["source"] == "observed")].iloc[0]
    assert split["value"] == pytest.approx(min(row["d1"], row["d2"]) / max(row["d1"], row["d2"]), rel=1e-12)


def test_checks_pass_at_the_truth_and_fail_at_a_wrong_exponent():
    # a posterior about the simulated truth reproduces the data; one at a far exponent (1.5 instead of about
    # 2.5) shifts every observed residual by roughly log(2) * (1/1.5 - 1/2.5) = 0.18 (exact algebra for a
    # symmetric pair), far outside the replicated spread
    good = ppc_pvalues(ppc_checks(fake_fit(), n_draws=40, seed=1))
    assert not good["fails"].any(), good
    bad = ppc_pvalues(ppc_checks(fake_fit(exponent=1.5), n_draws=40, seed=1))
    failing = bad[bad["fails"]]
    assert set(failing.loc[failing["statistic"] == "mean", "check"]) == {"law_residual"}
    assert set(failing["taxon"]) == set(fake_fit().table.taxa)
    message = ppc_warnings(bad)
    assert len(message) == 2 and all(
        m.startswith("posterior predictive check of the law residual") for m in message
    )


def test_split_check_fails_when_the_asymmetry_is_wrong():
    # replicated daughters four times as asymmetric as the data: the split's mean and SD leave the data behind
    bad = ppc_pvalues(ppc_checks(fake_fit(asymmetry_factor=4.0), n_draws=40, seed=1))
    split = bad[bad["check"] == "split"]
    assert split["fails"].all(), split
    assert (split["p_value"] < PPP_TAIL).sum() + (split["p_value"] > 1 - PPP_TAIL).sum() == len(split)


# ---------------------------------------------------------------------------------------------------------
# naive vs model


def test_naive_vs_model_rows_and_legend():
    table = fake_naive()
    ax = plot_naive_vs_model(table, laws=LAWS)
    labels = [t.get_text() for t in ax.get_yticklabels()]
    assert len(labels) == len(table)
    assert labels[0] == "Rattus\nn = 40 (5 no root)"
    model = next(c for c in ax.containers if c.lines[0].get_gid() == "model")
    naive = next(c for c in ax.containers if c.lines[0].get_gid() == "naive")
    np.testing.assert_allclose(model.lines[0].get_xdata(), table["mean"])
    np.testing.assert_allclose(naive.lines[0].get_xdata(), table["naive_median"])
    assert len(model.lines[2][0].get_segments()) == len(table)
    legend = " ".join(_legend_texts(ax))
    assert "ignores measurement error" in legend and "90% HDI" in legend
    assert _law_line_values(ax, "law-line:") == [1.5, 2.0, 3.0]


# ---------------------------------------------------------------------------------------------------------
# sampler diagnostics


def test_diagnostics_rank_panels_and_energy():
    idata = fake_idata()
    axes = plot_diagnostics(idata, ["mu", "a_taxon"])
    assert axes.shape == (1 + 3 + 1,)
    titles = [ax.get_title() for ax in axes]
    assert titles[0] == "mu" and any("Quercus" in t for t in titles)
    assert titles[-1] == "energy"
    assert len(axes[-1].get_legend().get_texts()) >= 2  # marginal and transition energy, BFMI


def test_diagnostics_without_energy_and_unknown_variable():
    axes = plot_diagnostics(fake_idata(energy=False), ["mu"])
    assert "energy not recorded" in axes[-1].texts[0].get_text()
    with pytest.raises(ValueError, match="sigma"):
        plot_diagnostics(fake_idata(), ["sigma"])
