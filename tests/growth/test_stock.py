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


# -- the concave minimum-viable-stock and the depensation shapes (issue 16) ------------------
def _numeric_msy(shape, r, k, m=None):
    """scipy's bounded scalar search for the stock of greatest growth, independent of the
    closed forms (Brent's method on -g)."""
    from scipy.optimize import minimize_scalar

    lo = m if shape == "minimum" else 0.0
    res = minimize_scalar(
        lambda s: -float(growth(s, r, k, m, shape)),
        bounds=(lo, k),
        method="bounded",
        options={"xatol": 1e-10},
    )
    return res.x, -res.fun


@pytest.mark.parametrize(
    ("shape", "m", "s_msy", "g_msy"),
    [
        # r = 0.5, K = 1000, m = 200: S = (K + m)/2 = 600, g = r (K - m)^2 / (4K) = 80
        ("minimum", 200.0, 600.0, 80.0),
        # r = 0.5, K = 1000: S = 2K/3, g = 4rK/27 = 74.074...
        ("depensation", None, 2000.0 / 3.0, 2000.0 / 27.0),
        ("logistic", None, 500.0, 125.0),
    ],
)
def test_msy_closed_forms_against_scipy(shape, m, s_msy, g_msy):
    s, g = msy(0.5, 1000.0, m, shape)
    assert (s, g) == pytest.approx((s_msy, g_msy), rel=1e-12)
    ns, ng = _numeric_msy(shape, 0.5, 1000.0, m)
    assert ns == pytest.approx(s, abs=1e-5) and ng == pytest.approx(g, rel=1e-10)


def test_minimum_shape_signs_and_equilibria():
    r, k, m = 0.5, 1000.0, 200.0
    assert equilibria(k, m, "minimum") == (200.0, 1000.0)
    assert np.all(growth(np.linspace(0, 199, 50), r, k, m, "minimum") < 0)
    assert np.all(growth(np.linspace(201, 999, 50), r, k, m, "minimum") > 0)
    # concave throughout: the second difference is negative everywhere
    g = growth(np.linspace(0, k, 1001), r, k, m, "minimum")
    assert np.all(np.diff(g, 2) < 0)


def test_depensation_shape_signs_and_equilibria():
    r, k = 0.5, 1000.0
    assert equilibria(k, None, "depensation") == (0.0, 1000.0)
    s = np.linspace(1, 999, 999)
    assert np.all(growth(s, r, k, None, "depensation") > 0)  # never negative on (0, K)
    d2 = np.diff(growth(np.linspace(0, k, 3001), r, k, None, "depensation"), 2)
    assert d2[:100].min() > 0 and d2[-100:].max() < 0  # convex at low stock, then concave


@pytest.mark.parametrize("shape", ["logistic", "minimum", "threshold", "depensation"])
def test_stability_from_the_slope_of_growth(shape):
    # An equilibrium is stable where g falls through it (g > 0 just below, g < 0 just above)
    # and unstable where a small deviation grows; checked on g itself, 1e-6 K either side.
    from yieldscape.growth.stock import equilibria_with_stability

    r, k, m = 0.3, 800.0, 120.0
    mm = m if shape in ("minimum", "threshold") else None
    for e in equilibria_with_stability(k, mm, shape):
        h = 1e-6 * k
        below = float(growth(e.stock - h, r, k, mm, shape)) if e.stock > 0 else 0.0
        above = float(growth(e.stock + h, r, k, mm, shape))
        returns = below >= 0 and above < 0 and not (e.stock == 0 and above > 0)
        assert returns == e.stable, (shape, e)


@pytest.mark.parametrize(
    ("shape", "s0"),
    [
        ("minimum", 25.0),  # below m: collapses to 0 in finite time
        ("minimum", 250.0),
        ("minimum", 600.0),
        ("depensation", 5.0),
        ("depensation", 300.0),
        ("depensation", 600.0),
    ],
)
def test_new_trajectories_match_numerical_integration(shape, s0):
    # Independent check: scipy's RK45 integration of dS/dt = g(S) (stopped at S = 0).
    r, k, m = 0.08, 600.0, 40.0
    mm = m if shape == "minimum" else None
    curve = StockGrowth(r, k, s0, mm, shape=shape)
    t = np.linspace(0, 300, 61)

    def gone(_, s):
        return s[0]

    gone.terminal = True
    sol = solve_ivp(
        lambda _, s: growth(s, r, k, mm, shape),
        (0, 300),
        [s0],
        rtol=1e-10,
        atol=1e-10,
        dense_output=True,
        events=gone,
    )
    end = sol.t[-1]
    want = np.where(t <= end, sol.sol(np.minimum(t, end))[0], 0.0)
    np.testing.assert_allclose(curve.volume_m3_ha(t), want, rtol=2e-4, atol=1e-3)
    assert curve.collapses == (shape == "minimum" and s0 < m)


@pytest.mark.parametrize("shape", ["minimum", "depensation"])
def test_new_shapes_scale_with_the_site(shape):
    # Under the site scheme the curve at a site is the same shape with K, m and S0 times
    # rho_a and time times rho_k: integrate rho_a rho_k g(S / rho_a) with scipy and compare.
    from yieldscape.growth import SiteScaling

    r, k, m, s0 = 0.06, 500.0, 60.0, 150.0
    mm = m if shape == "minimum" else None
    site = SiteScaling(20.0, 1.0, 0.5)
    curve = StockGrowth(r, k, s0, mm, site, shape)
    ra, rk = (float(x) for x in site.factors(np.asarray(24.0)))
    t = np.linspace(0, 150, 31)
    sol = solve_ivp(
        lambda _, s: ra * rk * growth(s / ra, r, k, mm, shape),
        (0, 150),
        [ra * s0],
        t_eval=t,
        rtol=1e-10,
        atol=1e-10,
    )
    np.testing.assert_allclose(curve.volume_m3_ha(t, 24.0), sol.y[0], rtol=2e-4, atol=1e-3)
    s_site, g_site = curve.msy(24.0)
    s_ref, g_ref = msy(r, k, mm, shape)
    assert float(s_site) == pytest.approx(ra * s_ref) and float(g_site) == pytest.approx(
        ra * rk * g_ref
    )
