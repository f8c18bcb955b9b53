"""Even-flow search: the highest flow level the rule-based scheduler can hold.

The level H [m3 per period] is found by bisection on [0, U], where U is the volume eligible in
period 1 (period 1 must yield H, so no level above U can hold). Each step runs the vectorised
simulation of :mod:`yieldscape.schedule.simulate`, which stops at the first missed period.
Bisection assumes feasibility falls with H, which holds for a queue that always cuts in the same
order; the final level is re-run in full and its feasibility is checked, never assumed.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from yieldscape.policies import EvenFlow, Sequence, StepDown, Targets
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule.cover import CoverRules
from yieldscape.schedule.simulate import Simulation, simulate
from yieldscape.schedule.spatial import SpatialRules

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
    policy: str = "even"
    details: dict[str, float] = field(default_factory=dict)  # policy-specific figures


def _run(rules: dict, level: float, **options) -> Simulation:
    """One simulated horizon of the stands under the harvest rules every trial shares."""
    return simulate(level_m3=level, **rules, **options)


def _rules(  # noqa: ANN202
    stands,
    curves,
    periods,
    priority,
    max_area_ha,
    spatial,
    cover,
    disturbance,
    snapshots=(),  # noqa: ANN001
):
    """The simulation options every trial of a search shares (``snapshots``: kept by the
    recorded runs only)."""
    return {
        "snapshots": snapshots,
        "stands": stands,
        "curves": curves,
        "periods": periods,
        "priority": priority,
        "max_area_ha": max_area_ha,
        "spatial": spatial,
        "cover": cover,
        "disturbance": disturbance,
    }


def find_even_flow(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    band: float = 0.0,
    ending_stock: float = 1.0,
    priority: str = "oldest",
    max_area_ha: float | None = None,
    stable_periods: int = 0,
    fixed: tuple[float, ...] = (),
    spatial: SpatialRules | None = None,
    cover: CoverRules | None = None,
    disturbance: float = 0.0,
    snapshots: tuple[int, ...] = (),
) -> FlowResult:
    """Bisection for the highest feasible even-flow level (see the module docstring).

    ``stable_periods`` adds the requirement that the harvestable growing stock does not fall
    over the last that many periods. With ``fixed`` the first periods take those harvests and
    the level applies to the periods after them (band not used).
    """
    rules = _rules(
        stands, curves, periods, priority, max_area_ha, spatial, cover, disturbance, snapshots
    )

    def trial(level: float, record: bool = False) -> Simulation:
        rule = Sequence(fixed, level) if fixed else EvenFlow(level, band)
        return _run(
            rules,
            level,
            ending_stock=ending_stock,
            record=record,
            rule=rule,
            stable_periods=stable_periods,
        )

    # U: what the first free period could yield if every eligible stand were cut, within the
    # area cap (later periods cannot hold more than that).
    upper = float(trial(float("inf"), record=True).harvest_m3[len(fixed)])
    steps = 1
    zero = trial(0.0)
    steps += 1
    if not zero.feasible or upper <= 0:
        final = trial(0.0, record=True)
        if not zero.feasible:
            why = (
                f"no harvest at all is feasible: even without cutting, the ending growing "
                f"stock {final.ending_stock_m3:,.0f} m3 is below flow.ending_stock = "
                f"{ending_stock:g} x the initial {final.initial_stock_m3:,.0f} m3"
            )
        else:
            why = "no stand is eligible for harvest in period 1"
        return _result(0.0, periods, final, why, steps)

    top = trial(upper)
    steps += 1
    if top.feasible:
        final = trial(upper, record=True)
        return _result(upper, periods, final, _why_top(final, max_area_ha), steps + 1)

    lo, hi, hi_sim = (fixed[-1] if fixed else 0.0), upper, top
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
        return (
            f"period 1: the area cap (harvest.max_area_ha_per_period = {max_area_ha:g} ha) "
            "is reached at this level"
        )
    return "period 1: every stand eligible in period 1 is cut at this level"


def _why(sim: Simulation, level: float, periods: Periods, ending_stock: float) -> str:
    higher = f"any level above {level:,.0f} m3 per period"
    if sim.fail_period is not None:
        year = periods.start_years[sim.fail_period - 1]
        if sim.fail_reason.startswith("eligible volume the"):  # a rule of the pick refused
            rules = sim.fail_reason.removeprefix("eligible volume ").removesuffix(" exhausted")
            what = f"run out of the eligible volume {rules}"
        elif sim.fail_reason.startswith("eligible"):
            what = "run out of eligible volume"
        else:
            what = "reach the area cap (harvest.max_area_ha_per_period)"
        return f"{higher} would {what} in period {sim.fail_period} (from {year})"
    if sim.fail_reason.startswith("growing stock on the harvestable"):
        return f"at {higher} the {sim.fail_reason}"
    return (
        f"{higher} would leave the ending growing stock below flow.ending_stock = "
        f"{ending_stock:g} x the initial {sim.initial_stock_m3:,.0f} m3"
    )


def _result(level: float, periods: Periods, sim: Simulation, why: str, steps: int) -> FlowResult:
    return FlowResult(level, level / periods.period_years, sim, why, steps)  # policy "even"


def stable_periods_for(periods: Periods, configured: int | None) -> int:
    """Periods over which the long-term level must hold the harvestable growing stock."""
    return configured if configured is not None else max(2, periods.count // 4)


def find_step_down(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    step: float,
    ending_stock: float = 1.0,
    priority: str = "oldest",
    max_area_ha: float | None = None,
    stable_periods: int = 2,
    spatial: SpatialRules | None = None,
    cover: CoverRules | None = None,
    disturbance: float = 0.0,
    snapshots: tuple[int, ...] = (),
) -> FlowResult:
    """The highest initial level held as long as possible, then stepped down by at most
    ``step`` a period to the long-term level.

    The long-term level is the highest even flow that leaves the harvestable growing stock
    stable over the last ``stable_periods`` periods (and meets the ending stock). Then, by
    bisection on the initial level H0 >= that level: H0 is feasible when some hold of k >= 1
    periods at H0 followed by the step-down is; the longest such k is found by bisection too
    (holding longer is never easier).
    """
    rules = _rules(
        stands, curves, periods, priority, max_area_ha, spatial, cover, disturbance, snapshots
    )
    base = find_even_flow(
        stands,
        curves,
        periods,
        0.0,
        ending_stock,
        priority,
        max_area_ha,
        stable_periods=stable_periods,
        spatial=spatial,
        cover=cover,
        disturbance=disturbance,
    )
    lt = base.level_m3_per_period
    steps = base.steps

    def run(h0: float, hold: int, record: bool = False) -> Simulation:
        nonlocal steps
        steps += 1
        return _run(
            rules,
            h0,
            ending_stock=ending_stock,
            record=record,
            rule=StepDown(h0, hold, step, lt),
            stable_periods=stable_periods,
        )

    def longest_hold(h0: float) -> int:
        if not run(h0, 1).feasible:
            return 0
        lo, hi = 1, periods.count
        if run(h0, hi).feasible:
            return hi
        while hi - lo > 1:
            mid = (lo + hi) // 2
            lo, hi = (mid, hi) if run(h0, mid).feasible else (lo, mid)
        return lo

    upper = float(
        _run(
            rules,
            float("inf"),
            record=True,
        ).harvest_m3[0]
    )
    lo, hi = lt, max(upper, lt)
    best_hold = periods.count
    while hi - lo > 1e-6 * max(hi, 1.0):
        mid = 0.5 * (lo + hi)
        k = longest_hold(mid)
        if k:
            lo, best_hold = mid, k
        else:
            hi = mid
    if lo <= lt * (1 + 1e-9):
        best_hold = periods.count
    final = run(lo, best_hold, record=True)
    if not final.feasible:
        raise RuntimeError(
            f"step-down search ended on an infeasible schedule ({final.fail_reason})"
        )
    why = (
        f"the long-term level {lt:,.0f} m3 per period is limited by: {base.binding}; "
        f"the initial level {lo:,.0f} m3 per period holds for {best_hold} period(s)"
    )
    return FlowResult(
        lo,
        lo / periods.period_years,
        final,
        why,
        steps,
        "stepdown",
        {"long_term_m3_per_period": lt, "hold_periods": float(best_hold), "step_down_max": step},
    )


def run_targets(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    targets: tuple[float, ...],
    priority: str = "oldest",
    max_area_ha: float | None = None,
    ending_stock: float = 1.0,
    spatial: SpatialRules | None = None,
    cover: CoverRules | None = None,
    disturbance: float = 0.0,
    snapshots: tuple[int, ...] = (),
) -> FlowResult:
    """Explicit per-period targets: one run; shortfalls and the ending stock are reported."""
    rules = _rules(
        stands, curves, periods, priority, max_area_ha, spatial, cover, disturbance, snapshots
    )
    sim = _run(
        rules,
        0.0,
        record=True,
        rule=Targets(tuple(targets)),
    )
    short = np.maximum(np.asarray(targets) - sim.harvest_m3, 0.0)
    missed = np.flatnonzero(short > 1e-6 * np.maximum(np.asarray(targets), 1.0))
    parts = []
    if len(missed):
        parts.append(
            f"targets missed in {len(missed)} period(s), first in period "
            f"{missed[0] + 1} (short by {short[missed[0]]:,.0f} m3)"
        )
    if sim.ending_stock_m3 < ending_stock * sim.initial_stock_m3 * (1 - 1e-9):
        parts.append(
            f"the ending growing stock {sim.ending_stock_m3:,.0f} m3 is below "
            f"flow.ending_stock = {ending_stock:g} x the initial"
        )
    why = "; ".join(parts) or "every target met and the ending growing stock requirement holds"
    mean = float(np.mean(sim.harvest_m3))
    return FlowResult(
        mean,
        mean / periods.period_years,
        sim,
        why,
        1,
        "targets",
        {"shortfall_m3": float(short.sum()), "periods_missed": float(len(missed))},
    )


Search = Callable[..., FlowResult]


def find_nondeclining(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    ending_stock: float = 1.0,
    priority: str = "oldest",
    max_area_ha: float | None = None,
    spatial: SpatialRules | None = None,
    cover: CoverRules | None = None,
    disturbance: float = 0.0,
    snapshots: tuple[int, ...] = (),
) -> FlowResult:
    """A non-declining flow built one period at a time (lexicographic max-min).

    Period 1 takes the highest even flow the whole horizon can hold; with it fixed, period 2
    takes the highest level periods 2..P can hold (never below period 1), and so on. Each
    period's harvest is thus the most that can be held from then on without a decline.
    """
    rules = _rules(
        stands, curves, periods, priority, max_area_ha, spatial, cover, disturbance, snapshots
    )
    first = find_even_flow(
        stands,
        curves,
        periods,
        0.0,
        ending_stock,
        priority,
        max_area_ha,
        spatial=spatial,
        cover=cover,
        disturbance=disturbance,
    )
    fixed = [first.level_m3_per_period]
    steps = first.steps
    last = first
    for _ in range(1, periods.count):
        nxt = find_even_flow(
            stands,
            curves,
            periods,
            0.0,
            ending_stock,
            priority,
            max_area_ha,
            fixed=tuple(fixed),
            spatial=spatial,
            cover=cover,
            disturbance=disturbance,
        )
        steps += nxt.steps
        fixed.append(max(nxt.level_m3_per_period, fixed[-1]))
        last = nxt
    final = _run(
        rules,
        fixed[0],
        ending_stock=ending_stock,
        record=True,
        rule=Sequence(tuple(fixed), fixed[-1]),
    )
    if not final.feasible:
        raise RuntimeError(f"non-declining search ended infeasible ({final.fail_reason})")
    why = f"period 1: {first.binding}; the last period's level is limited by: {last.binding}"
    return FlowResult(
        fixed[0],
        fixed[0] / periods.period_years,
        final,
        why,
        steps,
        "nondeclining",
        {"final_m3_per_period": fixed[-1]},
    )
