"""Segment tables and edge lists to junctions.

References: hand-drawn networks whose junctions, generations, Strahler orders and tip counts are written
out by hand below; for random trees, brute-force re-computation in this file straight from the definitions
(walking parent pointers; tips counted with networkx's ``descendants``), independent of the package's
vectorised code. Strahler order as defined by Strahler 1957 (definition from memory): a tip has order 1;
a node whose children's largest order k is reached by two or more children has order k + 1, otherwise k.
"""

from __future__ import annotations

from pathlib import Path

import networkx as nx
import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from allobranch.errors import InputError, RecipeError
from allobranch.networks import junctions_from_edges, junctions_from_segments
from allobranch.networks.assemble import DAUGHTER_SEP, daughter_columns

# ------------------------------------------------------------------------------------ a hand-drawn tree
#      a (2.0) -> b (1.8) -+-> c (1.2) -> g (1.0)           b and d branch; a and c have one child each
#                          +-> d (1.5) -+-> e (1.0)
#                                       +-> f (1.1)
HAND = pd.DataFrame(
    {
        "id": ["a", "b", "c", "d", "e", "f", "g"],
        "up": [None, "a", "b", "b", "d", "d", "c"],
        "r": [2.0, 1.8, 1.2, 1.5, 1.0, 1.1, 1.0],
        "len": [1.0, 3.0, 1.0, 2.0, 1.0, 1.0, 3.0],
    }
)


def _segments(frame: pd.DataFrame, **kw) -> pd.DataFrame:
    return junctions_from_segments(frame, segment_id="id", parent_id="up", size="r", **kw).frame


def test_hand_tree_keep_gives_the_drawn_junctions():
    out = _segments(HAND, continuations="keep")
    # By hand: junction b (parent b, daughters d 1.5 and c 1.2), junction d (parent d, daughters f 1.1, e 1.0).
    assert out["junction"].tolist() == ["b", "d"]
    assert out[["parent", "d1", "d2"]].to_numpy().tolist() == [[1.8, 1.5, 1.2], [1.5, 1.1, 1.0]]
    assert out["daughter_segments"].tolist() == ["d;c", "f;e"]
    # generation: branch points above the parent segment (0 at the root's branch point, 1 below it);
    # Strahler: e, f, g tips (1); d has two order-1 children (2); c passes g's 1; b has orders 2 and 1 -> 2.
    # tips: b has e, f, g below it (3); d has e, f (2).
    assert out["generation"].tolist() == [0, 1]
    assert out["strahler_order"].tolist() == [2, 2]
    assert out["n_tips"].tolist() == [3, 2]
    # rows of the user's table (header = row 1): b is row 3, d row 5, c row 4, e row 6, f row 7
    assert out["parent_rows"].tolist() == ["3", "5"] and out["daughter_rows"].tolist() == ["5;4", "7;6"]


def test_hand_tree_merge_joins_continuations_with_their_child():
    res = junctions_from_segments(HAND, segment_id="id", parent_id="up", size="r", length="len")
    out = res.frame
    # a continues into b, c into g: merged pieces a+b and c+g, sizes their length-weighted means
    # (2.0*1 + 1.8*3)/4 = 1.85 and (1.2*1 + 1.0*3)/4 = 1.05 (exact arithmetic).
    assert out["parent_segment"].tolist() == ["a+b", "d"]
    assert out["daughter_segments"].tolist() == ["d;c+g", "f;e"]
    np.testing.assert_allclose(out[["parent", "d1", "d2"]].to_numpy(), [[1.85, 1.5, 1.05], [1.5, 1.1, 1.0]])
    assert out["parent_rows"].tolist() == ["2+3", "5"]
    # generation, order and tips do not depend on the continuation rule
    assert out["generation"].tolist() == [0, 1] and out["strahler_order"].tolist() == [2, 2]
    # both continuations are listed with their child and row
    assert res.continuations[["segment", "child", "row"]].to_numpy().tolist() == [
        ["a", "b", 2],
        ["c", "g", 4],
    ]
    assert res.rules["continuations"] == "merge"
    assert any("2 continuation segment(s)" in note and "length-weighted" in note for note in res.notes)


