"""Cleaning and ordering a raw pedigree: repairs, refusals, ordering and cycle detection.

Ordering and cycle detection are checked against networkx (a general-purpose graph library) on
the same graphs; inbreeding after cleaning against the Mrode (2014) Table 2.1 example."""

from __future__ import annotations

from pathlib import Path

import networkx as nx
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ped2g.errors import UserError
from ped2g.pedigree.clean import clean_pedigree, order_parents_first, read_raw_pedigree
from ped2g.pedigree.relationships import relationship_inverse

DATA = Path(__file__).resolve().parents[1] / "data"


def frame(rows, columns=("id", "sire", "dam")):
    """A table as read_table returns it: strings, index = line number (header = line 1)."""
    return pd.DataFrame([list(r) for r in rows], columns=list(columns),
                        index=pd.Index(range(2, len(rows) + 2), name="line"))


def by_id(ped):
    out = ped.to_frame().set_index("id")
    return out


def test_messy_fixture_is_cleaned_and_every_change_logged():
    ped, changes = read_raw_pedigree(DATA / "pedigree_messy.tsv", id_col="animal",
                                     sire_col="father", dam_col="mother")
    table = by_id(ped)
    # Mrode (2014) Table 2.1 animals keep their inbreeding: F5 = F6 = 0.125 (p. 25).
    assert table.loc["5", "inbreeding"] == pytest.approx(0.125, abs=1e-12)
    assert table.loc["6", "inbreeding"] == pytest.approx(0.125, abs=1e-12)
    # ids kept exactly as written (leading zeros, case); white space stripped and logged
    assert "0042" in table.index and "Abc" in table.index
    assert table.loc["0042", "sire"] == "6" and table.loc["0042", "dam"] == ""
    assert table.loc["Abc", "sire"] == "" and table.loc["Abc", "dam"] == "x9"
    # parents without rows (1, 2, x9) added as founders
    for founder in ("1", "2", "x9"):
        assert table.loc[founder, "sire"] == "" and table.loc[founder, "generation"] == 0
    assert table.loc["6", "generation"] == 3 and table.loc["0042", "generation"] == 4
    got = {(r.row, r.id, r.problem) for r in changes.itertuples()}
    assert got == {
        (6, "4", "duplicate row"),
        (7, "0042", "white space around the id"),
        (2, "2", "dam has no row of its own"),
        (4, "1", "sire has no row of its own"),
        (8, "x9", "dam has no row of its own"),
    }
    assert list(changes.columns) == ["row", "id", "problem", "action"]
    assert changes.loc[changes["problem"] == "duplicate row", "action"].tolist() == [
        "dropped (same as line 5)"]
    # parents before offspring
    assert np.all(ped.sire < np.arange(ped.n)) and np.all(ped.dam < np.arange(ped.n))


def test_clean_input_has_no_changes():
    ped, changes = clean_pedigree(frame([("a", "", ""), ("b", "", ""), ("c", "a", "b")]))
    assert len(changes) == 0 and list(changes.columns) == ["row", "id", "problem", "action"]
    assert list(ped.ids) == ["a", "b", "c"]


def test_custom_missing_codes():
    rows = [("a", "", ""), ("b", "unknown", "-"), ("c", "a", "0")]
    ped, changes = clean_pedigree(frame(rows), missing=("unknown", "-"))
    table = by_id(ped)
    assert table.loc["b", "sire"] == "" and table.loc["b", "dam"] == ""
    # with other codes, "0" is an ordinary id: it becomes a founder with a logged change
    assert table.loc["c", "dam"] == "0"
    assert set(changes["problem"]) == {"dam has no row of its own"}


