"""An LP's plan as the cutting order: each period's queue ranks the stands the plan cuts by
then first, then those it cuts in the next period, the one after, and so on, those it never
cuts last, the priority rule ordering each rank (an LP-guided order in the spirit of Hoganson &
Rose 1984, For. Sci. 30:220-238). The partial ranking of the queue is checked against a full
sort (numpy's lexsort) as the reference."""

from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from yieldscape.growth import ChapmanRichards
from yieldscape.policies import Targets
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import HarvestRules, simulate
from yieldscape.schedule.lp_plan import ending_from
from yieldscape.schedule.simulate import EndingCost, Plan, Start, _first_by_key

CURVES = CurveSet(["pine"], [ChapmanRichards(450.0, 0.035, 3.0)])


@settings(max_examples=200, deadline=None)
@given(
    data=st.lists(st.tuples(st.integers(0, 6), st.integers(0, 4)), min_size=2, max_size=60),
    frac=st.floats(0.0, 1.0),
    ranked=st.booleans(),
)
def test_the_first_of_the_queue_are_those_of_a_full_sort(data, frac, ranked):
    key = np.array([k for k, _ in data], dtype=float)  # few values: many ties
    rank = np.array([r for _, r in data], dtype=np.int64) if ranked else None
    size = 1 + int(frac * (len(key) - 2))  # 1 .. n - 1: fewer than all
    got = _first_by_key(key, rank, size)
    # reference: sort by (rank ascending, key descending); the first `size`, and every element
    # tied with the size-th on (rank, key)
    r = rank if rank is not None else np.zeros(len(key), np.int64)
    order = np.lexsort((-key, r))
    last = order[size - 1]
    want = (r < r[last]) | ((r == r[last]) & (key >= key[last]))
    np.testing.assert_array_equal(got, want)
    assert got.sum() >= size


def test_the_queue_follows_the_plans_ranks():
    # Six stands of 1 ha, oldest first by id otherwise; period 1's target is the volume of
    # stands 1, 4 and 5 at the period's midpoint. The plan cuts stand 4 in period 1, stand 5
    # in period 2 and stand 1 in period 3: period 1 cuts 4 (planned now), 5 (next period)
    # and 1 (the one after); without the plan the oldest, 0 and 1 whole and 2 in part.
    n = 6
    stands = StandArrays(
        np.zeros(n, np.int32),
        np.full(n, 20.0),
        np.array([120.0, 110.0, 100.0, 95.0, 90.0, 85.0]),
        np.ones(n),
        np.full(n, 60.0),
        np.zeros(n),
        np.arange(n),
    )
    periods = Periods(2030, 10, 3, "midpoint")
    v = CURVES.volume_m3_ha(np.zeros(n, np.int32), stands.age_years + 5, stands.site_index)
    target = Targets((float(v[[1, 4, 5]].sum()), 0.0, 0.0))
    plan = Plan(np.array([4, 3, 4, 4, 1, 2]))  # 4 = periods + 1: never
    planned = simulate(stands, CURVES, periods, target, HarvestRules(plan=plan), record=True)
    first = planned.event_stand[planned.event_period == 1]
    assert sorted(first.tolist()) == [1, 4, 5]
    plain = simulate(stands, CURVES, periods, target, HarvestRules(), record=True)
    assert sorted(plain.event_stand[plain.event_period == 1].tolist()) == [0, 1, 2]


# ----------------------------------------------------------------- the ending-stock order
# two curves that grow at different rates: oldest first is not least growth given up first
TWO = CurveSet(
    ["pine", "aspen"], [ChapmanRichards(450.0, 0.035, 3.0), ChapmanRichards(300.0, 0.06, 2.0)]
)


def _random_stands(n, seed, delay=0.0, codes=1):
    rng = np.random.default_rng(seed)
    return StandArrays(
        rng.integers(0, codes, n).astype(np.int32),
        rng.uniform(14.0, 26.0, n),
        rng.uniform(60.0, 160.0, n),
        rng.uniform(1.0, 20.0, n),
        np.full(n, 60.0),
        np.full(n, delay),
        np.arange(n),
    )


