"""A fully regulated forest must be held exactly: area control.

Equal area in each age class up to the rotation R, one species, minimum harvest age R: the
even-flow level is (A / R) x V(R) per year and the growing stock stays constant (area control;
Davis & Johnson, Forest Management; Bettinger, Boston, Siry & Grebner 2009, Forest Management
and Planning, Ch. 11: a regulated forest yields (A/R) V(R) a year = A x MAI(R)).
"""

import numpy as np
import pytest

from yieldscape.growth import ChapmanRichards
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import find_even_flow

R, L, PERIODS = 60, 10, 12
CLASS_HA = 25.0
CURVE = ChapmanRichards(a=450.0, k=0.035, c=3.0)


def regulated(timing: str) -> StandArrays:
    # One stand per age class; ages chosen so the oldest class reaches R at the harvest moment.
    offset = {"start": 0, "midpoint": L // 2, "end": L}[timing]
    ages = np.arange(R // L, dtype=float) * L + (R - offset - (R // L - 1) * L)
    n = len(ages)
    return StandArrays(
        species_idx=np.zeros(n, dtype=np.int32),
        site_index=np.full(n, 20.0),
        age_years=ages,
        area_ha=np.full(n, CLASS_HA),
        min_harvest_age=np.full(n, float(R)),
        regen_delay_years=np.zeros(n),
        id_rank=np.arange(n),
    )


@pytest.mark.parametrize("timing", ["start", "midpoint", "end"])
def test_regulated_forest_holds_area_control_yield(timing):
    stands = regulated(timing)
    curves = CurveSet(["pine"], [CURVE])
    periods = Periods(2030, L, PERIODS, timing)
    flow = find_even_flow(stands, curves, periods, band=0.0, ending_stock=1.0)
    area = stands.area_ha.sum()
    v_r = float(CURVE.volume_m3_ha(R, 20.0))
    expected_per_year = area / R * v_r  # (A / R) x V(R)
    assert flow.level_m3_per_year == pytest.approx(expected_per_year, rel=1e-6)
    sim = flow.simulation
    np.testing.assert_allclose(sim.harvest_m3 / L, expected_per_year, rtol=1e-6)
    np.testing.assert_allclose(sim.harvest_ha, area / R * L, rtol=1e-6)  # A/R ha a year
    np.testing.assert_allclose(sim.growing_stock_end_m3, sim.initial_stock_m3, rtol=1e-9)
    np.testing.assert_allclose(sim.event_age_years, R)


def test_regulated_forest_yield_equals_area_times_mai():
    # The same identity read the other way: (A/R) V(R) = A x MAI(R).
    stands = regulated("midpoint")
    flow = find_even_flow(
        stands, CurveSet(["pine"], [CURVE]), Periods(2030, L, PERIODS), ending_stock=1.0
    )
    mai_r = float(CURVE.volume_m3_ha(R, 20.0)) / R
    assert flow.level_m3_per_year == pytest.approx(stands.area_ha.sum() * mai_r, rel=1e-6)