def test_merge_without_lengths_takes_the_plain_mean():
    out = _segments(HAND)
    np.testing.assert_allclose(out["parent"], [(2.0 + 1.8) / 2, 1.5])  # exact arithmetic


def test_derived_frame_is_validated_in_the_users_unit_and_measure():
    res = junctions_from_segments(
        HAND, segment_id="id", parent_id="up", size="r", measure="diameter", unit="um"
    )
    # 1.8 um diameter = 0.9 um radius = 0.0009 mm (the table's internal unit)
    assert res.table.data["parent"].iloc[0] == pytest.approx((2.0 + 1.8) / 2 / 2 / 1000)
    assert res.frame["parent"].iloc[0] == pytest.approx(1.9)  # the frame keeps the user's numbers
    assert res.table.unit == "um" and res.table.mapping.measure == "diameter"


def test_flags_point_back_at_the_segment_row(tmp_path):
    seg = HAND.copy()
    seg.loc[seg["id"] == "e", "r"] = 1.6  # daughter e larger than its parent d (1.5)
    path = tmp_path / "segments.csv"
    seg.to_csv(path, index=False)
    res = junctions_from_segments(path, segment_id="id", parent_id="up", size="r", continuations="keep")
    flags = [p for p in res.table.report.flags if p.code == "daughter_ge_parent"]
    assert len(flags) == 1
    # e is on row 6 of the file (header row 1), in the size column 'r'
    assert (flags[0].file, flags[0].row, flags[0].column) == (str(path), 6, "r")
    assert "junction d" in flags[0].message and "segment e" in flags[0].message
    assert res.frame["flags"].tolist() == ["", "daughter_ge_parent"]


def test_taxa_and_specimens_are_kept_apart():
    two = pd.concat([HAND.assign(spec="s1", tax="x"), HAND.assign(spec="s2", tax="y")], ignore_index=True)
    res = junctions_from_segments(
        two, segment_id="id", parent_id="up", size="r", taxon="tax", specimen="spec"
    )
    assert res.frame[["taxon", "specimen"]].drop_duplicates().to_numpy().tolist() == [
        ["x", "s1"],
        ["y", "s2"],
    ]
    assert len(res.frame) == 4 and res.table.n_junctions == 4


# ----------------------------------------------------------------------------------------- bad input
def _error(frame: pd.DataFrame, tmp_path: Path, **kw) -> str:
    path = tmp_path / "seg.csv"
    frame.to_csv(path, index=False)
    with pytest.raises(InputError) as info:
        junctions_from_segments(path, segment_id="id", parent_id="up", size="r", **kw)
    return str(info.value)


def test_duplicate_ids_are_named_with_rows(tmp_path):
    bad = pd.concat([HAND, HAND.iloc[[4]]], ignore_index=True)  # e again, as row 9
    msg = _error(bad, tmp_path)
    assert "seg.csv, row 9, column 'id'" in msg and "'e' appears more than once" in msg and "rows 6, 9" in msg


def test_unknown_parent_id_is_named(tmp_path):
    bad = HAND.copy()
    bad.loc[5, "up"] = "zz"  # f's parent does not exist
    msg = _error(bad, tmp_path)
    assert "seg.csv, row 7, column 'up': parent id 'zz' is not the id of any segment" in msg


def test_cycles_are_listed_with_their_members(tmp_path):
    bad = pd.concat(
        [
            HAND,
            pd.DataFrame({"id": ["x", "y", "z"], "up": ["y", "x", "y"], "r": [1.0, 1.0, 0.5], "len": 1.0}),
        ],
        ignore_index=True,
    )
    msg = _error(bad, tmp_path)
    # x (row 9) and y (row 10) are each other's parent; z (row 11) hangs below the cycle
    assert "row 9, column 'up'" in msg and "cycle" in msg and "'x' (row 9)" in msg and "'y' (row 10)" in msg
    assert "1 segment(s) descend from a cycle (rows 11)" in msg


