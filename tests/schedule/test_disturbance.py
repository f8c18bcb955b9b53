"""Natural disturbance: expected area fractions and Monte Carlo replicates."""

import numpy as np
import pytest

from yieldscape.growth import ChapmanRichards
from yieldscape.policies import EvenFlow
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import HarvestRules, simulate

CURVES = CurveSet(["pine"], [ChapmanRichards(450.0, 0.035, 3.0)])


def young_forest(n=400, age=0.0):
    return StandArrays(
        np.zeros(n, np.int32),
        np.full(n, 20.0),
        np.full(n, age),
        np.full(n, 2.5),
        np.full(n, np.inf),
        np.zeros(n),
        np.arange(n),
    )


@pytest.mark.parametrize(("p", "R"), [(0.005, 60), (0.01, 100)])
def test_share_older_than_r_is_one_minus_p_to_the_r(p, R):
    # Stand-replacing disturbance at rate p a year, independent of age, no harvest: the share
    # of area older than R is (1 - p)^R (common practice; negative exponential age structure).
    L, periods = 10, 15
    st = young_forest()
    periods_ = Periods(2030, L, periods, "start")
    sim = simulate(st, CURVES, periods_, EvenFlow(0.0), HarvestRules(disturbance=p), record=True)
    old = sim.final_area_ha[sim.final_age_years >= R - 1e-9].sum()
    assert old / sim.final_area_ha.sum() == pytest.approx((1 - p) ** R, rel=1e-9)
    survive = (1 - p) ** (L * periods)
    total = st.area_ha.sum()
    assert sim.final_area_ha.sum() == pytest.approx(total)  # area is conserved
    # area never disturbed keeps its full age
    never = sim.final_area_ha[sim.final_age_years >= L * periods - 1e-9].sum()
    assert never / total == pytest.approx(survive, rel=1e-9)


def test_monte_carlo_agrees_with_expected_values_and_is_seeded():
    st = young_forest(n=2000, age=80.0)
    periods = Periods(2030, 10, 8)
    burning = HarvestRules(disturbance=0.01)
    det = simulate(st, CURVES, periods, EvenFlow(0.0), burning, record=True)
    runs = [
        simulate(
            st,
            CURVES,
            periods,
            EvenFlow(0.0),
            burning,
            record=True,
            rng=np.random.default_rng(seed),
        )
        for seed in (1, 2, 3)
    ]
    mean = np.mean([r.disturbed_ha for r in runs], axis=0)
    # whole stands of 2.5 ha burn with the period's probability: within sampling error
    np.testing.assert_allclose(mean, det.disturbed_ha, rtol=0.12)
    again = simulate(
        st, CURVES, periods, EvenFlow(0.0), burning, record=True, rng=np.random.default_rng(1)
    )
    np.testing.assert_array_equal(again.disturbed_ha, runs[0].disturbed_ha)
