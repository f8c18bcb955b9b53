"""Faustmann and single-rotation optima against textbook exercises and known properties."""

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from yieldscape.growth import ChapmanRichards, chapman_richards_culmination_age, culmination
from yieldscape.growth.economics import faustmann_rotation, fisher_rotation, lev


def conrad_q(t):
    # Conrad, Resource Economics, exercise: Q(t) = 10 t + t^2 - 0.01 t^3.
    t = np.asarray(t, dtype=float)
    return 10 * t + t**2 - 0.01 * t**3


def conrad_dq(t):
    t = np.asarray(t, dtype=float)
    return 10 + 2 * t - 0.03 * t**2


def test_conrad_exercise():
    # Conrad, Resource Economics: 5% continuous; MAI maximised at t = 50; single-rotation
    # optimum 28.14; Faustmann with price 1 and replanting cost 150 gives 25.86, price 2 22.24.
    assert culmination(conrad_q, conrad_dq, 100).age_years == pytest.approx(50.0, abs=1e-6)
    assert fisher_rotation(conrad_q, 1.0, 0.0, 0.05, max_age=100).age_years == pytest.approx(
        28.14, abs=0.005
    )
    assert faustmann_rotation(conrad_q, 1.0, 150.0, 0.05, max_age=100).age_years == pytest.approx(
        25.86, abs=0.005
    )
    assert faustmann_rotation(conrad_q, 2.0, 150.0, 0.05, max_age=100).age_years == pytest.approx(
        22.24, abs=0.005
    )


def test_bettinger_soil_expectation_value():
    # Bettinger, Boston, Siry & Grebner (2009), Ch. 2: cost 125 per acre, revenue 12,500 at
    # age 35, 5% annual compounding: soil expectation value 2,615.25.
    value = lev(
        np.array([35.0]), lambda t: np.full(np.shape(t), 12_500.0), 1.0, 125.0, 0.05, "annual"
    )[0]
    assert value == pytest.approx(2615.25, abs=0.01)


def test_annual_cost_is_a_perpetuity():
    # An annual cost A lowers LEV by A / i (present value of a perpetuity, standard finance).
    v = lambda t: np.full(np.shape(t), 1000.0)  # noqa: E731
    t = np.array([40.0])
    assert lev(t, v, 1.0, 0.0, 0.04, "annual", 5.0)[0] == pytest.approx(
        lev(t, v, 1.0, 0.0, 0.04, "annual")[0] - 5.0 / 0.04
    )


CURVE = ChapmanRichards(400.0, 0.03, 3.0)


@settings(max_examples=25, deadline=None)
@given(st.floats(0.005, 0.08), st.floats(0.0, 800.0))
def test_fisher_longer_than_faustmann(rate, cost):
    # For every r > 0 the single-rotation optimum is longer (Samuelson 1976).
    vol = CURVE.volume_m3_ha
    faus = faustmann_rotation(vol, 20.0, cost, rate)
    assume(faus.value > 0)  # the rotations mean something only where forestry pays
    fish = fisher_rotation(vol, 20.0, cost, rate)
    assert fish.age_years > faus.age_years


def test_faustmann_falls_as_rate_rises():
    vol = CURVE.volume_m3_ha
    ages = [faustmann_rotation(vol, 20.0, 300.0, r).age_years for r in (0.01, 0.02, 0.04, 0.06)]
    assert all(a > b for a, b in zip(ages, ages[1:], strict=False))


def test_faustmann_tends_to_mai_age_without_regeneration_cost():
    # As r -> 0 with zero regeneration cost the Faustmann rotation tends to the MAI
    # culmination age (shared practice notes; only without a regeneration cost).
    vol = CURVE.volume_m3_ha
    t_mai = chapman_richards_culmination_age(0.03, 3.0)
    gaps = [
        abs(faustmann_rotation(vol, 20.0, 0.0, r).age_years - t_mai) for r in (0.02, 0.002, 0.0001)
    ]
    assert gaps[0] > gaps[1] > gaps[2] and gaps[2] < 0.5


def test_rate_must_be_positive():
    with pytest.raises(ValueError, match="rate > 0"):
        faustmann_rotation(CURVE.volume_m3_ha, 20.0, 0.0, 0.0)