def test_several_roots_refused_unless_allowed(tmp_path):
    bad = pd.concat(
        [HAND, pd.DataFrame({"id": ["p", "q", "s"], "up": [None, "p", "p"], "r": [1.0, 0.8, 0.7]})]
    )
    msg = _error(bad, tmp_path)
    assert "row 9, column 'up'" in msg and "2 root segments" in msg and "'a' (row 2), 'p' (row 9)" in msg
    res = junctions_from_segments(bad, segment_id="id", parent_id="up", size="r", roots="many")
    assert sorted(res.frame["junction"]) == ["b", "d", "p"]


def test_size_cells_are_checked_with_row_and_column(tmp_path):
    bad = HAND.astype({"r": object})
    bad.loc[2, "r"] = "1,2mm"
    bad.loc[3, "r"] = ""
    bad.loc[4, "r"] = -1.0
    msg = _error(bad, tmp_path)
    assert "row 4, column 'r'" in msg and "not a number" in msg
    assert "row 5, column 'r': the size is missing" in msg
    assert "row 6, column 'r': the size is -1; it must be positive" in msg


def test_missing_column_and_unknown_rule(tmp_path):
    msg = _error(HAND.drop(columns="up"), tmp_path)
    assert "row 1, column 'up'" in msg and "not in the file" in msg
    with pytest.raises(RecipeError, match="continuations: unknown value 'drop'"):
        junctions_from_segments(HAND, segment_id="id", parent_id="up", size="r", continuations="drop")


def test_no_branching_is_a_clear_error():
    chain = pd.DataFrame({"id": [1, 2, 3], "up": [None, 1, 2], "r": [3.0, 2.0, 1.0]})
    with pytest.raises(InputError, match="no junction found"):
        junctions_from_segments(chain, segment_id="id", parent_id="up", size="r")


def test_the_users_frame_is_not_changed():
    before = HAND.copy()
    _segments(HAND)
    pd.testing.assert_frame_equal(HAND, before)


# -------------------------------------------------------------------------------- random trees (hypothesis)
@st.composite
def random_trees(draw) -> tuple[pd.DataFrame, list[int]]:
    """A random rooted tree as a segment table (shuffled rows, random ids) and its parent positions."""
    n = draw(st.integers(3, 40))
    parent = [-1] + [draw(st.integers(0, i - 1)) for i in range(1, n)]
    sizes = draw(st.lists(st.floats(0.1, 10.0, allow_nan=False), min_size=n, max_size=n))
    ids = draw(st.lists(st.text("abcxyz0123", min_size=1, max_size=4), min_size=n, max_size=n, unique=True))
    frame = pd.DataFrame({"id": ids, "up": [ids[p] if p >= 0 else None for p in parent], "r": sizes})
    return frame, parent


