"""Yield curves and MAI against published values and closed forms."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from yieldscape.growth import (
    ChapmanRichards,
    SiteScaling,
    TableYield,
    chapman_richards,
    chapman_richards_culmination_age,
    mai,
    table_culmination,
)

# Bettinger, Boston, Siry & Grebner (2009), Forest Management and Planning, Ch. 2: a yield
# table in ft3/ac; its MAI peaks at 149.4 ft3/ac/yr at age 25 (3735 / 25).
BETTINGER_AGES = [5, 10, 15, 20, 25, 30, 35, 40, 45, 50]
BETTINGER_VOLUMES = [18, 355, 1318, 2622, 3735, 4395, 4675, 4611, 4368, 4060]


def test_textbook_table_mai_maximum():
    cul = table_culmination(BETTINGER_AGES, BETTINGER_VOLUMES)
    assert cul.age_years == 25
    assert cul.mai == pytest.approx(149.4, abs=0.05)
    assert cul.culminated


def test_table_curve_passes_through_its_points_and_holds_flat():
    curve = TableYield.single(tuple(BETTINGER_AGES), tuple(BETTINGER_VOLUMES))
    np.testing.assert_allclose(curve.volume_m3_ha(BETTINGER_AGES), BETTINGER_VOLUMES)
    # documented choice: held at the last value past the last age, 0 at age <= 0
    np.testing.assert_allclose(curve.volume_m3_ha([50, 80, 500]), 4060)
    assert curve.volume_m3_ha(0.0) == 0 and curve.volume_m3_ha(-3.0) == 0


@given(st.lists(st.floats(0, 2000).map(lambda v: round(v, 3)), min_size=3, max_size=12))
def test_table_interpolation_never_overshoots(volumes):
    # PCHIP is shape preserving (Fritsch & Carlson 1980): between two points the curve stays
    # within their range.
    ages = np.arange(1, len(volumes) + 1) * 10.0
    curve = TableYield.single(tuple(ages), tuple(volumes))
    t = np.linspace(ages[0], ages[-1], 200)
    v = curve.volume_m3_ha(t)
    seg = np.clip(np.searchsorted(ages, t, side="right") - 1, 0, len(ages) - 2)
    lo = np.minimum(np.asarray(volumes)[seg], np.asarray(volumes)[seg + 1])
    hi = np.maximum(np.asarray(volumes)[seg], np.asarray(volumes)[seg + 1])
    assert np.all(v >= lo - 1e-9) and np.all(v <= hi + 1e-9)


def test_chapman_richards_culmination_c3():
    # For c = 3, d(V/t)/dt = 0 gives 3x = e^x - 1 with x = k t*, x = 1.90381 (derived in
    # shared practice notes from the Chapman-Richards form; independent of a).
    k = 0.025
    assert chapman_richards_culmination_age(k, 3.0) * k == pytest.approx(1.90381, abs=5e-6)


@pytest.mark.parametrize(("k", "c"), [(0.02, 2.5), (0.04, 3.0), (0.03, 4.2)])
def test_chapman_richards_culmination_matches_dense_grid(k, c):
    # Independent check: the MAI maximum on a fine age grid (brute force).
    t = np.linspace(1, 400, 400_001)
    t_star = t[np.argmax(mai(t, chapman_richards(t, 300.0, k, c)))]
    assert chapman_richards_culmination_age(k, c) == pytest.approx(t_star, abs=2e-3)


def test_site_dependence_scales_asymptote():
    curve = ChapmanRichards(500.0, 0.03, 3.0, SiteScaling(site_index_ref_m=20.0))
    v = curve.volume_m3_ha(np.array([80.0, 80.0]), np.array([20.0, 25.0]))
    assert v[1] / v[0] == pytest.approx(25 / 20)  # a x (SI/SI_ref)^1, k unchanged
    no_site = ChapmanRichards(500.0, 0.03, 3.0)
    assert no_site.volume_m3_ha(80.0, 10.0) == no_site.volume_m3_ha(80.0, 30.0)


def test_chapman_richards_limits():
    assert chapman_richards(0.0, 500, 0.03, 3) == 0
    assert chapman_richards(-5.0, 500, 0.03, 3) == 0
    assert chapman_richards(2000.0, 500, 0.03, 3) == pytest.approx(500)