@pytest.mark.parametrize(("rows", "match"), [
    ([("a", "", ""), ("a", "b", "")], r"animal 'a' appears on line 2 \(sire '', dam ''\) and "
                                        r"line 3 \(sire 'b', dam ''\) with different parents"),
    ([("a", "", ""), ("b", "b", "a")], r"line 3: animal 'b' is listed as its own sire"),
    ([("a", "", ""), ("b", "a", "b")], r"line 3: animal 'b' is listed as its own dam"),
    ([("a", "c", ""), ("b", "a", ""), ("c", "b", "")],
     r"animal 'a' is its own ancestor: 'a' \(line 2\) <- 'c' \(line 4\) <- 'b' \(line 3\) <- "
     r"'a' \(line 2\)"),
    ([("a", "", ""), ("b", "a", "a")], r"line 3: animal 'b' has 'a' as both sire and dam "
                                       r"\(selfing\).*--hermaphrodite"),
    ([("a", "", ""), ("b", "", ""), ("c", "a", "b"), ("d", "b", "a")],
     r"'a' is the sire of 'c' \(line 4\) and the dam of 'd' \(line 5\).*--hermaphrodite"),
    ([("a", "", ""), ("", "a", "")], r"line 3: the id column is blank"),
    ([("a", "", ""), ("NA", "a", "")], r"line 3: animal id 'NA' is one of the unknown-parent"),
])
def test_refusals_name_the_line_and_the_id(rows, match):
    with pytest.raises(UserError, match=match) as info:
        clean_pedigree(frame(rows), source="ped.csv")
    assert "pedigree table ped.csv" in str(info.value)
    assert "\n" not in str(info.value)


def test_cycle_below_other_animals_is_found():
    # d descends from a cycle b <- c <- b; the cycle, not d, is printed.
    rows = [("a", "", ""), ("b", "a", "c"), ("c", "b", ""), ("d", "", "c")]
    with pytest.raises(UserError, match=r"is its own ancestor: 'b' \(line 3\) <- 'c' \(line 4\) "
                                        r"<- 'b' \(line 3\)"):
        clean_pedigree(frame(rows))


def test_hermaphrodite_allows_selfing_and_both_roles():
    rows = [("p", "", ""), ("q", "", ""), ("s1", "p", "p"), ("x", "p", "q"), ("y", "q", "p")]
    ped, _ = clean_pedigree(frame(rows), hermaphrodite=True)
    table = by_id(ped)
    # selfing of a non-inbred parent: F = 1/2 (exact; Wright 1922)
    assert table.loc["s1", "inbreeding"] == pytest.approx(0.5, abs=1e-12)
    assert table.loc["x", "inbreeding"] == 0 and table.loc["y", "inbreeding"] == 0


def test_missing_column_is_one_clear_line():
    with pytest.raises(UserError, match=r"has no sire column 'father' \(columns are: id, sire, dam\)"):
        clean_pedigree(frame([("a", "", "")]), sire_col="father")


def test_same_column_for_two_roles_is_refused():
    with pytest.raises(UserError, match="three different columns"):
        clean_pedigree(frame([("a", "", "")]), dam_col="sire")


# ---------------------------------------------------------------- property tests

@st.composite
def random_graphs(draw, max_n=25):
    """Random parent links on n animals, with or without cycles; some parents unknown."""
    n = draw(st.integers(1, max_n))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    if draw(st.booleans()):   # any links: usually cyclic
        sire = rng.integers(-1, n, size=n)
        dam = rng.integers(-1, n, size=n)
    else:                     # parents drawn among earlier animals, then labels shuffled
        pos = np.arange(n)
        sire = np.where(rng.random(n) < 0.8, (rng.random(n) * pos).astype(np.int64), -1)
        dam = np.where(rng.random(n) < 0.8, (rng.random(n) * pos).astype(np.int64), -1)
        sire[0] = dam[0] = -1
        perm = rng.permutation(n)          # animal k is renamed perm[k]
        new_sire = np.full(n, -1, dtype=np.int64)
        new_dam = np.full(n, -1, dtype=np.int64)
        new_sire[perm] = np.where(sire >= 0, perm[np.maximum(sire, 0)], -1)
        new_dam[perm] = np.where(dam >= 0, perm[np.maximum(dam, 0)], -1)
        sire, dam = new_sire, new_dam
    return sire.astype(np.int64), dam.astype(np.int64)


@settings(max_examples=150, deadline=None)
@given(random_graphs())
def test_ordering_and_cycle_detection_agree_with_networkx(graph):
    sire, dam = graph
    n = len(sire)
    g = nx.MultiDiGraph()
    g.add_nodes_from(range(n))
    g.add_edges_from((int(p), i) for i in range(n) for p in (sire[i], dam[i]) if p >= 0)
    order, generation = order_parents_first(sire, dam)
    if not nx.is_directed_acyclic_graph(g):
        assert order is None
        # exactly the animals networkx cannot place are left without a generation
        placed = {v for layer in _layers_until_stuck(g) for v in layer}
        assert set(np.flatnonzero(generation >= 0)) == placed
        return
    assert order is not None
    assert sorted(order) == list(range(n))
    # generation = networkx's topological generations (longest path from a founder)
    for k, layer in enumerate(nx.topological_generations(g)):
        assert all(generation[v] == k for v in layer)
    position = np.empty(n, dtype=np.int64)
    position[order] = np.arange(n)
    for p, c in g.edges():
        assert position[p] < position[c]


