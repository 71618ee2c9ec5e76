"""SWC files to junctions: parsing, soma handling, type selection, radius rules, round trip, recovery.

References: hand-written SWC files whose sections and radii are worked out by hand in the comments;
numpy's median for the radius rules; the SWC field order ``id type x y z radius parent`` with types 1 soma,
2 axon, 3 basal dendrite, 4 apical dendrite (the SWC standard as described by Cannon et al. 1998, J.
Neurosci. Methods 84:49; citation from memory); the simulator's exact law ``r0^a = r1^a + r2^a`` for the
round trip and the recovery check.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from allobranch.errors import InputError, RecipeError
from allobranch.geometry import junction_geometry
from allobranch.networks import junctions_from_segments, junctions_from_swc, write_swc
from allobranch.networks.simulate import SIMULATED_NOTE, simulate_segments, trace_swc
from allobranch.networks.swc import RadiusRule, parse_swc, swc_text

# A soma (1) with a dendrite and an axon leaving it. The dendrite's first section 2-4 ends at branch point 4;
# there it splits into 5-6 (which branches again at 6 into tips 9 and 10) and 7-8. Sample 11 is an axon tip.
HAND_SWC = """# simulated test cell (invented)
1 1 0 0 0 5 -1
2 3 5 0 0 2.0 1
3 3 6 0 0 2.0 2
4 3 7 0 0 2.5 3
5 3 8 1 0 1.6 4
6 3 9 2 0 1.8 5
7 3 8 -1 0 1.5 4
8 3 9 -2 0 1.4 7
9 4 10 3 0 1.0 6
10 4 10 1 0 1.1 6
11 2 -5 0 0 1.0 1
"""


@pytest.fixture
def hand(tmp_path):
    path = tmp_path / "cell.swc"
    path.write_text(HAND_SWC)
    return path


def test_sections_soma_and_junctions_by_hand(hand):
    res = junctions_from_swc(hand, radius_rule="median")
    out = res.frame
    # junctions at the non-soma branch points 4 and 6; the soma (3 children: 2, 11 ... ) is not one
    assert out["junction"].tolist() == ["4", "6"]
    assert out["parent_segment"].tolist() == ["2-4", "5-6"]
    assert out["daughter_segments"].tolist() == ["5-6;7-8", "10;9"]
    # median rule, numpy reference: section 2-4 has radii 2.0, 2.0, 2.5; 5-6 has 1.6, 1.8; 7-8 has 1.5, 1.4
    np.testing.assert_allclose(out["parent"], [np.median([2.0, 2.0, 2.5]), np.median([1.6, 1.8])])
    np.testing.assert_allclose(out["d1"], [np.median([1.6, 1.8]), 1.1])
    np.testing.assert_allclose(out["d2"], [np.median([1.5, 1.4]), 1.0])
    # rows: lines of the sections' first and last samples (the comment is line 1)
    assert out["parent_rows"].tolist() == ["3-5", "6-7"]
    # the dendrite's first branch point has generation 0 (the soma is not counted)
    assert out["generation"].tolist() == [0, 1] and out["n_tips"].tolist() == [3, 2]
    assert res.table.unit == "um"
    assert any(
        "1 soma branch point(s) and 2 neurite(s) leaving the soma are not junctions" in n for n in res.notes
    )


def test_near_branch_reads_next_to_the_junction(hand):
    out = junctions_from_swc(hand, radius_rule="near_branch", near_points=1).frame
    # parent 2-4 read at sample 3 (just before branch point 4, whose own 2.5 is left out); daughters at their
    # first samples 5 (1.6) and 7 (1.5); at junction 6 the parent 5-6 is read at sample 5 (1.6)
    assert out[["parent", "d1", "d2"]].to_numpy().tolist() == [[2.0, 1.6, 1.5], [1.6, 1.1, 1.0]]


def _one_section(tmp_path, radii, daughters):
    """A soma at x = 0 and one straight section of samples at x = 1, 2, ... (path distance s = x from the
    soma), ending in a branch point whose two daughters are given as lists of radii along +y and -y."""
    lines = ["1 1 0 0 0 4 -1"] + [f"{k + 2} 3 {k + 1} 0 0 {r} {k + 1}" for k, r in enumerate(radii)]
    end, next_id = len(radii) + 1, len(radii) + 2
    for sign, rs in zip((1, -1), daughters):
        up = end
        for k, r in enumerate(rs):
            lines.append(f"{next_id} 3 {len(radii)} {sign * (k + 1)} 0 {r} {up}")
            up, next_id = next_id, next_id + 1
    path = tmp_path / "one.swc"
    path.write_text("\n".join(lines) + "\n")
    return path


def test_default_rule_trims_four_end_radii_and_reads_short_sections_at_the_middle(tmp_path):
    # Parent section: samples at s = 1..12 (x = 1..12), the last the branch point. Flare at the start
    # (0.5, 0.45), a plateau near 0.4 (s = 3..9) and swelling towards the branch point (0.5, 0.6, 0.75).
    parent = [0.5, 0.45, 0.40, 0.41, 0.39, 0.42, 0.40, 0.38, 0.41, 0.5, 0.6, 0.75]
    # Daughter 1: samples at s = 1..4 from the branch point, radii 0.6, 0.3, 0.35, 0.5 (a tip at s = 4);
    # daughter 2: one tip sample 0.2.
    path = _one_section(tmp_path, parent, [[0.6, 0.3, 0.35, 0.5], [0.2]])
    res = junctions_from_swc(path)
    row = res.frame.iloc[0]
    # By hand, default trim 4 radii of the end sample: 4 x 0.5 = 2 at the start (s >= 2) and 4 x 0.75 = 3 at
    # the branch point (s <= 12 - 3 = 9): samples s = 2..9, radii 0.45 0.40 0.41 0.39 0.42 0.40 0.38 0.41;
    # sorted, the middle two are 0.40 and 0.41, so the median is 0.405 (numpy's median agrees).
    assert row["parent"] == pytest.approx(0.405) == np.median(parent[1:9])
    assert row["parent_samples"] == 8
    # Daughter 1 (4 long): trims 4 x 0.6 = 2.4 and 4 x 0.5 = 2.0 leave no sample (2.4 <= s <= 2.0), so its
    # sample nearest the middle (s = 2, radius 0.3) is used; the one-sample tip daughter is read at that sample.
    assert (row["d1"], row["d2"]) == (0.3, 0.2)
    assert row["daughter_samples"] == "1;1"
    assert res.rules["radius_rule"] == "trimmed_median" and res.rules["trim_radii"] == 4.0
    assert any(n.startswith("2 of 3 section(s) too short for the trim") for n in res.notes)
    # the earlier default, two end radii, stays available: trims 1.0 and 1.5 keep s = 1..10, ten radii,
    # median of the middle two (0.41 and 0.41 once sorted) = 0.41
    old = junctions_from_swc(path, trim_radii=2).frame.iloc[0]
    assert old["parent"] == pytest.approx(0.41) == np.median(parent[:10]) and old["parent_samples"] == 10
    # one distance for every section: trim 3.5 keeps s = 4..8 (0.41 0.39 0.42 0.40 0.38), median 0.40
    assert junctions_from_swc(path, trim=3.5).frame["parent"].iloc[0] == np.median(parent[3:8]) == 0.40
    # trim 0 keeps every sample: the plain median, as the median rule gives
    plain = junctions_from_swc(path, trim=0.0).frame.iloc[0]
    assert (
        plain["parent"]
        == np.median(parent)
        == junctions_from_swc(path, radius_rule="median").frame["parent"].iloc[0]
    )
    assert plain["parent_samples"] == 12


def test_trim_options_are_checked():
    with pytest.raises(RecipeError, match="trim .* and trim_radii .* given together"):
        RadiusRule(trim=1.0, trim_radii=2.0)
    with pytest.raises(RecipeError, match="trim_radii must be 0 or more"):
        RadiusRule(trim_radii=-1.0)
    with pytest.raises(RecipeError, match="radius_rule: unknown value 'mean'"):
        RadiusRule("mean")


def test_junctions_at_a_section_of_one_branch_point_sample_are_listed_and_left_out(tmp_path):
    # HAND_SWC with sample 6 hung from branch point 4 (so 4 has daughters 5, 6 and 7-8) and two tips added
    # below 8. Sample 6 keeps its tips 9 and 10, so section "6" is one sample that is a branch point.
    # Junction 8 (parent 7-8, tips 12 and 13) is ordinary. Sample k is on line k + 1 (a comment first).
    text = HAND_SWC.replace("6 3 9 2 0 1.8 5", "6 3 9 2 0 1.8 4") + "12 3 10 -3 0 1.2 8\n13 3 10 -1 0 1.1 8\n"
    path = tmp_path / "adjacent.swc"
    path.write_text(text)
    res = junctions_from_swc(path, radius_rule="median")
    # 4 has section 6 as a daughter and 6 has it as its parent: both left out, each listed with its line
    assert res.frame["junction"].tolist() == ["8"]
    left = [(p.severity, p.row, p.code) for p in res.problems]
    assert left == [("excluded", 5, "branch_point_section"), ("excluded", 7, "branch_point_section")]
    assert "daughter section 6 is one branch-point sample" in res.problems[0].message
    assert "parent section 6 is one branch-point sample" in res.problems[1].message
    # kept on request: section 6 then has the branch point's own radius 1.8 as daughter of 4 and parent of 6
    kept = junctions_from_swc(path, radius_rule="median", branch_point_sections="keep").frame
    assert kept["junction"].tolist() == ["4", "6", "8"]
    assert kept.set_index("junction").loc["6", "parent"] == 1.8
    # junction 4's daughters, largest first: section 6 (1.8), tip 5 (1.6), 7-8 (numpy median of 1.5, 1.4)
    four = kept.set_index("junction").loc["4"]
    assert four["daughter_segments"] == "6;5;7-8"
    np.testing.assert_allclose(four[["d1", "d2", "d3"]].astype(float), [1.8, 1.6, np.median([1.5, 1.4])])
    # the tree itself is unchanged: junction 8 has generation 1 (below branch point 4) either way
    assert kept.set_index("junction").loc["8", "generation"] == res.frame["generation"].iloc[0] == 1


def test_type_selection_uses_the_branch_points_type(hand):
    assert junctions_from_swc(hand, neurite_types="basal").frame["junction"].tolist() == ["4", "6"]
    # apical samples 9 and 10 are tips: no apical branch point, so no junction
    with pytest.raises(InputError, match="no junction found"):
        junctions_from_swc(hand, neurite_types="apical")
    with pytest.raises(InputError, match="no junction found"):
        junctions_from_swc(hand, neurite_types="axon")


def test_folder_of_files_with_taxa_from_subfolders(tmp_path):
    for taxon, name in (("mouse", "m1"), ("mouse", "m2"), ("rat", "r1")):
        (tmp_path / taxon).mkdir(exist_ok=True)
        (tmp_path / taxon / f"{name}.swc").write_text(HAND_SWC)
    res = junctions_from_swc(tmp_path)
    pairs = res.frame[["taxon", "specimen"]].drop_duplicates().to_numpy().tolist()
    assert pairs == [["mouse", "m1"], ["mouse", "m2"], ["rat", "r1"]]
    assert res.table.n_junctions == 6 and res.frame["source"].str.endswith("r1.swc").sum() == 2
    (tmp_path / "rat" / "m1.swc").write_text(HAND_SWC)
    with pytest.raises(InputError, match="specimen 'm1' is named by more than one file"):
        junctions_from_swc(tmp_path)


def test_bad_lines_are_named_with_line_and_field(tmp_path):
    bad = HAND_SWC.replace("5 3 8 1 0 1.6 4", "5 3 8 1 0 thick 4").replace(
        "7 3 8 -1 0 1.5 4", "7 3 8 -1 0 1.5"
    )
    with pytest.raises(InputError) as info:
        parse_swc(bad, "cell.swc")
    msg = str(info.value)
    assert "cell.swc, row 8: 6 fields; an SWC line has 7" in msg  # line 8 holds sample 7
    # the number check runs once every line has seven fields
    with pytest.raises(InputError, match=r"cell.swc, row 6, column 'radius': 'thick' is not a finite number"):
        parse_swc(HAND_SWC.replace("5 3 8 1 0 1.6 4", "5 3 8 1 0 thick 4"), "cell.swc")
    path = tmp_path / "loop.swc"
    path.write_text(HAND_SWC.replace("2 3 5 0 0 2.0 1", "2 3 5 0 0 2.0 4"))  # 2 -> 4 -> 3 -> 2
    with pytest.raises(InputError, match="cycle"):
        junctions_from_swc(path)
    path.write_text(HAND_SWC.replace("8 3 9 -2 0 1.4 7", "8 3 9 -2 0 0 7"))
    with pytest.raises(InputError, match=r"row 9, column 'radius': radius 0"):
        junctions_from_swc(path)
    path.write_text(HAND_SWC.replace("8 3 9 -2 0 1.4 7", "8 3 9 -2 0 1.4 70"))
    with pytest.raises(InputError, match="parent id '70' is not the id of any segment"):
        junctions_from_swc(path)
    with pytest.raises(InputError, match="hold radii"):
        junctions_from_swc(tmp_path / "loop.swc", measure="diameter")


def test_swc_round_trip_gives_the_segment_tables_junctions(tmp_path):
    seg = simulate_segments(40, exponent=3.0, seed=5)
    samples = trace_swc(seg, seed=6, noise=0.0, swelling=0.0, decay_radii=1e-9)
    path = write_swc(samples, tmp_path / "sim.swc", SIMULATED_NOTE)
    assert SIMULATED_NOTE in path.read_text()
    pd.testing.assert_frame_equal(
        parse_swc(swc_text(samples)).drop(columns="line"), samples, check_dtype=False, atol=1e-6
    )
    got = junctions_from_swc(path, radius_rule="median").frame
    want = junctions_from_segments(seg, segment_id="segment", parent_id="parent", size="radius").frame
    assert len(got) == len(want) == 40
    cols = ["parent", "d1", "d2"]
    # written with 6 significant digits: equal to 1e-5 relative
    np.testing.assert_allclose(got[cols].to_numpy(), want[cols].to_numpy(), rtol=1e-5)
    for c in ("generation", "strahler_order", "n_tips"):
        assert got[c].tolist() == want[c].tolist()
    # the simulator's law holds exactly: every naive exponent is 3 (to the rounding of the file)
    np.testing.assert_allclose(
        junction_geometry(junctions_from_swc(path, radius_rule="median").table)["exponent"], 3.0, rtol=1e-3
    )


def test_default_rule_recovers_the_exponent_through_taper_and_swelling(tmp_path):
    # Simulated truth a = 2.5; sample radii flare from the parent's size, swell 40 % towards branch points
    # and carry 5 % noise. The default rule's median per-junction exponent lands within 0.1 of the truth;
    # reading next to the branch point (where the flare and swelling are) does not.
    seg = simulate_segments(400, exponent=2.5, seed=11)
    path = write_swc(trace_swc(seg, seed=12, noise=0.05, swelling=0.4), tmp_path / "sim.swc", SIMULATED_NOTE)
    median = {
        rule: float(
            np.nanmedian(junction_geometry(junctions_from_swc(path, radius_rule=rule).table)["exponent"])
        )
        for rule in ("trimmed_median", "near_branch")
    }
    assert abs(median["trimmed_median"] - 2.5) < 0.1
    assert abs(median["near_branch"] - 2.5) > 0.1
