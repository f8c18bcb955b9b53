"""Flows of management units: each unit's even-flow level, found for that unit, while the rules
the units share (the area cap, cover targets, spatial rules across unit borders) hold for the
whole region.

One simulated horizon judges every unit at once (:class:`~yieldscape.policies.PerUnit`,
``HarvestRules.units``): each unit's floors and its own ending stock give it its own verdict and
margin. So the units' levels are searched side by side: every unit keeps its own bracket (as
the single-flow search of :mod:`yieldscape.schedule.flow` does, with the same tolerance and
interpolation), each trial runs every unit whose bracket is still open at its next level and
every other at the level it has found, and a unit's bracket closes at that unit's tolerance.
Units that share no rule do not affect each other, and each finds the level of its own search
run alone; with shared rules the units take their cuts in turn each period (in unit order: the
first unit's cuts are made first against the shared cap and budgets), so a unit's verdict can
depend on the others' levels. The levels found are checked together in a recorded run; a unit
that fails there (a later unit's level took what it needed) is searched again below its level
with the others held, at most :data:`MAX_ROUNDS` times.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import NDArray

from yieldscape.policies import EvenFlow, PerUnit, TargetRule, Targets
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule.flow import (
    MAX_STEPS,
    PARTITION_TRIES,
    _Bracket,
    least_level,
    search_tolerance_m3,
)
from yieldscape.schedule.simulate import HarvestRules, Simulation, Start, simulate

MAX_ROUNDS = 3


class NoUnitFlows(RuntimeError):
    """The units' levels found fail together; ``simulation`` is the recorded run at them."""

    def __init__(self, message: str, simulation: Simulation) -> None:
        super().__init__(message)
        self.simulation = simulation


@dataclass(frozen=True)
class UnitPolicy:
    """A unit's flow for the rule-based search: ``even`` (the level searched, with a band) or
    ``targets`` (fixed targets per period, no search), and its ending-stock share."""

    name: str
    policy: str = "even"
    band: float = 0.0
    ending_stock: float = 1.0
    targets_m3: tuple[float, ...] = ()

    def rule(self, level: float) -> TargetRule:
        if self.policy == "targets":
            return Targets(self.targets_m3)
        return EvenFlow(level, self.band)


@dataclass(frozen=True)
class UnitFlows:
    """The units' levels [m3 per period] (targets units: 0), the run at those levels
    (recorded unless the search was asked not to), the trial count and, per unit, what stops
    it going higher."""

    levels_m3: NDArray
    simulation: Simulation
    steps: int
    binding: list[str]


def find_unit_flows(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    rules: HarvestRules,
    units: Sequence[UnitPolicy],
    start: Start | None = None,
    *,
    record: bool = True,
) -> UnitFlows:
    """The highest feasible level of each even-flow unit, to the search tolerance, under the
    units' shared rules (see the module docstring). ``rules.units`` names each stand's unit
    (codes in the order of ``units``). With ``record=False`` (a search inside another) the
    result's simulation is the check of the levels found, its verdict and totals only."""
    if rules.units is None:
        raise ValueError("find_unit_flows needs HarvestRules.units")
    for u in units:
        if u.policy not in ("even", "targets"):
            raise ValueError(
                f"unit {u.name!r}: flow policy {u.policy!r} is not searched per unit "
                "(even or targets)"
            )
    start = start if start is not None else Start.of(stands, curves)
    shares = np.array([u.ending_stock for u in units])
    U = len(units)
    steps = 0

    def trial(
        levels: NDArray, record: bool = False, under: HarvestRules = rules, stop: bool = False
    ) -> Simulation:
        nonlocal steps
        steps += 1
        rule = PerUnit(tuple(u.rule(float(x)) for u, x in zip(units, levels, strict=True)))
        return simulate(
            stands,
            curves,
            periods,
            rule,
            under,
            ending_stock=shares,
            record=record,
            start=start,
            stop_early=stop or None,
        )

    searched = np.array([u.policy == "even" for u in units])
    levels, why = np.zeros(U), [""] * U
    final: Simulation | None = None
    if rules.partitions is not None:  # a regional rule whose breach fails every unit
        free = find_unit_flows(
            stands, curves, periods, replace(rules, partitions=None), units, start, record=False
        )
        levels, why, final = _scaled(trial, free.levels_m3, searched, periods, shares)
        steps += free.steps
    for _ in range(MAX_ROUNDS):
        if final is not None and _holds(final)[searched].all():
            break
        open_ = searched if final is None else searched & ~_holds(final)
        levels, found, last = _search(
            trial, rules, levels, open_, periods, shares, final is None, record
        )
        why = [f if o else w for f, w, o in zip(found, why, open_, strict=True)]
        final = last if last is not None else trial(levels, record)
    assert final is not None
    if not _holds(final)[searched].all():
        bad = [units[u].name for u in np.flatnonzero(~_holds(final) & searched)]
        # the whole recorded run (a search's trial may be unrecorded or stopped early)
        final = trial(levels, True)
        raise NoUnitFlows(f"unit flow search: units {bad} fail at the levels found", final)
    return UnitFlows(levels, final, steps, why)


