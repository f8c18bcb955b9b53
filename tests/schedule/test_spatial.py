"""Adjacency and the spatial rules (green-up, maximum opening) on small grids of squares."""

import itertools
from dataclasses import replace

import numpy as np
import pytest
import shapely

from yieldscape.adjacency import build_adjacency
from yieldscape.growth import ChapmanRichards
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import HarvestRules, find_even_flow
from yieldscape.schedule.spatial import SpatialRules

from helpers import squares

CURVES = CurveSet(["pine"], [ChapmanRichards(450.0, 0.035, 3.0)])


def test_adjacency_edges_and_corners_match_brute_force():
    # Independent check: shapely's touches / shared-boundary length on every pair.
    rng = np.random.default_rng(8)
    pts = shapely.points(rng.uniform(0, 1000, (60, 2)))
    cells = shapely.get_parts(
        shapely.voronoi_polygons(shapely.multipoints(pts), extend_to=shapely.box(0, 0, 1000, 1000))
    )
    cells = shapely.intersection(cells, shapely.box(0, 0, 1000, 1000))
    grid = np.r_[cells, squares(16, side_m=100.0, x0=2000, y0=0, per_row=4)]
    edge = build_adjacency(grid, "edge")
    touch = build_adjacency(grid, "edge-or-corner")
    for i, j in itertools.combinations(range(len(grid)), 2):
        shared = shapely.length(
            shapely.intersection(shapely.boundary(grid[i]), shapely.boundary(grid[j]))
        )
        assert (j in edge.neighbours(i)) == (shared > 1e-9)
        assert (j in touch.neighbours(i)) == bool(shapely.touches(grid[i], grid[j]))
    # a 4 x 4 grid: an inner square has 4 edge neighbours and 8 with corners
    inner = len(cells) + 5
    assert len(edge.neighbours(inner)) == 4 and len(touch.neighbours(inner)) == 8


def grid_forest(n_side=6, side_m=100.0, age=100.0):
    n = n_side * n_side
    geoms = squares(n, side_m=side_m, per_row=n_side)
    stands = StandArrays(
        np.zeros(n, np.int32),
        np.full(n, 20.0),
        np.full(n, age),
        np.full(n, side_m * side_m / 1e4),
        np.full(n, 60.0),
        np.zeros(n),
        np.arange(n),
    )
    return geoms, stands


def test_unit_restriction_never_cuts_two_neighbours_in_one_period():
    # URM with a green-up of one period (Murray 1999): no two edge-neighbours cut in the same
    # period. On a 6 x 6 grid of equal, equally old stands, the best a period can take is a
    # checkerboard colour: 18 stands; oldest-first with id ties picks exactly that pattern.
    geoms, stands = grid_forest()
    adj = build_adjacency(geoms, "edge")
    rules = SpatialRules(adj, greenup_years=10.0, max_opening_ha=0.0)
    flow = find_even_flow(
        stands,
        CURVES,
        Periods(2030, 10, 2, "midpoint"),
        HarvestRules(spatial=rules),
        ending_stock=0.0,
    )
    sim = flow.simulation
    for p in (1, 2):
        cut = set(sim.event_stand[sim.event_period == p].tolist())
        for i in cut:
            assert not cut & set(adj.neighbours(i).tolist())
    first = set(sim.event_stand[sim.event_period == 1].tolist())
    assert len(first) <= 18
    # without the rule the same level would have been higher (the rule costs volume)
    free = find_even_flow(stands, CURVES, Periods(2030, 10, 2, "midpoint"), ending_stock=0.0)
    assert free.level_m3_per_period > flow.level_m3_per_period


def test_area_restriction_keeps_openings_to_two_stands():
    # ARM with a maximum opening of 2 stands' area: no connected cut cluster within the
    # green-up window exceeds 2 stands.
    geoms, stands = grid_forest()
    adj = build_adjacency(geoms, "edge")
    rules = SpatialRules(adj, greenup_years=20.0, max_opening_ha=2.0)
    flow = find_even_flow(
        stands,
        CURVES,
        Periods(2030, 10, 3, "midpoint"),
        HarvestRules(spatial=rules),
        ending_stock=0.0,
    )
    sim = flow.simulation
    t = {p: 10 * (p - 1) + 5 for p in (1, 2, 3)}
    for p in (1, 2, 3):
        window = np.array([0 <= t[p] - t[q] < 20 for q in sim.event_period])
        area = np.bincount(sim.event_stand[window], sim.event_area_ha[window], adj.n)
        labels = adj.components(area > 0)
        sizes = np.bincount(labels[labels >= 0], area[labels >= 0])
        assert sizes.max() <= 2.0 + 1e-9


