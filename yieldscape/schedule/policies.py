"""Flow policies as target rules: for each period, the volume to aim for and the floor below
which the flow level fails, given the harvest of the period before.

- ``EvenFlow(level, band)``: period 1 takes the level; later periods aim at
  min(level, (1 + band) h_prev) and may not fall below (1 - band) h_prev.
- ``Sequence(fixed, level)``: the periods in ``fixed`` take those targets, every later one
  the level (a non-declining flow is built from these, one period at a time).
- ``StepDown(level, hold, step, long_term)``: the level for ``hold`` periods, then down by at
  most ``step`` (a fraction) per period until the long-term level, held to the end. The
  schedule is fixed in advance, so every period's target is also its floor.
- ``Targets(values)``: explicit per-period targets; a period takes what it can up to its target
  and never fails (shortfalls are reported).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray


@dataclass(frozen=True)
class EvenFlow:
    level: float
    band: float = 0.0

    def bounds(self, p: int, h_prev: float) -> tuple[float, float]:
        if p == 0:
            return self.level, self.level
        return min(self.level, (1 + self.band) * h_prev), (1 - self.band) * h_prev


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