def _scaled(
    trial,  # noqa: ANN001 - (levels, record) -> Simulation
    free: NDArray,
    searched: NDArray,
    periods: Periods,
    shares: NDArray,
) -> tuple[NDArray, list[str], Simulation]:
    """The searched units' levels without the partitions (``free``) scaled by the highest
    common factor at which every unit holds with them (a bracket on the factor, to the
    search tolerance on the units' total, which interpolates on the partition broken as the
    single flow's does); the levels, why and the recorded run. The factor 0 (no harvest of
    the searched units) is tried only after ``PARTITION_TRIES`` trials in a row beyond a
    partition with none held."""
    total = float(free[searched].sum())

    def levels_at(x: float) -> NDArray:
        return np.where(searched, x * free, free)

    def view(sim: Simulation) -> _AllView:
        return _AllView(sim, bool(_holds(sim)[searched].all()))

    def margin(sim: Simulation) -> float | None:
        if sim.unit_fail_period[searched].any():
            return None
        got = sim.unit_ending_stock_m3 - shares * sim.unit_initial_stock_m3
        return float(got[searched].min())

    top = trial(levels_at(1.0))
    if view(top).feasible or total <= 0:
        return levels_at(1.0), ["" for _ in free], trial(levels_at(1.0), True)
    b = _Bracket(0.0, 1.0, top, view(top))  # (top: a placeholder at 0, not tried yet)
    b.add(1.0, margin(top), view(top))
    final = None

    def tol(x: float) -> float:  # the search tolerance at factor x, as a factor
        return search_tolerance_m3(x * total, periods.period_years) / total

    zero = False  # whether the factor 0 was tried
    for _ in range(MAX_STEPS):
        if b.hi - b.lo <= tol(b.lo):
            break
        if not zero and b.lo == 0 and b.tries >= PARTITION_TRIES:  # nothing holds so far:
            zero = True  # does anything? (if not, the bracket closes at 0 at once)
            sim = trial(levels_at(0.0))
            b.add(0.0, margin(sim), view(sim))
            continue
        # placed with the tolerance at the top while nothing below it has held yet (at the
        # low end's, 0, it would be the absolute one, too fine to close the bracket in one)
        x, below = b.next_level(tol(b.lo if b.lo > 0 else b.hi))
        # a trial that closes the bracket if it holds is recorded, to keep (stopping at a
        # miss: below a broken partition as likely to fail as to hold)
        last = (below or b.hi in b.beyond) and b.hi - x <= tol(x)
        sim = trial(levels_at(x), last, stop=True)
        b.add(x, margin(sim), view(sim))
        final = sim if last and view(sim).feasible else None
    if final is None or b.hi - b.lo > tol(b.lo):
        final = trial(levels_at(b.lo), True)
    s = b.hi_sim.sim if isinstance(b.hi_sim, _AllView) else b.hi_sim
    why = (
        f"the partitions: every unit's level is {100 * (1 - b.lo):.2f}% below its level "
        f"without them (any higher, {s.fail_reason or 'a unit fails'})"
    )
    return levels_at(b.lo), [why if k else "" for k in searched], final


class _AllView:
    """Whether every searched unit held in a trial, as the bracket reads ``feasible``."""

    def __init__(self, sim: Simulation, feasible: bool) -> None:
        self.sim, self.feasible = sim, feasible
        self.partition_break = sim.partition_break


