"""The harvest of a period is taken at its start, midpoint or end (scenario.harvest_timing).

A single stand aged 55 with minimum harvest age 60 and 10-year periods: at the start of period
1 it is 55 (not eligible; first cut in period 2 at 65); at the midpoint it is 60 (cut in period
1 at 60); at the end it is 65 (cut in period 1 at 65). The volume is the curve's at that age.
Hand-checkable from the definitions in docs/methods.md.
"""

import numpy as np
import pytest

from yieldscape.growth import ChapmanRichards
from yieldscape.policies import EvenFlow, FixedTargets
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import simulate

CURVE = ChapmanRichards(a=400.0, k=0.03, c=3.0)


def one_stand(age=55.0, delay=0.0):
    return StandArrays(
        np.zeros(1, dtype=np.int32),
        np.full(1, 18.0),
        np.full(1, age),
        np.full(1, 2.0),
        np.full(1, 60.0),
        np.full(1, delay),
        np.zeros(1, int),
    )


@pytest.mark.parametrize(
    ("timing", "period", "age"), [("start", 2, 65.0), ("midpoint", 1, 60.0), ("end", 1, 65.0)]
)
def test_first_cut_follows_timing(timing, period, age):
    sim = simulate(
        one_stand(),
        CurveSet(["pine"], [CURVE]),
        Periods(2030, 10, 3, timing),
        FixedTargets((1e9,) * 3),
        record=True,
    )
    assert sim.event_period[0] == period
    assert sim.event_age_years[0] == pytest.approx(age)
    assert sim.event_volume_m3[0] == pytest.approx(2.0 * float(CURVE.volume_m3_ha(age, 18.0)))


def test_regeneration_delay_sets_next_start_age():
    # Cut at the midpoint (offset 5) with a 3-year delay: 10 - 5 - 3 = 2 years old at the
    # start of the next period, so its volume there is V(2).
    curves = CurveSet(["pine"], [CURVE])
    sim = simulate(
        one_stand(delay=3.0),
        curves,
        Periods(2030, 10, 1, "midpoint"),
        EvenFlow(1e9, 0.5),
        record=True,
    )
    assert sim.growing_stock_end_m3[0] == pytest.approx(2.0 * float(CURVE.volume_m3_ha(2.0, 18)))
    np.testing.assert_allclose(sim.harvest_ha, [2.0])
