"""Figures: content drawn from small fake tables, house style, saving; no sampling."""

from __future__ import annotations

import copy

import arviz as az
import matplotlib
import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest
from matplotlib.collections import PathCollection
from matplotlib.image import imread

from allobranch.geometry.curves import iso_exponent_band, iso_exponent_curve, smaller_ratio, symmetric_ratio
from allobranch.reporting.plots import (
    plot_diagnostics, plot_exponents, plot_law_comparison, plot_naive_vs_model, plot_ppc_parent,
    plot_ratio_plane,
)
from allobranch.reporting.style import (
    CLASSIC_LAW_STYLES, HOUSE_RC, MM_PER_INCH, WIDTHS_MM, figure, house_style, law_styles, save_figure,
)

LAWS = {"Rall (a=1.5)": 1.5, "da Vinci (a=2)": 2.0, "Murray (a=3)": 3.0}


# ---------------------------------------------------------------------------------------------------------
# fake tables with the schemas the other stages produce


def fake_exponents(seed: int = 0, taxa=("Rattus", "Sus", "Quercus"), n_specimens=(3, 2, 4)) -> pd.DataFrame:
    """Exponents table: one population row, one row per taxon, its specimens after it."""
    rng = np.random.default_rng(seed)
    rows = [("population", "all taxa", "all")]
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
    return pd.DataFrame({
        "taxon": rng.choice(["Rattus", "Sus", "Quercus"], n),
        "specimen": [f"s{k % 7}" for k in range(n)],
        "junction": [f"j{k}" for k in range(n)],
        "n_daughters": np.where(np.arange(n) % 15 == 14, 3, 2),
        "exponent": np.where(large < 1, a, np.nan),
        "ratio_large": large,
        "ratio_small": small,
        "flagged": np.arange(n) % 10 == 3,
    })


def fake_laws() -> pd.DataFrame:
    """Laws table for an overall scope and one taxon scope."""
    rows = []
    for scope, best in (("overall", "free"), ("Rattus", "Murray (a=3)")):
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


def fake_ppc(seed: int = 0, n_draws: int = 30) -> pd.DataFrame:
    """Posterior predictive table: observed parent radii and ``n_draws`` predicted sets per taxon."""
    rng = np.random.default_rng(seed)
    parts = []
    for taxon, scale, n in (("Rattus", 0.2, 25), ("Sus", 1.5, 40), ("Quercus", 8.0, 18)):
        obs = scale * rng.lognormal(0, 0.6, n)
        parts.append(pd.DataFrame({"taxon": taxon, "source": "observed", "value": obs, "draw": -1}))
        pred = scale * rng.lognormal(0, 0.65, (n_draws, n))
        parts.append(pd.DataFrame({
            "taxon": taxon, "source": "predicted", "value": pred.ravel(), "draw": np.repeat(np.arange(n_draws), n),
        }))
    out = pd.concat(parts, ignore_index=True)
    out.attrs["unit"] = "mm"
    return out


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
    posterior = {"mu": rng.normal(2.5, 0.1, (4, 100)), "tau_taxon": rng.gamma(2, 0.1, (4, 100)),
                 "a_taxon": rng.normal(2.5, 0.2, (4, 100, 3))}
    stats = {"energy": rng.normal(0, 1, (4, 100)), "diverging": np.zeros((4, 100), bool)} if energy else None
    return az.from_dict(posterior=posterior, sample_stats=stats, dims={"a_taxon": ["taxon"]},
                        coords={"taxon": ["Rattus", "Sus", "Quercus"]})


def _rc_snapshot() -> dict:
    return copy.deepcopy({k: v for k, v in matplotlib.rcParams.items() if k != "backend"})


def _legend_texts(ax) -> list[str]:
    """Legend entries of an Axes, or of its figure when the plot put the legend there."""
    legends = [ax.get_legend()] if ax.get_legend() is not None else ax.figure.legends
    return [t.get_text() for lg in legends for t in lg.get_texts() if t.get_text()]


def _law_line_values(ax, prefix: str) -> list[float]:
    return sorted(float(a.get_gid().split(":")[1]) for a in ax.get_children()
                  if (a.get_gid() or "").startswith(prefix))


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


