"""Networks on the command line and in recipes, the dendrogram layout and the network figure.

References: hand-drawn networks (junctions, rows and layout positions written out in the comments);
the simulator's exact law for the end-to-end fits (truth 2.7, a wide tolerance because the fits are short);
the package's own geometry module for the colours (the figure must show those numbers, not recompute them).
"""

from __future__ import annotations

from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest

from allobranch.cli import main
from allobranch.errors import RecipeError
from allobranch.geometry import junction_geometry
from allobranch.intake.recipe import load_recipe
from allobranch.networks import dendrogram_layout, junctions_from_segments, write_swc
from allobranch.networks.options import load_network_recipe, network_options
from allobranch.networks.simulate import SIMULATED_NOTE, simulate_segments, trace_swc
from allobranch.reporting.plots.network import plot_network

SHORT = ["--draws", "150", "--tune", "150", "--chains", "2", "--quiet", "--seed", "3"]

# b branches into c and d; d branches into e and f (rows 2..7 of the CSV; a is the root, c continues to g)
HAND = pd.DataFrame(
    {
        "id": ["a", "b", "c", "d", "e", "f", "g"],
        "up": [None, "a", "b", "b", "d", "d", "c"],
        "r": [2.0, 1.8, 1.2, 1.5, 1.0, 1.1, 1.0],
        "animal": "x",
    }
)
SEGMENT_FLAGS = ["--segment-id", "id", "--parent-id", "up", "--size", "r", "--specimen", "animal"]


@pytest.fixture
def segments(tmp_path) -> Path:
    path = tmp_path / "segments.csv"
    HAND.to_csv(path, index=False)
    return path


def test_check_writes_traced_junctions_figures_and_a_recipe_that_reruns(segments, tmp_path, capsys):
    out = tmp_path / "out"
    recipe = tmp_path / "net.toml"
    args = ["check", str(segments), *SEGMENT_FLAGS, "--continuations", "keep", "--unit", "um"]
    assert main([*args, "--out", str(out), "--save-recipe", str(recipe)]) == 0
    err = capsys.readouterr().err
    assert "Network (segments): 2 junctions derived" in err and "continuations = keep" in err
    written = pd.read_csv(out / "junctions.csv", dtype=str)
    # by hand: junction b (parent b, row 3; daughters d row 5, c row 4), junction d (parent row 5; f 7, e 6)
    assert written["junction"].tolist() == ["b", "d"]
    assert written["parent_segment"].tolist() == ["b", "d"] and written["daughter_segments"].tolist() == [
        "d;c",
        "f;e",
    ]
    assert written["parent_rows"].tolist() == ["3", "5"] and written["daughter_rows"].tolist() == [
        "5;4",
        "7;6",
    ]
    assert written["generation"].tolist() == ["0", "1"] and written["strahler_order"].tolist() == ["2", "2"]
    assert written["source"].tolist() == [str(segments)] * 2
    assert (out / "network_x.png").is_file()
    # the saved recipe holds the user's columns and the [network] section, and re-derives the same table
    assert load_network_recipe(recipe)["continuations"] == "keep"
    assert load_recipe(recipe).specimen == "animal"
    again = tmp_path / "again"
    assert main(["check", str(segments), "--recipe", str(recipe), "--out", str(again)]) == 0
    assert (again / "junctions.csv").read_text() == (out / "junctions.csv").read_text()
    # existing outputs are not overwritten without --force
    assert main([*args, "--out", str(out)]) == 2
    assert main([*args, "--out", str(out), "--force"]) == 0


def test_check_reads_edges_and_swc(tmp_path, capsys):
    edges = pd.DataFrame({"n1": [0, 1, 1], "n2": [1, 2, 3], "d": [4.0, 3.0, 2.5]})
    edges.to_csv(tmp_path / "edges.csv", index=False)
    flags = ["--edges", str(tmp_path / "edges.csv"), "--node-from", "n1", "--node-to", "n2", "--size", "d"]
    assert main(["check", *flags, "--root", "0", "--measure", "diameter"]) == 0
    assert "junctions used: 1" in capsys.readouterr().out
    cells = tmp_path / "cells" / "mouse"
    cells.mkdir(parents=True)
    for k in range(2):
        seg = simulate_segments(20, exponent=2.0, seed=k)
        write_swc(trace_swc(seg, seed=k), cells / f"cell{k}.swc", SIMULATED_NOTE)
    assert main(["check", "--swc", str(tmp_path / "cells"), "--radius-rule", "median"]) == 0
    out = capsys.readouterr().out
    assert "junctions used: 40; taxa: 1; specimens: 2" in out and "radius in um" in out  # SWC unit by default


