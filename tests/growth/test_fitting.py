"""Curve fitting: recover known curves from their points (a round trip), report poor fits."""

import numpy as np
import pytest

from yieldscape.growth.curves import chapman_richards, gompertz_yield, schumacher
from yieldscape.growth.fitting import FitError, fit_curve

AGES = np.arange(10.0, 160.0, 10.0)


@pytest.mark.parametrize(
    ("model", "fn", "params"),
    [
        ("chapman-richards", chapman_richards, {"a": 520.0, "k": 0.027, "c": 2.6}),
        ("schumacher", schumacher, {"a": 700.0, "b": 55.0}),
        ("gompertz", gompertz_yield, {"a": 480.0, "b": 5.0, "k": 0.045}),
    ],
)
def test_round_trip_recovers_parameters(model, fn, params):
    rng = np.random.default_rng(3)
    v = fn(AGES, **params) * (1 + rng.normal(0, 0.002, len(AGES)))
    fit = fit_curve(AGES, v, model)
    for k, val in params.items():
        assert fit.parameters[k] == pytest.approx(val, rel=0.03), k
    assert fit.r2 > 0.999 and not fit.warnings
    assert f'curve = "{model}"' in fit.scenario_snippet("pine")


def test_poor_fit_is_flagged():
    rng = np.random.default_rng(5)
    v = rng.uniform(0, 400, len(AGES))  # no growth pattern at all
    fit = fit_curve(AGES, v, "chapman-richards")
    assert any("poor fit" in w for w in fit.warnings)


def test_too_few_points():
    with pytest.raises(FitError, match="3 points cannot fit 3 parameters"):
        fit_curve(AGES[:3], AGES[:3] * 2, "chapman-richards")
