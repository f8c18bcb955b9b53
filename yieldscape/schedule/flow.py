"""The flow searches: the highest flow level the rule-based scheduler can hold, per policy.

Even flow: the level H [m3 per period] lies in [0, U], where U is the volume eligible in
period 1 (period 1 must yield H, so no level above U can hold). Each trial runs the vectorised
simulation of :mod:`yieldscape.schedule.simulate`, which stops at the first missed floor. A
trial that gets to the end also says how far it is from failing there (its *margin*: the
ending growing stock above the requirement), so the search interpolates the level at which
the margin reaches zero (inverse quadratic through three trials, a secant through two, the
midpoint where neither lands inside the bracket or the bracket fails to halve in two steps, as
in Brent's method) and stops once the highest level that held and the lowest that failed are
within the tolerance: ``REL_TOL`` of the level or ``ABS_TOL_M3_PER_YEAR``, whichever is looser.
The search assumes feasibility falls with H, which holds for a queue that always cuts in the
same order (the sequential pick of the spatial rules can break it by a few m3 near the level;
then the level found holds and one within the tolerance above it failed, and no more is
claimed); the final level's run is recorded and its feasibility checked, never assumed. The
other policies build on it (see each function).

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
from yieldscape.schedule.simulate import NO_RULES, HarvestRules, Simulation, Start, simulate

# The search's tolerance: it stops when the level found (feasible) and the lowest level known
# to fail are within REL_TOL of the level or ABS_TOL_M3_PER_YEAR, whichever is looser; so the
# level found is feasible and, feasibility falling as the level rises, the level plus that
# tolerance is not (tests/schedule/test_flow_search.py checks both).
REL_TOL = 1e-4  # 0.01% of the level
ABS_TOL_M3_PER_YEAR = 1.0
MAX_STEPS = 80
# a trial expected to hold within this many tolerances of the lowest level known to fail is
# recorded (the run to keep should the search end on it; see _narrow)
RECORD_WITHIN = 2.0
PARTITION_TRIES = 10  # levels estimated in a row from a broken partition (see _Bracket)


def search_tolerance_m3(level_m3_per_period: float, period_years: float) -> float:
    """The search's tolerance [m3 per period] at a level [m3 per period]."""
    return max(REL_TOL * level_m3_per_period, ABS_TOL_M3_PER_YEAR * period_years)


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
    # management units (:mod:`yieldscape.schedule.stage`): their names, each one's level [m3
    # per period] (a unit on targets: its mean harvest) and what stops it going higher
    units: tuple[str, ...] = ()
    unit_levels_m3_per_period: tuple[float, ...] = ()
    unit_binding: tuple[str, ...] = ()


def find_even_flow(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    rules: HarvestRules = NO_RULES,
    band: float = 0.0,
    ending_stock: float = 1.0,
    stable_periods: int = 0,
    fixed: tuple[float, ...] = (),
    start: Start | None = None,
    record: bool = True,
) -> FlowResult:
    """The highest feasible even-flow level, to the search tolerance (see the module docstring).

    ``stable_periods`` adds the requirement that the harvestable growing stock does not fall
    over the last that many periods. With ``fixed`` the first periods take those harvests and
    the level applies to the periods after them (band not used). ``start``: the stands' parts
    at the start (:meth:`Start.of` these stands and curves), when the caller has them. With
    ``record=False`` (a search inside another, which keeps only the level) the result's
    simulation is the feasible trial at the level, its verdict and totals, not re-run recorded.
    """
    start = start if start is not None else Start.of(stands, curves)  # the same for every trial

    def trial(level: float, record: bool = False, stop: bool | None = None) -> Simulation:
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
            start=start,
            stop_early=stop,
        )

    # U: what the first free period could yield if every eligible stand were cut, within the
    # area cap (later periods cannot hold more than that). The run stops there, its floor
    # (inf) missed, or before it where the fixed periods fail (then U = 0 and so does every
    # level).
    upper = float(trial(float("inf")).harvest_m3[len(fixed)])
    # the lowest level asked for, feasible or nothing is (at least the largest amount a
    # partition must yield)
    base = fixed[-1] if fixed else least_level(rules)
    low = trial(base)
    steps = 2

    def kept(level: float, tried: Simulation) -> tuple[Simulation, int]:
        """The run to keep at the level found (tried there already) and the trial count."""
        return (trial(level, True), steps + 1) if record else (tried, steps)

    if not low.feasible or upper <= base:
        if fixed and low.feasible:  # nothing above the last fixed period: hold it
            final, steps = kept(base, low)
            return _result(
                base, periods, final, _why_top(final, rules.max_area_ha, len(fixed)), steps
            )
        if fixed:
            raise RuntimeError(f"flow search: the fixed periods fail ({low.fail_reason})")
        final, steps = kept(0.0, low)
        why = _why_none(low, final, ending_stock, base, least_partition(rules))
        return _result(0.0, periods, final, why, steps)
    top = trial(upper)
    steps += 1
    if top.feasible:
        final, steps = kept(upper, top)
        return _result(upper, periods, final, _why_top(final, rules.max_area_ha, len(fixed)), steps)
    margin = _Margin(ending_stock, stable_periods, periods.count)
    bracket = _Bracket(base, upper, low, top)
    bracket.add(base, margin(low), low)
    bracket.add(upper, margin(top), top)
    final, steps = _narrow(bracket, trial, margin, periods.period_years, steps, record)
    why = _why(bracket.hi_sim, bracket.hi, periods, ending_stock)
    return _result(bracket.lo, periods, final, why, steps)


