"""Management units in the rule-based scheduler: a joint run of units that share no rule is the
separate runs of each, exactly; shared rules (the area cap, cover targets) hold for the region
as the units take their cuts in turn."""

import numpy as np
import pytest

from yieldscape.growth import ChapmanRichards
from yieldscape.policies import EvenFlow, PerUnit
from yieldscape.projection import CurveSet, Periods
from yieldscape.schedule import HarvestRules, find_even_flow, simulate
from yieldscape.schedule.units import UnitPolicy, find_unit_flows

from helpers import stands_of
from helpers import unit_forest as forest

CURVES = CurveSet(["pine"], [ChapmanRichards(450.0, 0.035, 3.0)])
PERIODS = Periods(2030, 10, 8, "midpoint")


A, B = forest(40, 1), forest(30, 2, 0.3)
UNIT = np.r_[np.zeros(40, np.int64), np.ones(30, np.int64)]


@pytest.mark.parametrize("levels", [(3000.0, 1500.0), (6000.0, 500.0), (1e9, 1e9)])
def test_units_that_share_no_rule_run_as_their_separate_runs(levels):
    # Each unit's harvest, verdict and ending stock are those of its forest run alone (the
    # joint run's stands and queue are the union, the picks per unit its own).
    joint = simulate(
        stands_of(A, B),
        CURVES,
        PERIODS,
        PerUnit((EvenFlow(levels[0], 0.1), EvenFlow(levels[1]))),
        HarvestRules(units=UNIT),
        ending_stock=np.array([0.9, 1.0]),
        record=True,
    )
    for u, (part, rule, share) in enumerate(
        zip((A, B), (EvenFlow(levels[0], 0.1), EvenFlow(levels[1])), (0.9, 1.0), strict=True)
    ):
        alone = simulate(stands_of(part), CURVES, PERIODS, rule, ending_stock=share, record=True)
        np.testing.assert_allclose(joint.unit_harvest_m3[:, u], alone.harvest_m3, rtol=1e-12)
        np.testing.assert_allclose(joint.unit_target_m3[:, u], alone.target_m3, rtol=1e-12)
        assert joint.unit_ending_stock_m3[u] == pytest.approx(alone.ending_stock_m3, rel=1e-12)
        assert joint.unit_initial_stock_m3[u] == pytest.approx(alone.initial_stock_m3, rel=1e-12)
        assert joint.unit_feasible[u] == alone.feasible
        if not alone.feasible:
            assert joint.unit_fail_reason[u] == alone.fail_reason
    np.testing.assert_allclose(joint.unit_harvest_m3.sum(axis=1), joint.harvest_m3, rtol=1e-12)
    assert joint.feasible == joint.unit_feasible.all()


def test_a_shared_area_cap_holds_for_the_region_and_serves_units_in_turn():
    cap = 120.0
    joint = simulate(
        stands_of(A, B),
        CURVES,
        PERIODS,
        PerUnit((EvenFlow(1e9), EvenFlow(1e9))),
        HarvestRules(units=UNIT, max_area_ha=cap),
        record=True,
    )
    assert (joint.harvest_ha <= cap * (1 + 1e-9)).all()
    assert joint.harvest_ha[0] == pytest.approx(cap)
    # unlimited targets: the first unit takes the whole cap while it has eligible stands
    first = joint.event_period == 1
    assert (UNIT[joint.event_stand[first & (joint.event_treatment == 0)]] == 0).all()


UNITS = (UnitPolicy("a", "even", 0.1, 0.9), UnitPolicy("b", "even", 0.0, 1.0))


def test_unit_levels_without_shared_rules_are_the_levels_found_alone():
    # One trial judges both units; with no shared rule each unit's bracket sees what its own
    # search sees, so it tries the same levels and ends on the same one (to the last few
    # ulps: the unit's ending stock is summed in another order than the whole forest's).
    found = find_unit_flows(stands_of(A, B), CURVES, PERIODS, HarvestRules(units=UNIT), UNITS)
    for u, (part, unit) in enumerate(zip((A, B), UNITS, strict=True)):
        alone = find_even_flow(
            stands_of(part), CURVES, PERIODS, band=unit.band, ending_stock=unit.ending_stock
        )
        assert found.levels_m3[u] == pytest.approx(alone.level_m3_per_period, rel=1e-12)
    assert found.simulation.unit_feasible.all()
    # fewer trials than the two searches one after the other
    assert found.levels_m3.min() > 0


