"""Invariants of the scheduler on small random inventories (hypothesis).

The growing stock is recomputed here independently, stand by stand in plain Python from the
harvest events and the curves, and must match the simulation's bookkeeping.
"""

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from yieldscape.growth import ChapmanRichards, SiteScaling, TableYield
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import HarvestRules, find_even_flow

CURVES = CurveSet(
    ["a", "b"],
    [
        ChapmanRichards(500.0, 0.03, 3.0, SiteScaling(site_index_ref_m=20.0)),
        TableYield.single((10, 30, 60, 90), (5, 80, 260, 300)),
    ],
)


@st.composite
def forests(draw):
    n = draw(st.integers(1, 25))
    ages = draw(st.lists(st.integers(0, 150), min_size=n, max_size=n))
    areas = draw(st.lists(st.floats(0.5, 40), min_size=n, max_size=n))
    sp = draw(st.lists(st.integers(0, 1), min_size=n, max_size=n))
    min_age = draw(st.sampled_from([30.0, 50.0, 70.0]))
    delay = draw(st.sampled_from([0.0, 2.0, 7.0]))
    stands = StandArrays(
        species_idx=np.array(sp, dtype=np.int32),
        site_index=np.full(n, 18.0),
        age_years=np.array(ages, dtype=float),
        area_ha=np.array(areas),
        min_harvest_age=np.where(np.array(sp) == 0, min_age, min_age - 10),
        regen_delay_years=np.full(n, delay),
        id_rank=np.arange(n),
    )
    periods = Periods(
        2030,
        draw(st.sampled_from([5, 10])),
        draw(st.integers(1, 12)),
        draw(st.sampled_from(["start", "midpoint", "end"])),
    )
    cap = draw(st.none() | st.floats(1.0, 200.0))
    band = draw(st.sampled_from([0.0, 0.1, 0.25]))
    ending = draw(st.sampled_from([0.0, 0.5, 1.0]))
    return stands, periods, cap, band, ending


def reconstruct_stock(stands, periods, sim):
    """Growing stock at each period end, from the initial ages and the harvest events only."""
    L, off = periods.period_years, periods.offset_years
    out = np.zeros(periods.count)
    for i in range(stands.n):
        parts = [(stands.area_ha[i], stands.age_years[i])]  # (area, age at period start)
        for p in range(1, periods.count + 1):
            # area cut this period at each age at harvest (several parts may share an age)
            todo: dict[float, float] = {}
            for s, q, age, a in zip(
                sim.event_stand,
                sim.event_period,
                sim.event_age_years,
                sim.event_area_ha,
                strict=True,
            ):
                if s == i and q == p:
                    todo[round(float(age), 6)] = todo.get(round(float(age), 6), 0.0) + a
            nxt = []
            for area, age in parts:
                key = round(float(age + off), 6)
                taken = min(todo.get(key, 0.0), area)
                if taken:
                    todo[key] -= taken
                if area - taken > 1e-9:
                    nxt.append((area - taken, age + L))
                if taken > 0:
                    nxt.append((taken, L - off - stands.regen_delay_years[i]))
            assert all(v < 1e-9 for v in todo.values())  # every event matched a part
            parts = nxt
            # total area is conserved: the parts of a stand always add up to the stand
            assert abs(sum(a for a, _ in parts) - stands.area_ha[i]) < 1e-9 * stands.area_ha[i]
            for area, age in parts:
                # the exact curve objects, not the projection's tabulated copy
                v = CURVES.curves[stands.species_idx[i]].volume_m3_ha(
                    np.array([age]), np.array([stands.site_index[i]])
                )[0]
                out[p - 1] += area * v
    return out


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(forests())
def test_schedule_invariants(case):
    stands, periods, cap, band, ending = case
    rules = HarvestRules(max_area_ha=cap)
    flow = find_even_flow(stands, CURVES, periods, rules, band=band, ending_stock=ending)
    sim = flow.simulation
    assert sim.feasible
    # no stand is cut below its minimum harvest age
    assert np.all(sim.event_age_years >= stands.min_harvest_age[sim.event_stand] - 1e-9)
    # harvested area per period never exceeds the cap
    if cap is not None:
        assert np.all(sim.harvest_ha <= cap * (1 + 1e-9))
    # per-period totals equal the sums over events
    per = (
        np.bincount(sim.event_period - 1, sim.event_volume_m3, periods.count)
        if len(sim.event_period)
        else np.zeros(periods.count)
    )
    np.testing.assert_allclose(sim.harvest_m3, per, rtol=1e-9, atol=1e-9)
    # area is conserved: a stand never gives more than its area in one period
    for p in range(1, periods.count + 1):
        got = np.bincount(
            sim.event_stand[sim.event_period == p],
            sim.event_area_ha[sim.event_period == p],
            stands.n,
        )
        assert np.all(got <= stands.area_ha * (1 + 1e-9))
    # growing stock end = start + growth - harvest, with the stock rebuilt independently
    rebuilt = reconstruct_stock(stands, periods, sim)
    np.testing.assert_allclose(sim.growing_stock_end_m3, rebuilt, rtol=1e-7, atol=1e-6)
    # the band and the ending stock hold
    h = sim.harvest_m3
    if flow.level_m3_per_period > 0:
        assert np.all(np.abs(np.diff(h)) <= (band + 1e-9) * h[:-1])
    assert sim.ending_stock_m3 >= ending * sim.initial_stock_m3 * (1 - 1e-7) or (
        flow.level_m3_per_period == 0
    )