def least_level(rules: HarvestRules) -> float:
    """The lowest level [m3 per period] that can keep the partitions' amounts: the largest
    ``min_m3`` (0 without partitions)."""
    parts = rules.partitions
    if parts is None or np.isnan(parts.min_m3).all():
        return 0.0
    return float(np.nanmax(parts.min_m3))


def least_partition(rules: HarvestRules) -> str:
    """The partition whose amount sets :func:`least_level` ("" for none)."""
    parts = rules.partitions
    if parts is None or np.isnan(parts.min_m3).all():
        return ""
    return parts.names[int(np.nanargmax(parts.min_m3))]


def _narrow(
    bracket: _Bracket,
    trial: Callable[[float, bool, bool | None], Simulation],
    margin: _Margin,
    period_years: float,
    steps: int,
    record: bool,
) -> tuple[Simulation, int]:
    """Narrow the bracket to the search tolerance; the run at its low end, checked feasible
    (recorded with ``record``), and the trial count.

    A level expected to hold near the top (within :data:`RECORD_WITHIN` tolerances of the
    lowest level known to fail) is tried recorded, stopping at a missed floor as the other
    trials do: should the search end on it, it is the run to keep. Recording a trial costs
    about what one more unrecorded trial does, and a recorded run of the level found after
    the search (where the trial at the level was not recorded) about two of them. Which
    trials are recorded changes no level tried."""

    def tol(level: float) -> float:
        return search_tolerance_m3(level, period_years)

    kept = None  # the recorded trial at the low end, if it was recorded
    while bracket.hi - bracket.lo > tol(bracket.lo) and steps < MAX_STEPS:
        level, below = bracket.next_level(tol(bracket.lo))
        # so is one that closes the bracket from above a broken partition (as likely to fail
        # as to hold so near the limit)
        beyond = bracket.hi in bracket.beyond and bracket.hi - level <= tol(level)
        near = record and (beyond or below and bracket.hi - level <= RECORD_WITHIN * tol(level))
        sim = trial(level, near, True if near else None)
        steps += 1
        bracket.add(level, margin(sim), sim)
        if near and sim.feasible:
            kept = sim
    if not record:
        final = bracket.lo_sim
    elif kept is not None and bracket.lo_sim is kept and bracket.hi - bracket.lo <= tol(bracket.lo):
        final = kept
    else:
        final = trial(bracket.lo, True)
        steps += 1
    if not final.feasible:  # a non-monotone case: never report an infeasible level
        raise RuntimeError(
            f"flow search ended on an infeasible level {bracket.lo} ({final.fail_reason})"
        )
    return final, steps


@dataclass(frozen=True)
class _Margin:
    """How far a trial horizon is from failing at its end [m3]: the ending growing stock above
    the requirement and, with stable periods, the growing stock on the harvestable land base
    above its value that many periods before the end, whichever is less (negative: it fails
    there); None for a horizon that missed a period's floor (it never got to the end)."""

    ending_stock: float
    stable_periods: int
    periods: int

    def __call__(self, sim: Simulation) -> float | None:
        if sim.fail_period is not None:
            return None
        out = sim.ending_stock_m3 - self.ending_stock * sim.initial_stock_m3
        if self.stable_periods > 0:
            ref = sim.hlb_stock_start_m3[self.periods - self.stable_periods]
            out = min(out, sim.ending_hlb_stock_m3 - ref)
        return float(out)