def test_unit_levels_under_a_shared_cap_hold_every_rule_together():
    cap = 60.0
    rules = HarvestRules(units=UNIT, max_area_ha=cap)
    found = find_unit_flows(stands_of(A, B), CURVES, PERIODS, rules, UNITS)
    sim = found.simulation
    assert sim.feasible and sim.unit_feasible.all()
    assert (sim.harvest_ha <= cap * (1 + 1e-9)).all()
    # each unit holds its even flow (unit b: no band) and its ending stock
    assert (sim.unit_harvest_m3[:, 1] >= found.levels_m3[1] * (1 - 1e-9)).all()
    assert (sim.unit_harvest_m3[0, 0] >= found.levels_m3[0] * (1 - 1e-9)).all()
    shares = np.array([u.ending_stock for u in UNITS])
    assert (sim.unit_ending_stock_m3 >= shares * sim.unit_initial_stock_m3 * (1 - 1e-9)).all()
    # the shared cap binds: the units' levels are below their levels alone
    alone = find_unit_flows(stands_of(A, B), CURVES, PERIODS, HarvestRules(units=UNIT), UNITS)
    assert found.levels_m3.sum() < alone.levels_m3.sum()


def test_units_with_a_partition_keep_it_and_their_levels_scale_together():
    # A partition is regional: a trial that breaks it fails every unit. The units' levels
    # without it, scaled by the highest common factor that keeps it, hold every rule; and
    # the factor is below 1 (the partition binds here: the check can fail).
    from yieldscape.schedule.partitions import PartitionRules

    st = stands_of(A, B)
    member = (np.arange(st.n) % 3 == 0)[:, None, None]
    nan = np.array([np.nan])
    parts = PartitionRules(("thirds",), member, np.array([0.6]), nan, nan, nan)
    free = find_unit_flows(st, CURVES, PERIODS, HarvestRules(units=UNIT), UNITS)
    held = find_unit_flows(st, CURVES, PERIODS, HarvestRules(units=UNIT, partitions=parts), UNITS)
    sim = held.simulation
    assert sim.feasible and sim.unit_feasible.all()
    assert (sim.partition_m3[:, 0] >= 0.6 * sim.harvest_m3 * (1 - 1e-9)).all()
    ratio = held.levels_m3 / free.levels_m3
    assert ratio == pytest.approx(np.full(2, ratio[0]), rel=1e-12)  # one common factor
    assert 0 < ratio[0] < 0.999


def test_a_maximum_is_shared_among_units_as_their_targets():
    # Units pick in turn; the room under a partition's maximum is shared as the units' shares
    # of the period's targets, so the first unit cannot take it all: each unit's clearcut
    # volume in the partition is at most max_share x its own target, in every period.
    from yieldscape.schedule.partitions import PartitionRules

    st = stands_of(A, B)
    member = (np.arange(st.n) % 3 == 0)[:, None, None]
    nan = np.array([np.nan])
    parts = PartitionRules(("thirds",), member, nan, np.array([0.2]), nan, nan)
    found = find_unit_flows(st, CURVES, PERIODS, HarvestRules(units=UNIT, partitions=parts), UNITS)
    sim = found.simulation
    assert sim.feasible
    clear = sim.event_treatment == 0
    inside = member[sim.event_stand, 0, 0] & clear
    for p in range(1, PERIODS.count + 1):
        at = inside & (sim.event_period == p)
        by_unit = np.bincount(UNIT[sim.event_stand[at]], sim.event_volume_m3[at], 2)
        assert (by_unit <= 0.2 * sim.unit_target_m3[p - 1] * (1 + 1e-9) + 1e-6).all()
    assert (sim.partition_m3[:, 0] <= 0.2 * sim.harvest_m3 * (1 + 1e-9)).all()


@pytest.mark.parametrize("cap", [None, 300.0])
def test_the_picks_of_units_and_partitions_do_not_depend_on_the_queue_ranked_first(
    monkeypatch, cap
):
    # Each pick of a unit or a partition ranks only the first of its queue (twice what it
    # went through the period before) and more where that does not decide it; targets that
    # jump from period to period make the picks rank more. The reference ranks every
    # eligible stand every time (a plain sort of the whole queue): the same cuts, exactly.
    import importlib

    from yieldscape.policies import Targets
    from yieldscape.schedule.partitions import PartitionRules

    simulate_module = importlib.import_module("yieldscape.schedule.simulate")
    st = stands_of(A, B)
    member = np.stack([np.arange(st.n) % 3 == 0, np.arange(st.n) % 2 == 0], axis=1)[:, None]
    nan = np.array([np.nan, np.nan])
    limits = np.array([0.3, np.nan]), np.array([np.nan, 0.6]), nan, nan
    rules = HarvestRules(
        units=UNIT,
        partitions=PartitionRules(("thirds", "halves"), member, *limits),
        max_area_ha=cap,
    )
    rule = PerUnit(
        (
            Targets((5e3, 4e4, 1e4, 6e4, 5e3, 5e4, 1e3, 8e4)),
            Targets((3e3, 3e4, 3e3, 3e4, 3e3, 3e4, 3e3, 3e4)),
        )
    )

    def run(queue_min: int):
        monkeypatch.setattr(simulate_module, "_QUEUE_MIN", queue_min)
        return simulate(st, CURVES, PERIODS, rule, rules, record=True)

    small, whole = run(1), run(10**9)
    assert (whole.partition_m3.sum(axis=0) > 0).all() and len(whole.event_stand) > 50
    for got, want in [
        (small.event_stand, whole.event_stand),
        (small.event_area_ha, whole.event_area_ha),
        (small.unit_harvest_m3, whole.unit_harvest_m3),
        (small.partition_m3, whole.partition_m3),
    ]:
        np.testing.assert_array_equal(got, want)