def _layers_until_stuck(g):
    g = nx.MultiDiGraph(g)
    while True:
        layer = [v for v in g if g.in_degree(v) == 0]
        if not layer:
            return
        yield layer
        g.remove_nodes_from(layer)


@settings(max_examples=100, deadline=None)
@given(st.integers(2, 25), st.integers(0, 2**32 - 1))
def test_reported_cycle_is_a_cycle_of_the_graph(n, seed):
    rng = np.random.default_rng(seed)
    names = [f"id{k}" for k in range(n)]
    parent = {names[k]: names[rng.integers(0, n)] for k in range(n)}
    rows = [(k, parent[k] if parent[k] != k else "", "") for k in names]
    g = nx.DiGraph([(p, c) for c, p, _ in rows if p])
    try:
        clean_pedigree(frame(rows))
    except UserError as err:
        assert not nx.is_directed_acyclic_graph(g)
        chain = str(err).split(": ", 2)[2].split(", where")[0]
        loop = [part.split("'")[1] for part in chain.split(" <- ")]
        assert loop[0] == loop[-1] and len(set(loop[:-1])) == len(loop) - 1
        for child, par in zip(loop[:-1], loop[1:]):
            assert g.has_edge(par, child)
    else:
        assert nx.is_directed_acyclic_graph(g)


@settings(max_examples=50, deadline=None)
@given(st.integers(1, 30), st.integers(0, 2**32 - 1))
def test_shuffling_rows_changes_only_row_order(n, seed):
    rng = np.random.default_rng(seed)
    rows = []
    for k in range(n):
        s = f"s{rng.integers(0, k)}" if k and rng.random() < 0.7 else "0"
        d = f"s{rng.integers(0, k)}" if k and rng.random() < 0.7 else "NA"
        rows.append((f"s{k}", s, d if d != s else "NA"))
    rows.append((f"s{n}", "outside", "NA"))   # a parent without a row
    ped1, ch1 = clean_pedigree(frame(rows), hermaphrodite=True)
    perm = rng.permutation(len(rows))
    ped2, ch2 = clean_pedigree(frame([rows[i] for i in perm]), hermaphrodite=True)
    t1, t2 = by_id(ped1), by_id(ped2).loc[by_id(ped1).index]
    pd.testing.assert_frame_equal(t1, t2)
    # A-inverse is the same matrix after re-indexing
    where = {name: i for i, name in enumerate(ped2.ids)}
    p = np.array([where[name] for name in ped1.ids])
    a1 = relationship_inverse(ped1).toarray()
    a2 = relationship_inverse(ped2).toarray()[np.ix_(p, p)]
    np.testing.assert_allclose(a1, a2, atol=1e-12)
    assert sorted(ch1["problem"]) == sorted(ch2["problem"])


def test_white_space_around_a_parent_names_the_parent_and_the_offspring():
    # Mrode (2014) Table 2.1 pedigree (docs/methods.md §1.7, P1) with the sire cell of animal 5
    # written as " 4 " and the dam cell of animal 6 as "2 ": the repaired ids are the parents
    # 4 and 2, found on the rows of offspring 5 and 6 (lines 6 and 7, header = line 1).
    rows = [("1", "", ""), ("2", "", ""), ("3", "1", "2"), ("4", "1", ""), ("5", " 4 ", "3"),
            ("6", "5", "2 ")]
    ped, changes = clean_pedigree(frame(rows))
    got = [(r.row, r.id, r.problem, r.action) for r in changes.itertuples()]
    assert got == [(6, "4", "white space around the sire", "stripped (the sire of '5' on this line)"),
                   (7, "2", "white space around the dam", "stripped (the dam of '6' on this line)")]
    # the repair links the right parents: F5 = F6 = 0.125 (Mrode 2014 p. 25)
    table = by_id(ped)
    assert table.loc["5", "sire"] == "4" and table.loc["6", "dam"] == "2"
    assert table.loc["5", "inbreeding"] == pytest.approx(0.125, abs=1e-12)
    assert table.loc["6", "inbreeding"] == pytest.approx(0.125, abs=1e-12)
