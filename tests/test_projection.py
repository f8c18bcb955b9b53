"""The projection's tabulated curves against the exact curve formulas."""

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

from yieldscape.growth import (
    ChapmanRichards,
    GompertzYield,
    LogisticYield,
    Schumacher,
    SiteScaling,
    StockGrowth,
    TableYield,
)
from yieldscape.projection import CurveSet, zone_codes, zone_names

SITE = SiteScaling(20.0, 1.1, 0.4)
CURVES = [
    ChapmanRichards(600.0, 0.028, 3.0, SITE),
    Schumacher(1500.0, 90.0, SITE),
    LogisticYield(500.0, 30.0, 0.07, SITE),
    GompertzYield(500.0, 6.0, 0.04, SITE),
    StockGrowth(0.012, 600.0, 60.0, 40.0, SITE),
    TableYield((20.0, 40.0, 60.0, 80.0), ((10, 60, 140, 220), (20, 110, 230, 330)), (16.0, 24.0)),
    TableYield.single((10.0, 50.0, 90.0), (5.0, 150.0, 260.0)),
]


def test_tabulated_curves_match_exact_formulas():
    rng = np.random.default_rng(11)
    n = 200_000
    sp = rng.integers(0, len(CURVES), n).astype(np.int32)
    age = rng.uniform(-5, 1200, n)  # includes regeneration (negative) and beyond the grid
    site = rng.uniform(14, 26, n)
    cs = CurveSet([str(i) for i in range(len(CURVES))], CURVES, max_age_years=1000.0)
    got = cs.volume_m3_ha(sp, age, site)
    want = np.zeros(n)
    for i, curve in enumerate(CURVES):
        m = sp == i
        want[m] = curve.volume_m3_ha(age[m], site[m])
    # linear interpolation on a 1/16-year grid: error <= h^2/8 max|V''| (standard bound)
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=5e-4)
    assert np.all(got[age < 0] == 0)


@pytest.mark.parametrize("age", [0.0, 17.0, 60.0, 62.5, 240.0])
def test_grid_ages_are_exact_without_time_scaling(age):
    curve = ChapmanRichards(450.0, 0.035, 3.0, SiteScaling(20.0, 1.0, 0.0))
    cs = CurveSet(["pine"], [curve])
    got = cs.volume_m3_ha(np.zeros(1, np.int32), np.array([age]), np.array([23.0]))[0]
    assert got == curve.volume_m3_ha(age, 23.0)


@pytest.mark.parametrize(
    "zone",
    [
        pd.Series(["valley", "highland", "valley", "lakeshore"]).astype(pd.ArrowDtype(pa.string())),
        pd.Series(["b", None, "a", "", "b"]).astype(pd.ArrowDtype(pa.string())),
        pd.Series(["b", None, "Z", "", 7, "7"], dtype=object),  # 7 and "7" are one zone
        pd.Series([3.0, 1.0, np.nan, 10.0]),
        pd.Series([10, 2, 1, 2]),
        pd.Series([None, None], dtype=object),
        pd.Series([], dtype=object),
    ],
)
def test_zone_codes_and_names_are_numpys_unique_of_the_zones_as_text(zone):
    # reference: np.unique (sorted distinct values and the inverse) of the zones as text,
    # none as ''
    text = zone.astype(object).where(zone.notna(), "").astype(str).to_numpy()
    names, codes = np.unique(text, return_inverse=True)
    stands = pd.DataFrame({"zone": zone})
    assert zone_names(stands) == names.tolist()
    np.testing.assert_array_equal(zone_codes(stands), codes)
