"""Cover targets per zone: old-forest retention and young-forest limits, as per-period budgets.

A rule applies to one zone or to all (``"*"``) and is judged on all forested area of the zone
(harvestable or not) at each period's harvest moment, after the period's cut:

- ``older_than_years`` + ``min_share``: area at least that old >= min_share x zone area;
- ``younger_than_years`` + ``max_share``: area younger than that <= max_share x zone area
  (a cut stand restarts at age 0, so every cut of a stand that is not already young adds).

At the start of a period's pick each rule has a budget: the old area above its floor, or the
young area left below its ceiling. A cut that would overdraw a budget is skipped and the next
stand taken. A budget already overdrawn by growth alone (too little old forest to begin with)
forbids every cut that draws on it, and the shortfall shows in the ``cover`` table.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from yieldscape.config import CoverTarget
from yieldscape.errors import InputError

_REL = 1e-9


@dataclass(frozen=True)
class CoverRule:
    zone: int  # zone code; -1: every zone together
    zone_name: str
    kind: str  # "old" | "young"
    age_years: float
    share: float

    def counts(self, age: NDArray) -> NDArray:
        """Whether area of these ages counts toward the rule (old enough, or still young)."""
        if self.kind == "old":
            return age >= self.age_years - 1e-9
        return age < self.age_years - 1e-9

    @property
    def label(self) -> str:
        if self.kind == "old":
            return f"older than {self.age_years:g} y >= {self.share:.0%}"
        return f"younger than {self.age_years:g} y <= {self.share:.0%}"


@dataclass(frozen=True)
class CoverRules:
    rules: tuple[CoverRule, ...]
    zone_area: NDArray  # gross area per zone code [ha]

    def area_of(self, rule: CoverRule) -> float:
        return float(self.zone_area.sum() if rule.zone < 0 else self.zone_area[rule.zone])

    def measure(self, zone: NDArray, age: NDArray, area: NDArray) -> NDArray:
        """Old or young area of each rule, for parts with these zones, ages, areas."""
        out = np.zeros(len(self.rules))
        for i, r in enumerate(self.rules):  # a handful of rules
            inz = np.ones(len(zone), bool) if r.zone < 0 else zone == r.zone
            out[i] = float(area[inz & r.counts(age)].sum())
        return out

    def budgets(
        self, cand_zone: NDArray, cand_age: NDArray, zone: NDArray, age: NDArray, area: NDArray
    ) -> PeriodBudgets:
        now = self.measure(zone, age, area)
        budget = np.array(
            [
                now[i] - r.share * self.area_of(r)
                if r.kind == "old"
                else r.share * self.area_of(r) - now[i]
                for i, r in enumerate(self.rules)
            ]
        )
        return PeriodBudgets(self, budget, cand_zone, cand_age)


class PeriodBudgets:
    """The budgets of one period's pick (the rule interface of the sequential picker)."""

    name = "the cover targets"  # in messages

    def __init__(self, rules: CoverRules, budget: NDArray, cand_zone: NDArray, cand_age: NDArray):
        self.rules, self.budget = rules, budget
        self.cand_zone, self.cand_age = cand_zone, cand_age
        self._draw: list[tuple[int, float]] = []

    def begin(self, t: float) -> None:
        pass

    def allows(self, k: int, s: int, full_area: float, a: float) -> bool:
        draws = []
        for i, r in enumerate(self.rules.rules):
            if r.zone >= 0 and self.cand_zone[k] != r.zone:
                continue
            # cutting draws on an old-forest budget when the stand is old, and on a young-forest
            # budget when it is not young yet (it becomes young)
            counted = bool(r.counts(np.asarray(self.cand_age[k])))
            if counted == (r.kind == "old"):
                if a > self.budget[i] + _REL * max(1.0, self.rules.area_of(r)):
                    return False
                draws.append((i, a))
        self._draw = draws
        return True

    def commit(self, k: int, s: int, a: float) -> None:
        for i, used in self._draw:
            self.budget[i] -= used

    def end(self) -> None:
        pass

    def draws(self) -> NDArray[np.bool_]:
        """Which budgets a cut of each candidate draws on (candidates x rules), as
        :meth:`allows` decides it one candidate at a time."""
        rules = self.rules.rules
        out = np.zeros((len(self.cand_zone), len(rules)), dtype=bool)
        for i, r in enumerate(rules):
            inz = np.ones(len(self.cand_zone), bool) if r.zone < 0 else self.cand_zone == r.zone
            out[:, i] = inz & (r.counts(self.cand_age) == (r.kind == "old"))
        return out

    def tolerance(self) -> NDArray[np.float64]:
        """How far a cut may overdraw each budget (float rounding) [ha], as in :meth:`allows`."""
        return np.array([_REL * max(1.0, self.rules.area_of(r)) for r in self.rules.rules])


def cover_rules(
    targets: Sequence[CoverTarget], zone_names: list, zone_codes: NDArray, area_ha: NDArray
) -> CoverRules | None:
    """The ``[[cover]]`` targets over the stands' zones (names and per-stand codes, see
    :func:`yieldscape.projection.zone_codes`); a target naming an unknown zone is an error."""
    if not targets:
        return None
    area = np.bincount(zone_codes, area_ha, len(zone_names))
    rules = []
    for n, t in enumerate(targets, start=1):
        if t.zone != "*" and t.zone not in zone_names:
            raise InputError(
                f"[[cover]] #{n}: zone {t.zone!r} is not a zone of the stands; "
                f"their zones: {', '.join(z for z in zone_names if z) or '(none)'}"
            )
        code = -1 if t.zone == "*" else zone_names.index(t.zone)
        rules.append(CoverRule(code, t.zone, t.kind, t.age_years, t.share))
    return CoverRules(tuple(rules), area)


def cover_report(cover: CoverRules, cover_area_ha: NDArray, periods: int) -> pd.DataFrame:
    """Per period and target: the share reached after the period's cut (from a recorded
    simulation's ``cover_area_ha``), and whether it holds."""
    rows = []
    for i, r in enumerate(cover.rules):
        share = cover_area_ha[:, i] / cover.area_of(r)
        met = share >= r.share - 1e-9 if r.kind == "old" else share <= r.share + 1e-9
        rows.append(
            pd.DataFrame(
                {
                    "period": np.arange(1, periods + 1),
                    "zone": r.zone_name,
                    "rule": r.label,
                    "target": r.share,
                    "share": share,
                    "met": met,
                }
            )
        )
    return pd.concat(rows, ignore_index=True)