def _reference(parent: list[int]) -> dict[int, dict[str, int]]:
    """Generation, Strahler order and tips of every branch point, straight from the definitions."""
    n = len(parent)
    children = {i: [j for j in range(n) if parent[j] == i] for i in range(n)}
    graph = nx.DiGraph([(p, i) for i, p in enumerate(parent) if p >= 0])
    graph.add_nodes_from(range(n))

    def strahler(i: int) -> int:
        if not children[i]:
            return 1
        orders = [strahler(c) for c in children[i]]
        top = max(orders)
        return top + 1 if orders.count(top) >= 2 else top

    out = {}
    for i in range(n):
        if len(children[i]) < 2:
            continue
        up, gen = parent[i], 0
        while up >= 0:
            gen += len(children[up]) >= 2
            up = parent[up]
        tips = sum(1 for j in nx.descendants(graph, i) | {i} if not children[j])
        out[i] = {"generation": gen, "strahler_order": strahler(i), "n_tips": tips}
    return out


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tree=random_trees(), seed=st.integers(0, 2**32 - 1))
def test_every_branching_segment_becomes_one_junction(tree, seed):
    frame, parent = tree
    ref = _reference(parent)
    assume(ref)
    out = _segments(frame.sample(frac=1.0, random_state=seed % 2**31), continuations="keep")
    ids, sizes = frame["id"].tolist(), frame["r"].tolist()
    assert sorted(out["junction"]) == sorted(ids[i] for i in ref)  # exactly one junction per branch point
    for row in out.itertuples():
        i = ids.index(row.junction)
        kids = [j for j, p in enumerate(parent) if p == i]
        assert row.parent == sizes[i] and row.parent_segment == ids[i]
        assert sorted(row.daughter_segments.split(DAUGHTER_SEP)) == sorted(ids[j] for j in kids)
        got = [getattr(row, c) for c in daughter_columns(out)]
        got = [g for g in got if not np.isnan(g)]
        assert got == sorted((sizes[j] for j in kids), reverse=True)  # d1 largest
        assert {k: getattr(row, k) for k in ("generation", "strahler_order", "n_tips")} == ref[i]


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tree=random_trees(), seed=st.integers(0, 2**31 - 1), rule=st.sampled_from(["merge", "keep"]))
def test_shuffling_the_rows_changes_nothing(tree, seed, rule):
    frame, parent = tree
    assume(_reference(parent))
    shuffled = frame.sample(frac=1.0, random_state=seed).reset_index(drop=True)
    a = _segments(frame, continuations=rule)
    b = _segments(shuffled, continuations=rule)
    row_cols = ["parent_rows", "daughter_rows"]
    pd.testing.assert_frame_equal(a.drop(columns=row_cols), b.drop(columns=row_cols))
    # the row references follow the rows: each names the row that holds the segment in its own table
    for out, table in ((a, frame), (b, shuffled)):
        first = out["parent_segment"].str.split("+").str[0]
        rows = out["parent_rows"].str.split("+").str[0].astype(int)
        assert (table["id"].to_numpy()[rows - 2] == first.to_numpy()).all()


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tree=random_trees(), seed=st.integers(0, 2**31 - 1))
def test_merged_junctions_sit_at_the_same_branch_points(tree, seed):
    frame, parent = tree
    ref = _reference(parent)
    assume(ref)
    keep = _segments(frame, continuations="keep")
    merge = _segments(frame.sample(frac=1.0, random_state=seed), continuations="merge")
    assert sorted(merge["junction"]) == sorted(keep["junction"])
    merged = merge.set_index("junction").loc[keep["junction"]]
    # the merged parent ends with the branching piece, each merged daughter starts with a child
    assert all(p.split("+")[-1] == j for p, j in zip(merged["parent_segment"], keep["junction"]))
    for k, m in zip(keep["daughter_segments"], merged["daughter_segments"]):
        assert sorted(k.split(";")) == sorted(d.split("+")[0] for d in m.split(";"))
    cols = ["generation", "strahler_order", "n_tips"]
    assert merged[cols].to_numpy().tolist() == keep[cols].to_numpy().tolist()


# ------------------------------------------------------------------------------------------ edge lists
@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tree=random_trees(), seed=st.integers(0, 2**31 - 1))
def test_edges_in_any_direction_and_order_give_the_segment_junctions(tree, seed):
    frame, parent = tree
    assume(_reference(parent))
    rng = np.random.default_rng(seed)
    # segment i runs from node v<parent(i)> (the root segment from node R) to node v<i>
    upper = ["R" if p < 0 else f"v{frame['id'][p]}" for p in parent]
    lower = [f"v{s}" for s in frame["id"]]
    flip = rng.random(len(parent)) < 0.5
    edges = pd.DataFrame(
        {"from": np.where(flip, lower, upper), "to": np.where(flip, upper, lower), "r": frame["r"]}
    ).sample(frac=1.0, random_state=seed)
    got = junctions_from_edges(edges, size="r", root="R", continuations="keep").frame
    want = _segments(frame, continuations="keep")
    assert got["junction"].tolist() == ["v" + j for j in want["junction"]]
    cols = ["parent", *daughter_columns(want), "generation", "strahler_order", "n_tips"]
    pd.testing.assert_frame_equal(got[cols], want[cols])