@dataclass
class _Bracket:
    """The levels bracketing the highest feasible one: ``lo`` feasible, ``hi`` not, the trials
    there, and every level tried whose horizon got to its end, with its margin (see
    :class:`_Margin`).

    The next level is where the margin crosses zero: interpolated (inverse quadratic) through
    the two ends and the latest other levels with a margin, linearly through two of them
    where a third is missing, or the midpoint where that falls outside the bracket, where
    fewer than two margins are known, or where the bracket did not halve over the last two
    steps (as in Brent's method). Once the estimate is near, the level tried is put a quarter
    of the tolerance past it, toward the farther end, so that one or two trials close the
    bracket.

    Where the bracket's top broke a partition limit (``Simulation.partition_break``), the
    estimate is where the partition's volume meets its limit instead: linearly through the
    two latest levels that broke the same limit in the same period, or, from one, the level
    scaled by limit / volume (a maximum) or volume / limit (a minimum), as a share limit
    scales with the level. (A horizon that keeps its partitions keeps them by about a stand's
    volume whatever its level, so only the trials beyond a limit say how far it is.) Those
    trials close in from above while the low end may not move, so the halving rule does not
    apply to them; after ``PARTITION_TRIES`` of them in a row without a level that holds,
    the rules above take over again.
    """

    lo: float
    hi: float
    lo_sim: Simulation
    hi_sim: Simulation
    margins: dict[float, float] = field(default_factory=dict)  # level -> margin, in order
    widths: list[float] = field(default_factory=list)
    # level -> (period, partition, volume, limit) of the trials that broke a partition limit
    beyond: dict[float, tuple[int, int, float, float]] = field(default_factory=dict)
    tries: int = 0  # levels estimated from the partition broken since the low end last moved

    def next_level(self, tol: float) -> tuple[float, bool]:
        """The next level to try, and whether it lies below the estimate (likely to hold)."""
        lo, hi = self.lo, self.hi
        self.widths.append(hi - lo)
        stalled = len(self.widths) > 2 and hi - lo > 0.5 * self.widths[-3]
        if hi in self.beyond and self.tries < PARTITION_TRIES:
            self.tries += 1
            guess = self._partition_estimate()
            if lo < guess < hi:  # from above, at least half the tolerance below the top;
                # within two of it, nine tenths below (closing the bracket if it holds)
                step = min(0.5 * tol, 0.25 * (hi - lo))
                if hi - guess < 2 * tol:
                    guess = hi - 0.9 * tol
                return max(min(guess, hi - step), lo + step), False
        else:
            guess = float("nan") if stalled else self._estimate()
        if not lo < guess < hi:
            return 0.5 * (lo + hi), False
        nearer_lo = guess - lo < hi - guess
        level = guess + (0.25 * tol if nearer_lo else -0.25 * tol)
        step = min(0.5 * tol, 0.25 * (hi - lo))
        level = min(max(level, lo + step), hi - step)
        return level, level < guess

    def _estimate(self) -> float:
        """Where the margin is zero, from the ends and the latest other levels tried."""
        pts = [x for x in (self.lo, self.hi) if x in self.margins]
        pts += [x for x in reversed(self.margins) if x not in (self.lo, self.hi)][: 3 - len(pts)]
        ms = [self.margins[x] for x in pts]
        if len(pts) == 3 and len(set(ms)) == 3:
            (x0, x1, x2), (f0, f1, f2) = pts, ms
            return (
                x0 * f1 * f2 / ((f0 - f1) * (f0 - f2))
                + x1 * f0 * f2 / ((f1 - f0) * (f1 - f2))
                + x2 * f0 * f1 / ((f2 - f0) * (f2 - f1))
            )
        if len(pts) >= 2 and ms[0] != ms[1]:
            (x0, x1), (f0, f1) = pts[:2], ms[:2]
            return x0 - f0 * (x1 - x0) / (f1 - f0)
        return float("nan")

    def _partition_estimate(self) -> float:
        """Where the volume of the partition the top broke meets its limit (see the class)."""
        period, k, v1, lim1 = self.beyond[self.hi]
        same = [x for x, b in reversed(self.beyond.items()) if b[:2] == (period, k)]
        if len(same) > 1:  # linearly, while both are well beyond the limit (not within a
            # stand or two of it, where which stand fits decides and the line says nothing)
            x0, (v0, lim0) = same[1], self.beyond[same[1]][2:]
            d0, d1 = v0 - lim0, v1 - lim1
            if min(abs(d0), abs(d1)) > 1e-3 * lim1 and d0 != d1:
                return x0 - d0 * (self.hi - x0) / (d1 - d0)
        if v1 <= 0 or lim1 <= 0:
            return float("nan")
        return self.hi * (lim1 / v1 if v1 > lim1 else v1 / lim1)

    def add(self, level: float, margin: float | None, sim: Simulation) -> None:
        if margin is not None:
            self.margins[level] = margin
        broke = getattr(sim, "partition_break", None)
        if not sim.feasible and broke is not None:
            self.beyond[level] = broke
        if sim.feasible:
            self.lo, self.lo_sim, self.tries = level, sim, 0
        else:
            self.hi, self.hi_sim = level, sim


