"""Flow policies: each one's promise checked on the simulated flow."""

import numpy as np
import pytest

from yieldscape.config import FlowConfig
from yieldscape.growth import ChapmanRichards
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import NO_RULES, schedule

from helpers import gap_forest

CURVES = CurveSet(["pine"], [ChapmanRichards(450.0, 0.035, 3.0)])
PERIODS = Periods(2030, 10, 12, "midpoint")


def forest(seed=4, n=120):
    return gap_forest(n, seed)


def run(**flow):
    cfg = FlowConfig(**flow)
    return schedule(forest(), CURVES, PERIODS, cfg, cfg.policy, NO_RULES)


def test_nondeclining_never_declines_and_dominates_even_flow():
    even = run(policy="even", ending_stock=0.7)
    nd = run(policy="nondeclining", ending_stock=0.7)
    h = nd.simulation.harvest_m3
    assert nd.simulation.feasible
    assert np.all(np.diff(h) >= -1e-6 * h[:-1])
    # period 1 is the even-flow level; nothing after it is lower
    assert h[0] == pytest.approx(even.level_m3_per_period, rel=1e-6)
    assert h.sum() >= even.simulation.harvest_m3.sum() * (1 - 1e-9)


def test_stepdown_shape_and_long_term_level():
    res = run(policy="stepdown", step_down_max=0.15, ending_stock=0.5, long_term_periods=3)
    h = res.simulation.harvest_m3
    lt = res.details["long_term_m3_per_period"]
    hold = int(res.details["hold_periods"])
    assert res.simulation.feasible and h[0] >= lt
    np.testing.assert_allclose(h[:hold], h[0], rtol=1e-9)
    drops = 1 - h[1:] / h[:-1]
    assert np.all(drops <= 0.15 + 1e-9)  # never more than step_down_max a period
    assert h[-1] == pytest.approx(lt, rel=1e-9)
    # the long-term level keeps the harvestable growing stock from falling at the end
    stock = res.simulation.hlb_stock_start_m3
    assert res.simulation.ending_hlb_stock_m3 >= stock[-3] * (1 - 1e-6)


def test_targets_take_what_they_can_and_report_shortfalls():
    half = 0.5 * run(policy="even", ending_stock=0.0).level_m3_per_period
    targets = (half,) * 6 + (1e9,) * 6  # reachable, then impossible
    res = run(policy="targets", targets_m3=targets, ending_stock=0.0)
    h = res.simulation.harvest_m3
    np.testing.assert_allclose(h[:6], half, rtol=1e-9)
    assert np.all(h[6:] < 1e9)
    assert res.details["periods_missed"] == 6 and "targets missed in 6 period(s)" in res.binding


@pytest.mark.parametrize("policy", ["nondeclining", "stepdown"])
def test_regulated_forest_is_held_by_every_policy(policy):
    # Area control (Davis & Johnson; Bettinger et al. 2009, Ch. 11): a regulated forest can
    # hold (A/R) V(R) and no more, whichever policy asks.
    R, L = 60, 10
    ages = np.arange(R // L, dtype=float) * L + 5  # midpoint: oldest reaches 60 at harvest
    n = len(ages)
    st = StandArrays(
        np.zeros(n, np.int32),
        np.full(n, 20.0),
        ages,
        np.full(n, 25.0),
        np.full(n, float(R)),
        np.zeros(n),
        np.arange(n),
    )
    res = schedule(
        st, CURVES, PERIODS, FlowConfig(policy=policy, ending_stock=1.0), policy, NO_RULES
    )
    expected = n * 25.0 / R * float(CURVES.curves[0].volume_m3_ha(R, 20.0)) * L
    np.testing.assert_allclose(res.simulation.harvest_m3, expected, rtol=1e-6)


@pytest.mark.parametrize("count", [1, 2, 3])
def test_stepdown_on_a_horizon_shorter_than_its_stability_window(count):
    # the default stability window is a quarter of the horizon, at least 2 periods, and never
    # longer than the horizon: a one-period step-down compares the end with the start
    periods = Periods(2030, 10, count, "midpoint")
    cfg = FlowConfig(policy="stepdown", ending_stock=0.5)
    res = schedule(forest(), CURVES, periods, cfg, cfg.policy, NO_RULES)
    window = min(2, count)
    sim = res.simulation
    assert sim.feasible and res.level_m3_per_period > 0
    assert sim.ending_hlb_stock_m3 >= sim.hlb_stock_start_m3[count - window] * (1 - 1e-6)
