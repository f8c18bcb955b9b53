"""Stock-growth models against the closed forms of renewable-resource economics."""

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from yieldscape.growth import StockGrowth
from yieldscape.growth.stock import equilibria, growth, logistic_stock, msy


def test_logistic_msy():
    # Clark, Mathematical Bioeconomics: MSY = rK/4 at S = K/2; r = 0.5, K = 1000 -> 125 at 500.
    s, g = msy(0.5, 1000.0)
    assert (s, g) == pytest.approx((500.0, 125.0))
    assert float(growth(500.0, 0.5, 1000.0)) == pytest.approx(125.0)


def test_minimum_viable_stock_values():
    # g(S) = r S (S/m - 1)(1 - S/K) with r = 0.5, K = 1000, m = 200: negative below 200,
    # equilibria 0, 200, 1000; MSY stock 705.505 (larger root of 3S^2 - 2(K+m)S + mK = 0)
    # and MSY 262.569 (values given in the growth issue, closed form of the cubic's derivative).
    r, k, m = 0.5, 1000.0, 200.0
    assert equilibria(k, m) == (0.0, 200.0, 1000.0)
    np.testing.assert_allclose(growth([0.0, 200.0, 1000.0], r, k, m), 0.0, atol=1e-12)
    assert np.all(growth(np.linspace(1, 199, 50), r, k, m) < 0)
    assert np.all(growth(np.linspace(201, 999, 50), r, k, m) > 0)
    s, g = msy(r, k, m)
    assert s == pytest.approx(705.505, abs=5e-4)
    assert g == pytest.approx(262.569, abs=5e-4)
    # the MSY stock is where growth peaks (dense grid, brute force)
    grid = np.linspace(200, 1000, 800_001)
    assert grid[np.argmax(growth(grid, r, k, m))] == pytest.approx(s, abs=2e-3)


@pytest.mark.parametrize("s0", [30.0, 250.0, 1400.0])
def test_threshold_trajectory_matches_numerical_integration(s0):
    # Independent check: scipy's RK45 integration of dS/dt = g(S).
    r, k, m = 0.08, 600.0, 40.0
    curve = StockGrowth(r, k, s0, m)
    t = np.linspace(0, 200, 41)
    sol = solve_ivp(
        lambda _, s: growth(s, r, k, m), (0, 200), [s0], t_eval=t, rtol=1e-10, atol=1e-10
    )
    np.testing.assert_allclose(curve.volume_m3_ha(t), sol.y[0], rtol=2e-4, atol=1e-3)
    assert curve.collapses == (s0 < m)


def test_collapse_below_minimum_viable_stock():
    curve = StockGrowth(0.1, 500.0, 20.0, min_viable_m3_ha=50.0)
    assert curve.collapses
    v = curve.volume_m3_ha(np.array([0.0, 50.0, 200.0]))
    assert v[0] == pytest.approx(20.0) and v[1] < 20.0 and v[2] < 1.0


def test_logistic_trajectory_closed_form():
    # S(t) = K / (1 + (K - S0)/S0 e^(-rt)) solves dS/dt = r S (1 - S/K) (Verhulst 1838).
    t = np.linspace(0, 100, 11)
    s = logistic_stock(t, 0.1, 800.0, 10.0)
    ds = np.gradient(
        logistic_stock(np.linspace(0, 100, 100_001), 0.1, 800.0, 10.0), np.linspace(0, 100, 100_001)
    )[::10_000]
    np.testing.assert_allclose(ds, growth(s, 0.1, 800.0), rtol=1e-4, atol=1e-6)
