"""Curve families: identities, derivatives, site scaling, site classes and the Wiedemann table."""

import numpy as np
import pytest

from yieldscape.growth import (
    ChapmanRichards,
    GompertzYield,
    LogisticYield,
    Schumacher,
    SiteScaling,
    StockGrowth,
    TableYield,
    culmination,
    table_culmination,
    yield_class,
)

SITE = SiteScaling(site_index_ref_m=20.0, site_exponent_a=1.2, site_exponent_k=0.5)
FAMILIES = [
    ChapmanRichards(450.0, 0.03, 3.0, SITE),
    Schumacher(600.0, 60.0, SITE),
    LogisticYield(500.0, 30.0, 0.07, SITE),
    GompertzYield(500.0, 6.0, 0.04, SITE),
    StockGrowth(0.06, 550.0, 8.0, None, SITE),
    StockGrowth(0.09, 550.0, 60.0, 40.0, SITE),
]


@pytest.mark.parametrize("curve", FAMILIES, ids=lambda c: type(c).__name__)
def test_cai_is_the_derivative_of_volume(curve):
    # Independent check: central finite differences of V.
    t = np.linspace(2, 250, 60)
    si = np.full(t.shape, 24.0)
    h = 1e-4
    fd = (curve.volume_m3_ha(t + h, si) - curve.volume_m3_ha(t - h, si)) / (2 * h)
    np.testing.assert_allclose(curve.cai_m3_ha_yr(t, si), fd, rtol=2e-3, atol=1e-6)


@pytest.mark.parametrize("curve", FAMILIES[:4], ids=lambda c: type(c).__name__)
def test_cai_equals_mai_at_culmination(curve):
    # Standard mensuration: MAI is greatest where CAI = MAI.
    vol = lambda t: curve.volume_m3_ha(t, np.full(np.shape(t), 20.0))  # noqa: E731
    cai = lambda t: curve.cai_m3_ha_yr(t, np.full(np.shape(t), 20.0))  # noqa: E731
    cul = culmination(vol, cai, 400)
    assert cul.culminated
    assert float(cai(np.array([cul.age_years]))[0]) == pytest.approx(cul.mai, rel=1e-6)


def test_chapman_richards_identity_independent_of_asymptote():
    # c = 3: k t* = 1.90381 regardless of a, and CAI = MAI there (shared practice notes).
    for a in (100.0, 900.0):
        curve = ChapmanRichards(a, 0.02, 3.0)
        cul = culmination(curve.volume_m3_ha, curve.cai_m3_ha_yr, 500)
        assert cul.age_years * 0.02 == pytest.approx(1.90381, abs=1e-5)


def test_schumacher_culminates_at_b():
    # V = a exp(-b/t): MAI peaks at t = b, CAI at t = b/2 (shared practice notes).
    curve = Schumacher(500.0, 45.0)
    assert culmination(curve.volume_m3_ha, curve.cai_m3_ha_yr, 400).age_years == pytest.approx(45)
    t = np.linspace(1, 200, 199_001)
    assert t[np.argmax(curve.cai_m3_ha_yr(t))] == pytest.approx(22.5, abs=1e-3)


def test_site_scaling_moves_culmination():
    # V(t, SI) = rho_a V(rho_k t): culmination age scales by 1 / rho_k, MAI by rho_a rho_k.
    curve = ChapmanRichards(450.0, 0.03, 3.0, SITE)
    ref = culmination(
        lambda t: curve.volume_m3_ha(t, 20.0 + 0 * t),
        lambda t: curve.cai_m3_ha_yr(t, 20.0 + 0 * t),
        400,
    )
    good = culmination(
        lambda t: curve.volume_m3_ha(t, 25.0 + 0 * t),
        lambda t: curve.cai_m3_ha_yr(t, 25.0 + 0 * t),
        400,
    )
    rho_a, rho_k = (25 / 20) ** 1.2, (25 / 20) ** 0.5
    assert good.age_years == pytest.approx(ref.age_years / rho_k, rel=1e-6)
    assert good.mai == pytest.approx(ref.mai * rho_a * rho_k, rel=1e-6)


def test_wiedemann_scots_pine_class_one():
    # Wiedemann (1943) Scots pine, moderate thinning, site class I, as tabulated in the German
    # yield-table collections: total production 382, 564, 779 m3/ha at 50, 70, 100 years;
    # maximum MAI 8.1 m3/ha/yr reached at age 70-75.
    table = TableYield.single((50.0, 70.0, 100.0), (382.0, 564.0, 779.0))
    by_hand = table_culmination(table.ages, table.volumes_m3_ha[0])
    assert by_hand.age_years == 70 and round(by_hand.mai, 1) == 8.1
    cul = culmination(table.volume_m3_ha, table.cai_m3_ha_yr, 100)
    assert 70 <= cul.age_years <= 75 and round(cul.mai, 1) == 8.1


def test_site_classes_interpolate_between_tables():
    table = TableYield((20.0, 40.0, 60.0), ((10, 60, 140), (30, 120, 240)), (18.0, 24.0))
    v = table.volume_m3_ha(np.array([40.0, 40.0, 40.0, 40.0]), np.array([18, 21, 24, 30]))
    np.testing.assert_allclose(v, [60, 90, 120, 120])  # linear between, nearest class outside
    assert table.site_range == (18.0, 24.0)


def test_not_culminated_within_the_table():
    # Tables still rising at their last age (e.g. beech at 140 years) have not culminated.
    cul = table_culmination([20, 60, 100, 140], [40, 180, 380, 600])
    assert not cul.culminated and cul.age_years == 140


@pytest.mark.parametrize(("mai", "cls"), [(7.9, 8), (9.0, 10), (8.99, 8), (13.2, 14), (3.0, 4)])
def test_yield_class_rounds_to_even_steps(mai, cls):
    # Forestry Commission yield class: maximum MAI in steps of 2 m3/ha/yr; our rounding rule:
    # to the nearest step, halves up (docs/methods.md).
    assert yield_class(mai) == cls
