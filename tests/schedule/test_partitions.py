"""Harvest partitions in the rule-based scheduler: every period keeps every limit, the level
found stays under the LP bound of the same problem (the LP with the partition's rows, a
relaxation of the rule-based schedule; Model II, Johnson & Scheurman 1977), and a partition
that cannot be kept is named."""

import numpy as np
import pytest

from yieldscape.growth import ChapmanRichards
from yieldscape.projection import CurveSet, Periods
from yieldscape.schedule import HarvestRules, find_even_flow
from yieldscape.schedule.lp import build_lp, make_strata, solve_highs
from yieldscape.schedule.lp_units import Partition, make_cells
from yieldscape.schedule.partitions import PartitionRules

from helpers import stands_of, unit_forest

CURVES = CurveSet(["pine"], [ChapmanRichards(450.0, 0.035, 3.0)])
PERIODS = Periods(2030, 10, 8, "midpoint")
NAN = np.nan


ST = stands_of(unit_forest(60, 5))
MEMBER = (np.arange(ST.n) % 3 == 0)[:, None, None]  # every third stand, whatever its code


def rules_of(min_share=NAN, max_share=NAN, min_m3=NAN, max_m3=NAN, member=MEMBER):
    limits = [np.array([v]) for v in (min_share, max_share, min_m3, max_m3)]
    return HarvestRules(partitions=PartitionRules(("thirds",), member, *limits))


def lp_bound(**limits):
    cells = make_cells(np.zeros(ST.n, np.int64), MEMBER)
    strata = make_strata(ST, np.zeros(ST.n, int), 1e-6, 1e-6, cells=cells)
    parts = [Partition("thirds", **limits)] if limits else []
    model = build_lp(ST, CURVES, PERIODS, strata, "max-level", "even", 0.0, 1.0, partitions=parts)
    return solve_highs(model).objective


@pytest.mark.parametrize(
    "limits", [{"min_share": 0.5}, {"max_share": 0.2}, {"min_m3": 8000.0}, {"max_m3": 5000.0}]
)
def test_every_period_keeps_the_limit_and_the_bound_holds(limits):
    rules = rules_of(**limits)
    found = find_even_flow(ST, CURVES, PERIODS, rules, band=0.0, ending_stock=1.0)
    sim = found.simulation
    assert sim.feasible and found.level_m3_per_period > 0
    share = sim.partition_m3[:, 0] / sim.harvest_m3
    if "min_share" in limits:
        assert (share >= limits["min_share"] - 1e-9).all()
    if "max_share" in limits:
        assert (share <= limits["max_share"] + 1e-9).all()
    if "min_m3" in limits:
        assert (sim.partition_m3[:, 0] >= limits["min_m3"] * (1 - 1e-9)).all()
    if "max_m3" in limits:
        assert (sim.partition_m3[:, 0] <= limits["max_m3"] * (1 + 1e-9)).all()
    # the LP with the partition's rows bounds the schedule, and is no higher than without them
    bound = lp_bound(**limits)
    assert found.level_m3_per_period <= bound * (1 + 1e-9)
    assert bound <= lp_bound() * (1 + 1e-9)


def test_the_partition_binds_where_it_must():
    # without the limit the schedule takes less than half its volume from the thirds; with a
    # 50% minimum the level falls (the check can fail: the limit must bite here)
    free = find_even_flow(ST, CURVES, PERIODS, HarvestRules(), band=0.0, ending_stock=1.0)
    held = find_even_flow(ST, CURVES, PERIODS, rules_of(min_share=0.5), band=0.0, ending_stock=1.0)
    assert held.level_m3_per_period < free.level_m3_per_period * 0.999


def test_a_partition_that_cannot_be_kept_is_named():
    nobody = np.zeros_like(MEMBER)
    rules = rules_of(min_share=0.1, member=nobody)
    found = find_even_flow(ST, CURVES, PERIODS, rules, band=0.0, ending_stock=0.0)
    assert found.level_m3_per_period == 0.0
    assert "partition 'thirds' yields 0 m3" in found.binding
    assert "below its minimum" in found.binding
    # an amount no stand of the partition can yield in period 1: named the same way
    many = rules_of(min_m3=1e9)
    found = find_even_flow(ST, CURVES, PERIODS, many, band=0.0, ending_stock=0.0)
    assert found.level_m3_per_period == 0.0
    assert "partition 'thirds'" in found.binding and "period 1" in found.binding
