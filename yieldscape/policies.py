"""The scheduler's choices, each kind in one registry: flow policies and priority rules.

A registry entry is what the scenario may name (``flow.policy``, ``harvest.priority``), its
words in messages and the report, and the numbers that make it work. The scenario's checks,
the docs test, the report and the scheduler all read these tables, so a new choice is named
once. Where a choice needs more (a flow policy's level search in ``schedule/flow.py``, its rows
in the harvest LP ``schedule/lp.py``), those modules keep a table keyed by the same names, and
a test checks that they cover this registry exactly.

Flow policies work through *target rules*: for each period, the volume to aim for and the
floor below which the flow level fails, given the harvest of the period before.

- ``EvenFlow(level, band)``: period 1 takes the level; later periods aim at
  min(level, (1 + band) h_prev) and may not fall below (1 - band) min(h_prev, level) (a
  harvest above the level, which mandatory thinnings can bring, raises no floor).
- ``Sequence(fixed, level)``: the periods in ``fixed`` take those targets, every later one
  the level (a non-declining flow is built from these, one period at a time).
- ``StepDown(level, hold, step, long_term)``: the level for ``hold`` periods, then down by at
  most ``step`` (a fraction) per period until the long-term level, held to the end. The
  schedule is fixed in advance, so every period's target is also its floor.
- ``Targets(values)``: explicit per-period targets; a period takes what it can up to its target
  and never fails (shortfalls are reported).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Protocol

import numpy as np
from numpy.typing import NDArray


# ----------------------------------------------------------------------------- target rules
class TargetRule(Protocol):
    def bounds(self, p: int, h_prev: float) -> tuple[float, float]:
        """(target, floor) [m3] of period ``p`` (0-based) after a harvest ``h_prev``."""
        ...


@dataclass(frozen=True)
class EvenFlow:
    level: float
    band: float = 0.0

    def bounds(self, p: int, h_prev: float) -> tuple[float, float]:
        if p == 0:
            return self.level, self.level
        # the floor follows the previous harvest, but never above the level: thinnings, which
        # are taken whatever the target, may carry a period's harvest past it
        floor = (1 - self.band) * min(h_prev, self.level)
        return min(self.level, (1 + self.band) * h_prev), floor


@dataclass(frozen=True)
class Sequence:
    fixed: tuple[float, ...]
    level: float

    def bounds(self, p: int, h_prev: float) -> tuple[float, float]:
        v = self.fixed[p] if p < len(self.fixed) else self.level
        return v, v


@dataclass(frozen=True)
class StepDown:
    level: float
    hold: int
    step: float
    long_term: float

    def schedule(self, periods: int) -> NDArray[np.float64]:
        out = np.empty(periods)
        v = self.level
        for p in range(periods):  # a handful of periods, not stands
            if p >= self.hold:
                v = max(self.long_term, v * (1 - self.step))
            out[p] = v
        return out

    def bounds(self, p: int, h_prev: float) -> tuple[float, float]:
        v = float(self.schedule(p + 1)[p])
        return v, v


@dataclass(frozen=True)
class Targets:
    values: tuple[float, ...]

    def bounds(self, p: int, h_prev: float) -> tuple[float, float]:
        return float(self.values[p]), 0.0


@dataclass(frozen=True)
class FixedTargets(Targets):
    """Fixed targets that are also floors (explicit schedules, tests)."""

    def bounds(self, p: int, h_prev: float) -> tuple[float, float]:
        v = float(self.values[p])
        return v, v


@dataclass(frozen=True)
class PerUnit:
    """One target rule per management unit, in unit order: each unit's target and floor
    from its own rule and its own harvest of the period before."""

    rules: tuple[TargetRule, ...]

    def bounds_units(self, p: int, h_prev: NDArray) -> tuple[NDArray, NDArray]:
        """Per unit (target, floor) [m3] of period ``p`` after the units' harvests ``h_prev``."""
        pairs = [r.bounds(p, float(h)) for r, h in zip(self.rules, h_prev, strict=True)]
        return np.array([t for t, _ in pairs]), np.array([f for _, f in pairs])


# ----------------------------------------------------------------------------- flow policies
@dataclass(frozen=True)
class FlowPolicy:
    """A flow policy: its name in the scenario, its words, what its level means, and whether
    the harvest LP models it (``schedule/lp.py`` then has its flow rows)."""

    name: str
    label: str  # "even flow": in headlines, tables and the report
    level_means: str = ""  # what a run's one level figure is, where the harvest varies
    in_lp: bool = False  # the LP bounds it beside a rule-based run and may schedule it
    takes_targets: bool = False  # a period must take its target (else: not fall below a floor)

    @property
    def level_label(self) -> str:
        """The policy and what its level figure is: "non-declining flow, period 1"."""
        return f"{self.label}, {self.level_means}" if self.level_means else self.label


FLOW_POLICIES: dict[str, FlowPolicy] = {
    p.name: p
    for p in (
        FlowPolicy("even", "even flow", in_lp=True),
        FlowPolicy("nondeclining", "non-declining flow", "period 1", in_lp=True),
        FlowPolicy("stepdown", "step-down flow", "initial level"),
        FlowPolicy("targets", "target schedule", "mean harvest", takes_targets=True),
    )
}
# the LP's schedule mapped onto stands (flow.method = "optimize") reports as this policy
OPTIMIZED = FlowPolicy("optimize", "optimised (LP) flow", "period 1", takes_targets=True)


def flow_policy(name: str) -> FlowPolicy:
    """The registry entry of a run's policy (``optimize`` for the LP's schedule)."""
    return OPTIMIZED if name == OPTIMIZED.name else FLOW_POLICIES[name]


# ----------------------------------------------------------------------------- priorities
# key(age_at_harvest_years, min_harvest_age_years, volume_m3_ha) -> priority, higher first
PriorityKey = Callable[[NDArray, NDArray, NDArray], NDArray]


@dataclass(frozen=True)
class Priority:
    """A priority rule: the order in which eligible stands are cut (ties by stand id)."""

    name: str
    label: str
    key: PriorityKey
    by_volume: bool = False  # the key reads the volume (else it is worked out only where cut)


PRIORITIES: dict[str, Priority] = {
    p.name: p
    for p in (
        Priority("oldest", "oldest stand first", lambda age, min_age, vol: age),
        Priority(
            "relative_oldest",
            "largest age above the species' minimum harvest age first",
            lambda age, min_age, vol: age - min_age,
        ),
        Priority(
            "highest_volume",
            "highest volume per hectare first",
            lambda a, m, vol: vol,
            by_volume=True,
        ),
    )
}


def cut_order(
    rule: str,
    age: NDArray,
    min_age: NDArray,
    vol: NDArray,
    id_rank: NDArray,
    first: NDArray | None = None,
    key: NDArray | None = None,
) -> NDArray[np.intp]:
    """Positions sorted by the rule's key, descending, ties broken by ascending stand id.

    ``first`` (an integer rank per position, such as a plan's) puts lower ranks ahead of
    higher ones, the rule ordering each rank; ``key`` (higher first) replaces the rule's.
    """
    if key is None:
        key = PRIORITIES[rule].key(age, min_age, vol)
    if first is None:
        return np.lexsort((id_rank, -key))
    return np.lexsort((id_rank, -key, first))