#: A vessel graph drawn by hand: inlet 0-1; node 1 branches to 2 and 3; node 2 branches to 4 and 5, and
#: 4 continues to 6; the edge 5-3 (size 0.5) joins the two branches into a loop, and a second, thinner
#: edge 2-1 (size 1.0) repeats the edge 1-2.
GRAPH = pd.DataFrame(
    {
        "a": [1, 1, 2, 2, 3, 5, 2, 4],
        "b": [0, 2, 4, 5, 1, 3, 1, 6],
        "r": [5.0, 4.0, 3.0, 2.5, 3.5, 0.5, 1.0, 2.9],
    }
)


def test_loops_are_broken_at_their_thinnest_edge_and_listed():
    res = junctions_from_edges(GRAPH, node_from="a", node_to="b", size="r", root="0")
    # Removing 5-3 (0.5, the thinnest edge of loop 1-2-5-3) and 2-1 (1.0, thinner than 1-2's 4.0) leaves the
    # tree drawn above; junctions at nodes 1 (parent 1-0, daughters 1-2 and 3-1) and 2 (daughters 2-4+4-6 merged
    # with mean (3.0 + 2.9) / 2 = 2.95, and 2-5).
    assert res.frame["junction"].tolist() == ["1", "2"]
    assert res.frame["daughter_segments"].tolist() == ["1-2;3-1", "2-4+4-6;2-5"]
    np.testing.assert_allclose(res.frame["d1"], [4.0, 2.95])
    removed = [p for p in res.problems if p.code == "loop_edge"]
    assert [(p.row, p.severity) for p in removed] == [(7, "excluded"), (8, "excluded")]  # rows of 5-3 and 2-1
    assert "thinnest edge" in removed[0].message and res.rules["loops"] == "break_thinnest"


def test_loops_refused_on_request_and_roots_checked():
    with pytest.raises(InputError, match=r"2 loop\(s\); the edges in rows 7, 8 each close one"):
        junctions_from_edges(GRAPH, node_from="a", node_to="b", size="r", root="0", loops="error")
    with pytest.raises(InputError, match="root node '9' is not a node"):
        junctions_from_edges(GRAPH, node_from="a", node_to="b", size="r", root="9")
    with pytest.raises(InputError, match="root node '2' of specimen .* has 4 edges"):
        junctions_from_edges(GRAPH, node_from="a", node_to="b", size="r", root="2")
    apart = pd.concat([GRAPH, pd.DataFrame({"a": [10], "b": [11], "r": [1.0]})], ignore_index=True)
    with pytest.raises(InputError, match=r"row 10: 1 edge\(s\) .* not connected to the root node '0'"):
        junctions_from_edges(apart, node_from="a", node_to="b", size="r", root="0")


def test_root_per_specimen():
    two = pd.concat([GRAPH.assign(s="p"), GRAPH.assign(s="q")], ignore_index=True)
    res = junctions_from_edges(
        two, node_from="a", node_to="b", size="r", specimen="s", root={"p": "0", "q": "6"}
    )
    # from node 6 the same graph is entered through 4-6: the branch points are 2 and 1 in that order
    assert res.frame.groupby("specimen")["junction"].apply(list).to_dict() == {
        "p": ["1", "2"],
        "q": ["2", "1"],
    }
    with pytest.raises(InputError, match="no root node given for specimen 'q'"):
        junctions_from_edges(two, node_from="a", node_to="b", size="r", specimen="s", root={"p": "0"})