def test_the_common_factor_ends_at_the_first_factor_that_breaks_the_partition():
    # Reference: an exhaustive scan of the common factor (200 steps of the units' levels
    # without the partition), each run by the simulation itself; the factor found holds and
    # is no lower than the scan's last factor that holds before its first that fails (less
    # the scan's step and the search tolerance on the units' total).
    from yieldscape.schedule.flow import search_tolerance_m3
    from yieldscape.schedule.partitions import PartitionRules

    st = stands_of(forest(200, 3), forest(150, 4, 0.4))
    unit = np.r_[np.zeros(200, np.int64), np.ones(150, np.int64)]
    old = (st.age_years > 100)[:, None, None]
    nan = np.array([np.nan])
    parts = PartitionRules(("old",), old, nan, np.array([0.5]), nan, nan)
    free = find_unit_flows(st, CURVES, PERIODS, HarvestRules(units=unit), UNITS)
    held = find_unit_flows(st, CURVES, PERIODS, HarvestRules(units=unit, partitions=parts), UNITS)
    assert held.simulation.unit_feasible.all()
    factor = held.levels_m3.sum() / free.levels_m3.sum()
    assert factor < 0.999  # the partition binds

    def holds(x):
        rule = PerUnit(tuple(u.rule(x * f) for u, f in zip(UNITS, free.levels_m3, strict=True)))
        shares = np.array([u.ending_stock for u in UNITS])
        rules = HarvestRules(units=unit, partitions=parts)
        return simulate(st, CURVES, PERIODS, rule, rules, ending_stock=shares).feasible

    grid = np.linspace(0.0, 1.0, 201)
    ok = [holds(x) for x in grid]
    first_fail = grid[ok.index(False)]
    tol = search_tolerance_m3(held.levels_m3.sum(), PERIODS.period_years)
    assert factor >= first_fail - grid[1] - tol / free.levels_m3.sum()


def test_a_recorded_trial_that_stops_early_stops_where_an_unrecorded_one_does():
    # A search records a trial that closes its bracket if it holds (stop_early): where it
    # fails it stops at the same period as the unrecorded trial (the reference: record=False)
    # instead of running on to the end; where it holds it is the recorded run, exactly.
    st = stands_of(A, B)
    rules = HarvestRules(units=UNIT, max_area_ha=60.0)
    for levels, holds in [((30000.0, 20000.0), False), ((2000.0, 1000.0), True)]:
        rule = PerUnit((EvenFlow(levels[0], 0.1), EvenFlow(levels[1])))
        plain = simulate(st, CURVES, PERIODS, rule, rules)
        kept = simulate(st, CURVES, PERIODS, rule, rules, record=True)
        early = simulate(st, CURVES, PERIODS, rule, rules, record=True, stop_early=True)
        assert plain.feasible == early.feasible == holds
        assert early.fail_period == plain.fail_period
        if holds:
            np.testing.assert_array_equal(early.event_stand, kept.event_stand)
            np.testing.assert_array_equal(early.growing_stock_end_m3, kept.growing_stock_end_m3)
        else:
            last = plain.fail_period
            assert (early.harvest_m3[last:] == 0).all() and (kept.harvest_m3[last:] > 0).any()
            assert early.event_period.max() == last


def test_an_amount_no_stand_can_yield_fails_the_units_with_the_whole_run():
    # A partition's min_m3 that no stand can yield: no factor holds (the factor comes down
    # from 1 on the broken partition, then tries 0 once, which fails too). The error carries
    # the whole recorded run at the levels found, every period of it (the search's own last
    # trial may be unrecorded or stopped at its first miss).
    from yieldscape.schedule.partitions import PartitionRules
    from yieldscape.schedule.units import NoUnitFlows

    st = stands_of(A, B)
    nan = np.array([np.nan])
    nobody = PartitionRules(("nobody",), np.zeros((st.n, 1, 1), bool), nan, nan, [1e9], nan)
    with pytest.raises(NoUnitFlows, match="fail at the levels found") as err:
        find_unit_flows(st, CURVES, PERIODS, HarvestRules(units=UNIT, partitions=nobody), UNITS)
    sim = err.value.simulation
    assert "partition 'nobody'" in sim.fail_reason and len(sim.harvest_m3) == PERIODS.count
    assert sim.unit_target_m3.shape == (PERIODS.count, 2)  # recorded to the end
