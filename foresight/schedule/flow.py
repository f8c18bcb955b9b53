"""Even-flow search: the highest flow level the rule-based scheduler can hold.

The level H [m3 per period] is found by bisection on [0, U], where U is the volume eligible in
period 1 (period 1 must yield H, so no level above U can hold). Each step runs the vectorised
simulation of :mod:`foresight.schedule.simulate`, which stops at the first missed period.
Bisection assumes feasibility falls with H, which holds for a queue that always cuts in the same
order; the final level is re-run in full and its feasibility is checked, never assumed.
"""

from __future__ import annotations

from dataclasses import dataclass

from foresight.projection import CurveSet, Periods, StandArrays
from foresight.schedule.simulate import Simulation, simulate

REL_TOL = 1e-7
MAX_STEPS = 80


@dataclass(frozen=True)
class FlowResult:
    """The level found, the recorded run at that level and what stops it going higher."""

    level_m3_per_period: float
    level_m3_per_year: float
    simulation: Simulation
    binding: str
    steps: int


def find_even_flow(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    band: float = 0.0,
    ending_stock: float = 1.0,
    priority: str = "oldest",
    max_area_ha: float | None = None,
) -> FlowResult:
    """Bisection for the highest feasible even-flow level (see the module docstring)."""

    def trial(level: float, record: bool = False) -> Simulation:
        return simulate(stands, curves, periods, level, band=band, priority=priority,
                        max_area_ha=max_area_ha, ending_stock=ending_stock, record=record)

    # U: what period 1 could yield if every eligible stand were cut, within the area cap.
    upper = float(trial(float("inf"), record=True).harvest_m3[0])
    steps = 1
    zero = trial(0.0)
    steps += 1
    if not zero.feasible or upper <= 0:
        final = trial(0.0, record=True)
        if not zero.feasible:
            why = (f"no harvest at all is feasible: even without cutting, the ending growing "
                   f"stock {final.ending_stock_m3:,.0f} m3 is below flow.ending_stock = "
                   f"{ending_stock:g} x the initial {final.initial_stock_m3:,.0f} m3")
        else:
            why = "no stand is eligible for harvest in period 1"
        return _result(0.0, periods, final, why, steps)

    top = trial(upper)
    steps += 1
    if top.feasible:
        final = trial(upper, record=True)
        return _result(upper, periods, final, _why_top(final, max_area_ha), steps + 1)

    lo, hi, hi_sim = 0.0, upper, top
    while hi - lo > REL_TOL * hi and steps < MAX_STEPS:
        mid = 0.5 * (lo + hi)
        sim = trial(mid)
        steps += 1
        if sim.feasible:
            lo = mid
        else:
            hi, hi_sim = mid, sim
    final = trial(lo, record=True)
    steps += 1
    if not final.feasible:  # a non-monotone case: never report an infeasible level
        raise RuntimeError(f"flow search ended on an infeasible level {lo} ({final.fail_reason})")
    return _result(lo, periods, final, _why(hi_sim, hi, periods, ending_stock), steps)


def _why_top(sim: Simulation, max_area_ha: float | None) -> str:
    if max_area_ha is not None and sim.harvest_ha[0] >= max_area_ha * (1 - 1e-9):
        return (f"period 1: the area cap (harvest.max_area_ha_per_period = {max_area_ha:g} ha) "
                "is reached at this level")
    return "period 1: every stand eligible in period 1 is cut at this level"


def _why(sim: Simulation, level: float, periods: Periods, ending_stock: float) -> str:
    higher = f"a level of {level:,.0f} m3 per period"
    if sim.fail_period is not None:
        year = periods.start_years[sim.fail_period - 1]
        what = ("runs out of eligible volume" if sim.fail_reason.startswith("eligible")
                else "reaches the area cap (harvest.max_area_ha_per_period)")
        return f"{higher} {what} in period {sim.fail_period} (from {year})"
    return (f"{higher} would leave the ending growing stock below flow.ending_stock = "
            f"{ending_stock:g} x the initial {sim.initial_stock_m3:,.0f} m3")


def _result(level: float, periods: Periods, sim: Simulation, why: str, steps: int) -> FlowResult:
    return FlowResult(level, level / periods.period_years, sim, why, steps)
