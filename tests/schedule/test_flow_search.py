"""The even-flow search stops at its stated tolerance: the level it reports holds, and the
level one tolerance above it does not.

Feasibility is judged by the simulation itself, run again here at both levels (the
definition of the search's answer, docs/methods.md "Even-flow search"); the tolerance is the
module's stated one (``flow.REL_TOL`` of the level or ``flow.ABS_TOL_M3_PER_YEAR``, whichever
is looser).
"""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from yieldscape.growth import ChapmanRichards, SiteScaling, TableYield
from yieldscape.policies import EvenFlow
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import HarvestRules, find_even_flow, simulate
from yieldscape.schedule.flow import ABS_TOL_M3_PER_YEAR, REL_TOL, search_tolerance_m3

from helpers import gap_forest

CURVES = CurveSet(
    ["a", "b"],
    [
        ChapmanRichards(500.0, 0.03, 3.0, SiteScaling(site_index_ref_m=20.0)),
        TableYield.single((10, 30, 60, 90), (5, 80, 260, 300)),
    ],
)


@st.composite
def forests(draw):
    n = draw(st.integers(1, 60))
    ages = draw(st.lists(st.integers(0, 160), min_size=n, max_size=n))
    areas = draw(st.lists(st.floats(0.5, 40), min_size=n, max_size=n))
    sp = draw(st.lists(st.integers(0, 1), min_size=n, max_size=n))
    min_age = draw(st.sampled_from([30.0, 50.0, 70.0]))
    stands = StandArrays(
        species_idx=np.array(sp, dtype=np.int32),
        site_index=np.full(n, 18.0),
        age_years=np.array(ages, dtype=float),
        area_ha=np.array(areas),
        min_harvest_age=np.where(np.array(sp) == 0, min_age, min_age - 10),
        regen_delay_years=np.full(n, draw(st.sampled_from([0.0, 2.0, 7.0]))),
        id_rank=np.arange(n),
    )
    periods = Periods(2030, draw(st.sampled_from([5, 10])), draw(st.integers(1, 12)))
    rules = HarvestRules(
        draw(st.sampled_from(["oldest", "relative_oldest", "highest_volume"])),
        draw(st.none() | st.floats(1.0, 200.0)),
    )
    band = draw(st.sampled_from([0.0, 0.1, 0.25]))
    ending = draw(st.sampled_from([0.0, 0.5, 1.0]))
    stable = draw(st.sampled_from([0, 2])) if periods.count > 2 else 0
    return stands, periods, rules, band, ending, stable


def holds(stands, curves, periods, rules, level, band, ending, stable):
    sim = simulate(
        stands,
        curves,
        periods,
        EvenFlow(level, band),
        rules,
        ending_stock=ending,
        stable_periods=stable,
    )
    return sim.feasible


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(forests())
def test_level_holds_and_one_tolerance_above_does_not(case):
    stands, periods, rules, band, ending, stable = case
    flow = find_even_flow(stands, CURVES, periods, rules, band, ending, stable)
    level = flow.level_m3_per_period
    assert flow.simulation.feasible
    assert holds(stands, CURVES, periods, rules, level, band, ending, stable)
    above = level + search_tolerance_m3(level, periods.period_years)
    assert not holds(stands, CURVES, periods, rules, above, band, ending, stable)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(forests())
def test_the_run_kept_is_a_recorded_run_at_the_level_whichever_trials_were_recorded(case):
    # which trials the search records changes no level it tries, and the run it keeps (a
    # trial recorded on the way, or a run after it) is the recorded run at that level
    stands, periods, rules, band, ending, stable = case
    flow = find_even_flow(stands, CURVES, periods, rules, band, ending, stable)
    bare = find_even_flow(stands, CURVES, periods, rules, band, ending, stable, record=False)
    assert flow.level_m3_per_period == bare.level_m3_per_period
    again = simulate(
        stands,
        CURVES,
        periods,
        EvenFlow(flow.level_m3_per_period, band),
        rules,
        ending_stock=ending,
        stable_periods=stable,
        record=True,
    )
    np.testing.assert_array_equal(flow.simulation.harvest_m3, again.harvest_m3)
    np.testing.assert_array_equal(flow.simulation.event_stand, again.event_stand)
    assert flow.simulation.ending_stock_m3 == again.ending_stock_m3


def test_tolerance_is_the_looser_of_the_two():
    # 0.01% of 10 Mm3 is 1,000 m3; 1 m3/year over a 10-year period is 10 m3
    assert search_tolerance_m3(1e7, 10) == pytest.approx(REL_TOL * 1e7) == pytest.approx(1e3)
    assert search_tolerance_m3(1e4, 10) == ABS_TOL_M3_PER_YEAR * 10


@pytest.mark.parametrize("band", [0.0, 0.1])
def test_a_binding_ending_stock_is_found_in_few_trials(band):
    # An age-class gap forest whose level the ending stock limits: the search interpolates the
    # ending-stock shortfall, so it needs far fewer trials than bisection from [0, U] to the
    # same tolerance (about log2(1 / REL_TOL) = 14 beyond its three opening trials).
    curves = CurveSet(["pine"], [ChapmanRichards(450.0, 0.035, 3.0)])
    periods = Periods(2030, 10, 12, "midpoint")
    flow = find_even_flow(gap_forest(300, 4), curves, periods, band=band, ending_stock=1.0)
    assert "ending growing stock" in flow.binding
    assert flow.steps <= 12


def test_a_level_the_first_free_period_caps_names_that_period():
    # With the first period held fixed, the most the level can be is what the next period
    # yields under the area cap: the binding reason names period 2, not period 1.
    n = 10
    stands = StandArrays(
        np.zeros(n, np.int32),
        np.full(n, 20.0),
        np.full(n, 100.0),
        np.full(n, 10.0),
        np.full(n, 60.0),
        np.zeros(n),
        np.arange(n),
    )
    periods = Periods(2030, 10, 4, "midpoint")
    rules = HarvestRules(max_area_ha=20.0)
    flow = find_even_flow(stands, CURVES, periods, rules, 0.0, 0.0, fixed=(1000.0,))
    v = float(CURVES.volume_m3_ha(np.zeros(1, np.int32), np.array([115.0]), np.array([20.0]))[0])
    assert flow.level_m3_per_period == pytest.approx(20.0 * v)
    assert flow.binding.startswith("period 2: the area cap (harvest.max_area_ha_per_period = 20")