def test_swc_radius_rule_options_reach_the_outputs_and_the_recipe(tmp_path, capsys):
    seg = simulate_segments(20, exponent=2.0, seed=3)
    swc = write_swc(trace_swc(seg, seed=4), tmp_path / "cell.swc", SIMULATED_NOTE)
    out, recipe = tmp_path / "out", tmp_path / "swc.toml"
    args = ["check", "--swc", str(swc), "--trim-radii", "2", "--out", str(out), "--save-recipe", str(recipe)]
    assert main(args) == 0
    assert "trim_radii = 2.0" in capsys.readouterr().err
    written = pd.read_csv(out / "junctions.csv", dtype={"daughter_samples": str})
    # every radius was read from at least one sample, and each daughter has its own count
    assert (written["parent_samples"] >= 1).all()
    assert (written["daughter_samples"].str.count(";") == 1).all()
    # the recipe states the rule in effect, so a later default cannot change the numbers
    section = load_network_recipe(recipe)
    assert section["radius_rule"] == "trimmed_median" and section["trim_radii"] == 2.0
    assert section["branch_point_sections"] == "exclude"
    assert main(["check", "--swc", str(swc), "--trim", "1", "--trim-radii", "2"]) == 2
    assert "given together" in capsys.readouterr().err


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--parent", "r"], "--parent names a junction table's columns"),
        (["--swc", "x.swc"], "options for swc and segments given together"),
        (["--root", "0"], "root do not apply to segments input"),
        (["--repeats", "rep.csv"], "repeats: does not apply to a network"),
    ],
)
def test_inconsistent_options_stop_with_a_message(segments, capsys, extra, message):
    assert main(["check", str(segments), *SEGMENT_FLAGS, *extra]) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err


def test_bad_segment_table_names_file_row_and_column(tmp_path, capsys):
    bad = pd.concat([HAND, HAND.iloc[[2]]], ignore_index=True)  # c again, row 9
    path = tmp_path / "bad.csv"
    bad.to_csv(path, index=False)
    assert main(["check", str(path), *SEGMENT_FLAGS]) == 2
    assert f"{path}, row 9, column 'id': segment id 'c' appears more than once" in capsys.readouterr().err
    assert main(["check", "--size", "r"]) == 2
    assert "given without a network" in capsys.readouterr().err
    assert main(["check"]) == 2
    assert "no junction table given" in capsys.readouterr().err


def test_recipe_network_section_is_checked(tmp_path):
    recipe = tmp_path / "r.toml"
    recipe.write_text('[columns]\nparent = "p"\n[network]\nsegment_id = "id"\nparent_id = "up"\nsize = "r"\n')
    with pytest.raises(RecipeError, match=r"\[columns\] parent: not used with a \[network\] section"):
        load_recipe(recipe)
    recipe.write_text('[network]\nswc = "cells"\nradius_rule = "mean"\ncolour = "red"\n')
    with pytest.raises(RecipeError) as info:
        network_options(load_network_recipe(recipe))
    assert "colour: unknown network option" in str(info.value)
    assert "radius_rule: unknown value 'mean'" in str(info.value)


def test_fit_and_compare_take_network_input(tmp_path):
    seg = simulate_segments(80, exponent=2.7, seed=5, scatter=0.02)
    seg.to_csv(tmp_path / "seg.csv", index=False)
    flags = ["--segment-id", "segment", "--parent-id", "parent", "--size", "radius", "--rel-error", "0.03"]
    assert main(["fit", str(tmp_path / "seg.csv"), *flags, "--out", str(tmp_path / "fit"), *SHORT]) == 0
    exps = pd.read_csv(tmp_path / "fit" / "exponents.csv")
    mu = exps.loc[exps["level"] == "population", "mean"].iloc[0]
    assert abs(mu - 2.7) < 0.2  # simulated truth 2.7
    cmp = ["compare", str(tmp_path / "seg.csv"), *flags, "--out", str(tmp_path / "cmp"), "--workers", "1"]
    assert main([*cmp, "--scope", "population", *SHORT]) == 0
    assert (tmp_path / "cmp" / "laws.csv").is_file()


# ------------------------------------------------------------------------------------ layout and figure
def test_layout_by_hand():
    frame = junctions_from_segments(HAND, segment_id="id", parent_id="up", size="r").frame
    layout = dendrogram_layout(frame)
    # tips in depth-first order, largest daughter first: below b come d (-> f at y 0, e at y 1) then c+g (y 2);
    # d sits at the mean of its tips (0.5) at its generation 1, b at the mean of d and c+g ((0.5 + 2) / 2)
    nodes = layout.junctions.set_index("junction")
    assert nodes.loc["d", ["x", "y"]].tolist() == [1.0, 0.5]
    assert nodes.loc["b", ["x", "y"]].tolist() == [0.0, 1.25]
    seg = layout.lines[layout.lines["kind"] == "segment"]
    assert len(seg) == 5  # root segment, b->d, b->c+g, d->f, d->e
    assert seg["x0"].min() == -1.0  # the root segment enters from the left


def test_network_figure_shows_the_geometry_modules_exponents():
    res = junctions_from_segments(HAND, segment_id="id", parent_id="up", size="r")
    geometry = junction_geometry(res.table)
    res.frame.loc[1, "flags"] = "extreme_ratio"
    _, ax = plt.subplots()
    assert plot_network(res.frame, geometry, ax=ax) is ax
    points = next(c for c in ax.collections if c.get_gid() == "junctions")
    np.testing.assert_allclose(np.sort(points.get_array()), np.sort(geometry["exponent"].to_numpy()))
    flagged = next(c for c in ax.collections if c.get_gid() == "flagged")
    assert len(flagged.get_offsets()) == 1
    with pytest.raises(ValueError, match="same junctions, same order"):
        plot_network(res.frame, geometry.iloc[::-1], ax=ax)