def test_a_stand_larger_than_the_opening_is_never_cut():
    geoms, stands = grid_forest(n_side=2, side_m=200.0)  # 4-ha stands, 3-ha openings
    rules = SpatialRules(build_adjacency(geoms), greenup_years=10.0, max_opening_ha=3.0)
    flow = find_even_flow(
        stands, CURVES, Periods(2030, 10, 2), HarvestRules(spatial=rules), ending_stock=0.0
    )
    assert flow.level_m3_per_period == 0.0 and len(flow.simulation.event_stand) == 0


def test_contradictory_greenup_rejected_at_load(tmp_path):
    from yieldscape import load_scenario
    from yieldscape.errors import ScenarioError

    from helpers import scenario_dict, write_scenario

    raw = scenario_dict(tmp_path / "x.gpkg", harvest={"greenup_years": 500.0})
    with pytest.raises(ScenarioError, match=r"\[harvest\] greenup_years = 500 is longer"):
        load_scenario(write_scenario(tmp_path / "s.toml", raw))


def test_greenup_zero_switches_the_spatial_rules_off_with_a_warning(tmp_path):
    # `--set harvest.greenup_years=0` must switch the rules off even where the scenario file
    # sets max_opening_ha; the opening then has no effect, and the scenario says so.
    from yieldscape import load_scenario

    from helpers import scenario_dict, write_scenario

    raw = scenario_dict(tmp_path / "x.gpkg", harvest={"greenup_years": 20, "max_opening_ha": 40})
    path = write_scenario(tmp_path / "s.toml", raw)
    scn = load_scenario(path, overrides=["harvest.greenup_years=0"])
    assert not scn.harvest.spatial
    assert any("max_opening_ha = 40 has no effect" in w for w in scn.warnings)
    assert load_scenario(path).warnings == ()


@pytest.mark.parametrize("rules", ["urm", "arm", "cover"])
def test_a_sliver_stand_does_not_stop_the_pick(rules):
    # A valid stand of almost no area (1e-12 ha: what a reserve overlay may leave of a stand)
    # is a candidate like any other; it must not end a period's pick. The reference is the
    # same forest with the sliver outside the harvestable land base (never a candidate); the
    # sliver lies apart from the others, so cutting it opens no neighbour. The levels may
    # differ by the sliver's volume at most (about 1e-10 m3).
    from yieldscape.schedule.cover import CoverRule, CoverRules

    geoms, grid = grid_forest(n_side=5)
    n, crumb = grid.n, 7  # an old stand, early in the queue
    geoms[crumb] = shapely.box(0, 0, 1e-4, 1e-4)
    area = np.where(np.arange(n) == crumb, 1e-12, 1.0)
    forest = replace(
        grid, age_years=np.linspace(140.0, 60.0, n), area_ha=area, zone_idx=np.zeros(n, np.int64)
    )
    without = replace(forest, harvestable_ha=np.where(np.arange(n) == crumb, 0.0, area))
    periods = Periods(2030, 10, 4, "midpoint")
    adj = build_adjacency(geoms, "edge")

    def level(stands):
        if rules == "cover":
            target = CoverRule(-1, "*", "old", 100.0, 0.1)
            extra = {"cover": CoverRules((target,), np.array([stands.area_ha.sum()]))}
        else:
            opening = 0.0 if rules == "urm" else 2.0
            extra = {"spatial": SpatialRules(adj, greenup_years=10.0, max_opening_ha=opening)}
        return find_even_flow(stands, CURVES, periods, HarvestRules(**extra), ending_stock=0.0)

    got, ref = level(forest).level_m3_per_period, level(without).level_m3_per_period
    assert ref > 0
    assert abs(got - ref) <= 1e-6 * ref
