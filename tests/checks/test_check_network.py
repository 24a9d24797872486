"""Sub-basin network sanity: duplicates, dangling ids, cycles, direct inflows, catchment tracing."""

from __future__ import annotations

import networkx as nx
from hypothesis import given, settings
from hypothesis import strategies as st

from lakefeed.checks import check_network


def test_sane_network_is_described() -> None:
    rep = check_network(["a", "b", "c", "d"], ["LAKE", "a", "LAKE", "OUTSIDE"], lake_id="LAKE", outside_ids=["OUTSIDE"])
    assert rep.problems == []
    assert rep.direct_inflows == ["a", "c"]
    assert rep.catchment == ["a", "b", "c"]
    assert rep.outside == ["d"]


def test_cycle_names_the_ids() -> None:
    rep = check_network(["a", "b", "c", "e"], ["b", "c", "a", "LAKE"], lake_id="LAKE")
    assert len(rep.problems) == 1
    msg = rep.problems[0]
    assert msg == "cycle in the sub-basin network: a -> b -> c -> a"


def test_self_loop() -> None:
    rep = check_network(["a", "b"], ["a", "LAKE"], lake_id="LAKE")
    assert any("draining into themselves: 'a'" in p for p in rep.problems)


def test_dangling_downstream_id_names_id_and_source() -> None:
    rep = check_network(["a", "b"], ["LAKE", "zz"], lake_id="LAKE")
    assert rep.problems == ["dangling downstream id 'zz' (of sub-basin(s) 'b'): no sub-basin has that id"]


def test_undeclared_terminal_is_dangling_and_says_lake_id_missing() -> None:
    rep = check_network(["a"], ["LAKE"])
    assert "dangling downstream id 'LAKE'" in rep.problems[0]
    assert "no subbasins.lake_id is set" in rep.problems[0]


def test_duplicates_and_blank_downstream() -> None:
    rep = check_network(["a", "a", "b"], ["LAKE", "LAKE", None], lake_id="LAKE")
    assert rep.problems == ["duplicate sub-basin ids: 'a'"]
    assert rep.outside == ["b"]
    rep = check_network(["a", "b"], ["LAKE", float("nan")], lake_id="LAKE")
    assert rep.problems == [] and rep.outside == ["b"]


def test_direct_inflows_listed_by_hand() -> None:
    rep = check_network(["a", "b"], [None, "a"], direct_inflows=["a"])
    assert rep.problems == [] and rep.direct_inflows == ["a"] and rep.catchment == ["a", "b"]
    rep = check_network(["a"], [None], direct_inflows=["q"])
    assert any("direct_inflows names unknown sub-basin(s): 'q'" in p for p in rep.problems)


def test_nothing_reaches_the_lake() -> None:
    rep = check_network(["a", "b"], ["OUT", "a"], lake_id="LAKE", outside_ids=["OUT"])
    assert rep.problems == [
        "no sub-basin drains into the lake (none has downstream id 'LAKE' nor is listed in direct_inflows)"
    ]


@st.composite
def trees(draw: st.DrawFn) -> tuple[list[str], list[str]]:
    """Random forests draining to LAKE or OUT: node i drains to an earlier node or a terminal."""
    n = draw(st.integers(1, 30))
    down = []
    for i in range(n):
        choices = ["LAKE", "OUT", *[f"s{j}" for j in range(i)]]
        down.append(draw(st.sampled_from(choices)))
    return [f"s{i}" for i in range(n)], down


@settings(max_examples=60, deadline=None)
@given(trees())
def test_catchment_matches_an_independent_walk(net: tuple[list[str], list[str]]) -> None:
    """Property: on any tree the check finds no problem and the catchment is what a plain walk gives."""
    ids, down = net
    rep = check_network(ids, down, lake_id="LAKE", outside_ids=["OUT"])
    parent = dict(zip(ids, down, strict=True))

    def reaches_lake(i: str) -> bool:
        while i in parent:
            i = parent[i]
        return i == "LAKE"

    expected = sorted(i for i in ids if reaches_lake(i))
    assert rep.catchment == expected
    assert sorted(rep.outside) == sorted(set(ids) - set(expected))
    if expected:
        assert rep.problems == []
    # and against networkx ancestors on a graph built here
    g = nx.DiGraph(list(zip(ids, down, strict=True)))
    assert set(rep.catchment) == (nx.ancestors(g, "LAKE") if "LAKE" in g else set())


def test_outside_ids_are_case_insensitive_with_common_defaults() -> None:
    from lakefeed.config import SubbasinLayer

    defaults = SubbasinLayer(path="x.gpkg").outside_ids
    rep = check_network(["a", "b", "c"], ["LAKE", "outside", "-1"], lake_id="LAKE", outside_ids=defaults)
    assert rep.problems == [] and rep.outside == ["b", "c"]


def test_misspelt_lake_id_is_pointed_at() -> None:
    rep = check_network(["a"], ["LAKE"], lake_id="LAKES")
    assert rep.problems == [
        "dangling downstream id 'LAKE' (of sub-basin(s) 'a'): no sub-basin has that id "
        "(subbasins.lake_id is 'LAKES', which no sub-basin drains into)"
    ]


def test_lake_id_naming_the_lakes_own_subbasin() -> None:
    """Regression: lake_id naming a sub-basin (the one the lake lies in) gave 'no sub-basin drains into the lake'
    and its outflow id out of the layer was called dangling; now as in lakefeed.geometry.network."""
    report = check_network(
        ["L", "a", "b", "c", "x"], ["RIVER", "L", "L", "a", "OUTSIDE"], lake_id="L", outside_ids=["OUTSIDE"]
    )
    assert report.problems == []
    assert report.direct_inflows == ["a", "b"]
    assert report.catchment == ["L", "a", "b", "c"]
    assert report.outside == ["x"]
