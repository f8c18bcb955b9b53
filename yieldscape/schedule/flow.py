"""The flow searches: the highest flow level the rule-based scheduler can hold, per policy.

Even flow: the level H [m3 per period] is found by bisection on [0, U], where U is the volume
eligible in period 1 (period 1 must yield H, so no level above U can hold). Each step runs the
vectorised simulation of :mod:`yieldscape.schedule.simulate`, which stops at the first missed
period. Bisection assumes feasibility falls with H, which holds for a queue that always cuts in
the same order; the final level is re-run in full and its feasibility is checked, never
assumed. The other policies build on it (see each function).

:data:`SEARCHES` is this module's part of the flow-policy registry
(:data:`yieldscape.policies.FLOW_POLICIES`): one search per policy name.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field, replace
from typing import Protocol

import numpy as np

from yieldscape.policies import EvenFlow, Sequence, StepDown, Targets
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule.simulate import NO_RULES, HarvestRules, Simulation, simulate

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


def find_even_flow(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    rules: HarvestRules = NO_RULES,
    band: float = 0.0,
    ending_stock: float = 1.0,
    stable_periods: int = 0,
    fixed: tuple[float, ...] = (),
) -> FlowResult:
    """Bisection for the highest feasible even-flow level (see the module docstring).

    ``stable_periods`` adds the requirement that the harvestable growing stock does not fall
    over the last that many periods. With ``fixed`` the first periods take those harvests and
    the level applies to the periods after them (band not used).
    """

    def trial(level: float, record: bool = False) -> Simulation:
        rule = Sequence(fixed, level) if fixed else EvenFlow(level, band)
        return simulate(
            stands,
            curves,
            periods,
            rule,
            rules,
            ending_stock=ending_stock,
            stable_periods=stable_periods,
            record=record,
        )

    # U: what the first free period could yield if every eligible stand were cut, within the
    # area cap (later periods cannot hold more than that).
    upper = float(trial(float("inf"), record=True).harvest_m3[len(fixed)])
    zero = trial(0.0)
    steps = 2
    if not zero.feasible or upper <= 0:
        final = trial(0.0, record=True)
        return _result(0.0, periods, final, _why_none(zero, final, ending_stock), steps)
    top = trial(upper)
    steps += 1
    if top.feasible:
        final = trial(upper, record=True)
        return _result(upper, periods, final, _why_top(final, rules.max_area_ha), steps + 1)
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


def _why_none(zero: Simulation, final: Simulation, ending_stock: float) -> str:
    if not zero.feasible:
        return (
            f"no harvest at all is feasible: even without cutting, the ending growing "
            f"stock {final.ending_stock_m3:,.0f} m3 is below flow.ending_stock = "
            f"{ending_stock:g} x the initial {final.initial_stock_m3:,.0f} m3"
        )
    return "no stand is eligible for harvest in period 1"


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
    rules: HarvestRules = NO_RULES,
    step: float = 0.1,
    ending_stock: float = 1.0,
    stable_periods: int = 2,
) -> FlowResult:
    """The highest initial level held as long as possible, then stepped down by at most
    ``step`` a period to the long-term level.

    The long-term level is the highest even flow that leaves the harvestable growing stock
    stable over the last ``stable_periods`` periods (and meets the ending stock). Then, by
    bisection on the initial level H0 >= that level: H0 is feasible when some hold of k >= 1
    periods at H0 followed by the step-down is; the longest such k is found by bisection too
    (holding longer is never easier).
    """
    plain = replace(rules, snapshots=())  # the searches inside keep no parts
    base = find_even_flow(stands, curves, periods, plain, 0.0, ending_stock, stable_periods)
    lt = base.level_m3_per_period
    steps = base.steps

    def run(h0: float, hold: int, record: bool = False) -> Simulation:
        nonlocal steps
        steps += 1
        return simulate(
            stands,
            curves,
            periods,
            StepDown(h0, hold, step, lt),
            rules,
            ending_stock=ending_stock,
            stable_periods=stable_periods,
            record=record,
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

    every = simulate(stands, curves, periods, EvenFlow(float("inf")), rules, record=True)
    lo, hi = lt, max(float(every.harvest_m3[0]), lt)
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
    details = {
        "long_term_m3_per_period": lt,
        "hold_periods": float(best_hold),
        "step_down_max": step,
    }
    return FlowResult(lo, lo / periods.period_years, final, why, steps, "stepdown", details)


def run_targets(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    rules: HarvestRules = NO_RULES,
    targets: tuple[float, ...] = (),
    ending_stock: float = 1.0,
) -> FlowResult:
    """Explicit per-period targets: one run; shortfalls and the ending stock are reported."""
    sim = simulate(stands, curves, periods, Targets(tuple(targets)), rules, record=True)
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
    details = {"shortfall_m3": float(short.sum()), "periods_missed": float(len(missed))}
    return FlowResult(mean, mean / periods.period_years, sim, why, 1, "targets", details)


def find_nondeclining(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    rules: HarvestRules = NO_RULES,
    ending_stock: float = 1.0,
) -> FlowResult:
    """A non-declining flow built one period at a time (lexicographic max-min).

    Period 1 takes the highest even flow the whole horizon can hold; with it fixed, period 2
    takes the highest level periods 2..P can hold (never below period 1), and so on. Each
    period's harvest is thus the most that can be held from then on without a decline.
    """
    plain = replace(rules, snapshots=())  # the searches inside keep no parts
    first = find_even_flow(stands, curves, periods, plain, 0.0, ending_stock)
    fixed = [first.level_m3_per_period]
    steps = first.steps
    last = first
    for _ in range(1, periods.count):
        nxt = find_even_flow(stands, curves, periods, plain, 0.0, ending_stock, fixed=tuple(fixed))
        steps += nxt.steps
        fixed.append(max(nxt.level_m3_per_period, fixed[-1]))
        last = nxt
    final = simulate(
        stands,
        curves,
        periods,
        Sequence(tuple(fixed), fixed[-1]),
        rules,
        ending_stock=ending_stock,
        record=True,
    )
    if not final.feasible:
        raise RuntimeError(f"non-declining search ended infeasible ({final.fail_reason})")
    why = f"period 1: {first.binding}; the last period's level is limited by: {last.binding}"
    details = {"final_m3_per_period": fixed[-1]}
    return FlowResult(
        fixed[0], fixed[0] / periods.period_years, final, why, steps, "nondeclining", details
    )


class FlowSettings(Protocol):
    """What a search reads of the scenario's ``[flow]`` (config.FlowConfig has it all)."""

    band: float
    ending_stock: float
    step_down_max: float
    targets_m3: tuple[float, ...] | None
    long_term_periods: int | None


FlowSearch = Callable[[StandArrays, CurveSet, Periods, HarvestRules, FlowSettings], FlowResult]

# The searches of the flow-policy registry, by policy name (a test checks they match it).
SEARCHES: dict[str, FlowSearch] = {
    "even": lambda s, c, p, r, f: find_even_flow(s, c, p, r, f.band, f.ending_stock),
    "nondeclining": lambda s, c, p, r, f: find_nondeclining(s, c, p, r, f.ending_stock),
    "stepdown": lambda s, c, p, r, f: find_step_down(
        s, c, p, r, f.step_down_max, f.ending_stock, stable_periods_for(p, f.long_term_periods)
    ),
    "targets": lambda s, c, p, r, f: run_targets(s, c, p, r, f.targets_m3 or (), f.ending_stock),
}


def schedule(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    flow: FlowSettings,
    policy: str,
    rules: HarvestRules,
) -> FlowResult:
    """Run the flow ``policy``'s search over the stands under the harvest ``rules``."""
    return SEARCHES[policy](stands, curves, periods, rules, flow)