def test_house_style_is_print_legible_and_embeds_fonts():
    # journals ask for 6-9 pt text at final size and embedded TrueType fonts
    for key in ("font.size", "axes.labelsize", "xtick.labelsize", "ytick.labelsize", "legend.fontsize"):
        assert 7 <= HOUSE_RC[key] <= 9
    assert HOUSE_RC["pdf.fonttype"] == 42


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
    plot_ppc_parent(fake_ppc())
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
    assert not list(tmp_path.glob(".*tmp"))  # no temporary files left behind


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
    assert labels[0] == "all taxa"
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
    np.testing.assert_allclose(sorted(ln.get_xdata()[0] for ln in bf_points), sorted(laws["log10_bf"].dropna()))
    headings = [t.get_text() for t in ax_elpd.texts if (t.get_gid() or "").startswith("scope:")]
    assert headings == ["overall", "Rattus"]
    assert sum(t.get_text() == "reference" for t in ax_bf.texts) == 2
    assert "ELPD" in ax_elpd.get_xlabel() and "BF" in ax_bf.get_xlabel()
    assert ax_elpd.get_yticklabels()[0].get_text() == "free"
    weights = {t.get_gid(): t.get_text() for t in ax_elpd.texts if (t.get_gid() or "").startswith("weight:")}
    assert len(weights) == len(laws) and weights["weight:overall:free"] == "w 0.60"
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


# ---------------------------------------------------------------------------------------------------------
# posterior predictive check


def test_ppc_panels_per_taxon_log_scale():
    ppc = fake_ppc(n_draws=30)
    axes = plot_ppc_parent(ppc, max_draws=20)
    assert [ax.get_title() for ax in axes] == ["Rattus\n(n = 25)", "Sus\n(n = 40)", "Quercus\n(n = 18)"]
    for ax in axes:
        assert ax.get_xscale() == "log"
        assert ax.get_xlabel() == "Parent radius (mm)"
        predicted = [ln for ln in ax.lines if (ln.get_gid() or "").startswith("predicted:")]
        observed = [ln for ln in ax.lines if (ln.get_gid() or "").startswith("observed:")]
        assert len(predicted) == 20 and len(observed) == 1
    (legend,) = axes[0].figure.legends
    assert [t.get_text() for t in legend.get_texts()] == ["predicted (20 draws)", "observed"]
    assert len(axes[0].figure.axes) == 3  # the fourth grid cell is removed


def test_ppc_observed_curve_is_the_ecdf_of_the_data():
    ppc = fake_ppc()
    ax = plot_ppc_parent(ppc)[0]
    obs = np.sort(ppc.loc[(ppc["taxon"] == "Rattus") & (ppc["source"] == "observed"), "value"])
    (line,) = [ln for ln in ax.lines if ln.get_gid() == "observed:Rattus"]
    x, y = line.get_data()
    # reference definition: the empirical CDF reaches k/n at the k-th smallest value
    assert set(np.round(y, 12)) >= set(np.round(np.arange(1, obs.size + 1) / obs.size, 12))
    assert set(obs) <= set(x)


def test_ppc_prints_micrometres_and_wraps_long_taxa():
    ppc = fake_ppc()
    ppc["taxon"] = ppc["taxon"].map({"Rattus": "Rattus norvegicus domestica laboratory", "Sus": "Sus",
                                     "Quercus": "Quercus"})
    axes = plot_ppc_parent(ppc, unit="um")
    assert axes[0].get_xlabel() == "Parent radius (µm)"
    assert axes[0].get_title().count("\n") == 2  # the long name wraps, then the count


def test_ppc_rejects_non_positive_radii_and_bad_source():
    ppc = fake_ppc()
    ppc.loc[0, "value"] = 0.0
    with pytest.raises(ValueError, match="positive"):
        plot_ppc_parent(ppc)
    ppc = fake_ppc()
    ppc.loc[0, "source"] = "simulated"
    with pytest.raises(ValueError, match="simulated"):
        plot_ppc_parent(ppc)


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