def _why_none(
    zero: Simulation, final: Simulation, ending_stock: float, base: float = 0.0, by: str = ""
) -> str:
    """Why no level holds; ``zero``: the trial at the lowest level asked for, ``base`` (the
    amount of partition ``by``, or 0)."""
    if zero.fail_reason.startswith("partition") or (base > 0 and zero.fail_period):
        ask = f"at {base:,.0f} m3 per period (partition {by!r}'s min_m3), " if base > 0 else ""
        return f"no level is feasible: {ask}period {zero.fail_period} fails: {zero.fail_reason}"
    if not zero.feasible:
        return (
            f"no harvest at all is feasible: even without cutting, the ending growing "
            f"stock {final.ending_stock_m3:,.0f} m3 is below flow.ending_stock = "
            f"{ending_stock:g} x the initial {final.initial_stock_m3:,.0f} m3"
        )
    return "no stand is eligible for harvest in period 1"


def _why_top(sim: Simulation, max_area_ha: float | None, first: int = 0) -> str:
    """Why the level is the most the first free period (index ``first``: after the periods
    held fixed) can give: the area cap, or every stand eligible then cut."""
    p = first + 1
    if max_area_ha is not None and sim.harvest_ha[first] >= max_area_ha * (1 - 1e-9):
        return (
            f"period {p}: the area cap (harvest.max_area_ha_per_period = {max_area_ha:g} ha) "
            "is reached at this level"
        )
    return f"period {p}: every stand eligible in period {p} is cut at this level"


def _why(sim: Simulation, level: float, periods: Periods, ending_stock: float) -> str:
    higher = f"any level above {level:,.0f} m3 per period"
    if sim.fail_period is not None:
        year = periods.start_years[sim.fail_period - 1]
        if sim.fail_reason.startswith("partition"):
            return f"{higher} would fail in period {sim.fail_period} (from {year}): the " + (
                sim.fail_reason
            )
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
    """Periods over which the long-term level must hold the harvestable growing stock: the
    configured number, else a quarter of the horizon, at least 2 and at most the horizon."""
    if configured is not None:
        return configured
    return min(max(2, periods.count // 4), periods.count)


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
    bisection on the initial level H0 >= that level (to the search tolerance): H0 is feasible
    when some hold of k >= 1 periods at H0 followed by the step-down is; the longest such k is
    found by bisection too (holding longer is never easier).
    """
    plain = replace(rules, snapshots=())  # the searches inside keep no parts
    start = Start.of(stands, curves)
    base = find_even_flow(
        stands, curves, periods, plain, 0.0, ending_stock, stable_periods, start=start, record=False
    )
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
            start=start,
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

    every = simulate(stands, curves, periods, EvenFlow(float("inf")), rules, start=start)
    lo, hi = lt, max(float(every.harvest_m3[0]), lt)
    best_hold = periods.count
    while hi - lo > search_tolerance_m3(lo, periods.period_years):
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
    start = Start.of(stands, curves)
    first = find_even_flow(
        stands, curves, periods, plain, 0.0, ending_stock, start=start, record=False
    )
    fixed = [first.level_m3_per_period]
    steps = first.steps
    last = first
    for _ in range(1, periods.count):
        nxt = find_even_flow(
            stands,
            curves,
            periods,
            plain,
            0.0,
            ending_stock,
            fixed=tuple(fixed),
            start=start,
            record=False,
        )
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
        start=start,
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