def test_ending_cost_is_the_stock_given_up_per_m3_by_the_curve_itself():
    # Chapman-Richards written out, V(t) = a (1 - exp(-k t))^c (this curve has no site
    # terms): a stand 100 years old at its harvest moment with 15 years left gives up V(115)
    # and regrows for 15 - 2 years (its delay): (V(115) - V(13)) / V(100) per m3 cut.
    stands = _random_stands(1, 0, delay=2.0)
    stands = replace(stands, age_years=np.array([100.0]))
    parts = Start.of(stands, CURVES).parts
    age_h = np.array([100.0])
    vol = CURVES.volume_m3_ha(np.zeros(1, np.int32), age_h, stands.site_index)
    got = EndingCost(stands, CURVES, 15.0)(parts, np.array([0]), vol, age_h, None)[0]

    def v(t):
        return 450.0 * (1.0 - np.exp(-0.035 * t)) ** 3.0

    assert got == pytest.approx((v(115.0) - v(13.0)) / v(100.0), rel=1e-12)
    # a stand that yields nothing now is never chosen for it
    none = EndingCost(stands, CURVES, 15.0)(parts, np.array([0]), np.zeros(1), age_h, None)
    assert np.isinf(none[0])


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000), share=st.floats(0.05, 0.9))
def test_the_ending_order_leaves_the_most_stock_for_the_last_periods_harvest(seed, share):
    # One period left: a cut yields its volume now and gives up its volume at the end less
    # its regrowth's. The ending-stock order (one rank: every stand planned now) must leave
    # the ending stock of the best fractional cut of the same volume, which scipy's linprog
    # (HiGHS) finds independently: min sum x_i (V_end,i - R_i) s.t. sum x_i v_i = T,
    # 0 <= x_i <= A_i (a fractional knapsack; Dantzig 1957).
    from scipy.optimize import linprog

    n = 25
    stands = _random_stands(n, seed, codes=2)
    periods = Periods(2030, 10, 1, "midpoint")
    sp = stands.species_idx
    now = TWO.volume_m3_ha(sp, stands.age_years + 5.0, stands.site_index)
    end = TWO.volume_m3_ha(sp, stands.age_years + 10.0, stands.site_index)
    regrown = TWO.volume_m3_ha(sp, np.full(n, 5.0), stands.site_index)
    target = share * float(now @ stands.area_ha)
    lp = linprog(
        end - regrown,
        A_eq=now[None, :],
        b_eq=[target],
        bounds=list(zip(np.zeros(n), stands.area_ha, strict=True)),
        method="highs",
    )
    assert lp.status == 0
    best_end = float(end @ stands.area_ha) - lp.fun
    plan = Plan(np.ones(n, np.int64), ending_from=0)
    sim = simulate(stands, TWO, periods, Targets((target,)), HarvestRules(plan=plan))
    assert sim.harvest_m3[0] == pytest.approx(target, rel=1e-9)
    assert sim.ending_stock_m3 == pytest.approx(best_end, rel=1e-9)
    # and the priority order (oldest first) leaves no more
    plain = simulate(stands, TWO, periods, Targets((target,)), HarvestRules())
    assert plain.ending_stock_m3 <= best_end * (1 + 1e-9)


def test_the_ending_order_starts_where_regrowth_can_no_longer_be_cut():
    # 20 periods of 10 years, the last harvest moment at 195 years: a cut in period index p
    # regrows (19 - p) x 10 years less its delay by then. Minimum age 50 and no delay: cut
    # again from p = 14 (50 years), not from p = 15 on.
    stands = _random_stands(5, 1)
    periods = Periods(2030, 10, 20, "midpoint")
    young = replace(stands, min_harvest_age=np.array([50.0, 60.0, 70.0, 80.0, 90.0]))
    assert ending_from(young, periods) == 15
    # a delay of 2 years: 52 years needed, 50 not enough at p = 14, so from 14
    late = replace(young, regen_delay_years=np.full(5, 2.0))
    assert ending_from(late, periods) == 14
    # a stand that is never cut does not count; none cut at all: no such period
    never = replace(young, min_harvest_age=np.full(5, np.inf))
    assert ending_from(never, periods) == 20