def _holds(sim: Simulation) -> NDArray[np.bool_]:
    return sim.unit_feasible


def _search(
    trial,  # noqa: ANN001 - (levels, record) -> Simulation
    rules: HarvestRules,
    levels: NDArray,
    open_: NDArray,
    periods: Periods,
    shares: NDArray,
    first: bool,
    record: bool = True,
) -> tuple[NDArray, list[str], Simulation | None]:
    """Narrow the brackets of the ``open_`` units side by side, the others held at
    ``levels``; the levels found, per unit what binds, and the last trial where it ran at
    exactly those levels (recorded with ``record``: a trial expected to close every open
    bracket at the level it holds is recorded), else None. In the first round a unit's
    bracket reaches up to what its first period yields with every eligible stand of it cut
    (without the shared rules); in a later round up to the level at which it failed."""
    U = len(levels)
    levels = levels.copy()
    why = ["" for _ in range(U)]
    upper = levels.copy()
    if first and open_.any():  # one short trial (every unit fails in period 1) without the
        # shared rules: each open unit's whole eligible volume of period 1, which no level of
        # it can pass
        alone = replace(rules, max_area_ha=None, spatial=None, cover=None, partitions=None)
        loose = trial(np.where(open_, np.inf, levels), False, alone)
        upper = np.where(open_, loose.unit_harvest_m3[0], levels)
    least = least_level(rules) / max(int(open_.sum()), 1)  # the open units share it alike
    low, top = trial(np.where(open_, least, levels)), trial(upper)
    brackets: dict[int, _Bracket] = {}
    for u in np.flatnonzero(open_):
        lo_view, hi_view = _UnitView(low, u), _UnitView(top, u)
        if not lo_view.feasible or upper[u] <= 0:
            levels[u], why[u] = 0.0, "no harvest is feasible for this unit"
        elif hi_view.feasible:
            levels[u], why[u] = upper[u], "every stand eligible in period 1 is cut"
        else:
            b = _Bracket(least, float(upper[u]), lo_view, hi_view)
            b.add(least, _margin(low, u, shares), lo_view)
            b.add(float(upper[u]), _margin(top, u, shares), hi_view)
            brackets[u] = b

    def tol(b: _Bracket) -> float:
        return search_tolerance_m3(b.lo, periods.period_years)

    last, closing = None, False
    for _ in range(MAX_STEPS):
        live = {u: b for u, b in brackets.items() if b.hi - b.lo > tol(b)}
        if not live:
            break
        ask, closing = levels.copy(), True
        for u, b in brackets.items():
            if u in live:
                ask[u], below = b.next_level(tol(b))
                closing &= below and b.hi - ask[u] <= tol(b)
            else:
                ask[u] = b.lo
        last = sim = trial(ask, record and closing, stop=True)
        for u, b in live.items():
            b.add(float(ask[u]), _margin(sim, u, shares), _UnitView(sim, u))
    for u, b in brackets.items():
        levels[u], why[u] = b.lo, _why(b.hi_sim, u)
    if last is None or not np.array_equal(ask, levels) or (record and not closing):
        last = None
    return levels, why, last


class _UnitView:
    """One unit's verdict of a trial, as the bracket reads a horizon's (``feasible``)."""

    def __init__(self, sim: Simulation, u: int) -> None:
        self.sim, self.u = sim, u
        self.feasible = bool(sim.unit_feasible[u])
        self.partition_break = sim.partition_break


def _margin(sim: Simulation, u: int, shares: NDArray) -> float | None:
    """Unit u's ending stock above its requirement [m3]; None where it missed a floor."""
    if sim.unit_fail_period[u]:
        return None
    return float(sim.unit_ending_stock_m3[u] - shares[u] * sim.unit_initial_stock_m3[u])


def _why(sim: Simulation | _UnitView, u: int) -> str:
    s = sim.sim if isinstance(sim, _UnitView) else sim
    if s.unit_fail_period[u]:
        return f"a higher level fails in period {s.unit_fail_period[u]}: {s.unit_fail_reason[u]}"
    return "a higher level leaves the unit's ending growing stock below its requirement"
