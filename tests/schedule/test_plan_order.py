"""An LP's plan as the cutting order: each period's queue ranks the stands the plan cuts by
then first, then those it cuts in the next period, the one after, and so on, those it never
cuts last, the priority rule ordering each rank (an LP-guided order in the spirit of Hoganson &
Rose 1984, For. Sci. 30:220-238). The partial ranking of the queue is checked against a full
sort (numpy's lexsort) as the reference."""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from yieldscape.growth import ChapmanRichards
from yieldscape.policies import Targets
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import HarvestRules, simulate
from yieldscape.schedule.simulate import Plan, _first_by_key

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
