"""Stands x periods: the time grid, the per-stand arrays and standing volume, all vectorised.

Time runs in periods of ``period_years``; period p (1-based) covers the years
``start_year + (p-1) L`` up to, not including, ``start_year + p L``. Ages are kept at period
starts. The harvest of a period is taken at one moment inside it, set by
``scenario.harvest_timing``: at the start (offset 0), the midpoint (L/2) or the end (L). A stand
is eligible when its age at that moment is at least its minimum harvest age, and it yields the
curve's volume at that age. A cut stand restarts at age 0 after its regeneration delay, so at
the start of the next period it is ``L - offset - delay`` years old (negative while the delay
runs, and bare: volume 0).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from foresight.config import Scenario
from foresight.growth import YieldCurve, curve_from_config
from foresight.growth.rules import min_harvest_ages

TIMING_OFFSET = {"start": 0.0, "midpoint": 0.5, "end": 1.0}  # share of a period


@dataclass(frozen=True)
class Periods:
    """The time grid: ``count`` periods of ``period_years`` from ``start_year``."""

    start_year: int
    period_years: int
    count: int
    timing: str = "midpoint"

    @classmethod
    def from_scenario(cls, scenario: Scenario) -> Periods:
        s = scenario.scenario
        return cls(s.start_year, s.period_years, s.periods, s.harvest_timing)

    @property
    def offset_years(self) -> float:
        """Years from a period's start to the moment its harvest is taken."""
        return TIMING_OFFSET[self.timing] * self.period_years

    @property
    def start_years(self) -> NDArray[np.int64]:
        return self.start_year + self.period_years * np.arange(self.count)

    @property
    def end_years(self) -> NDArray[np.int64]:
        """Last calendar year inside each period."""
        return self.start_years + self.period_years - 1

    @property
    def harvest_years(self) -> NDArray[np.float64]:
        return self.start_years + self.offset_years


class CurveSet:
    """The yield curves of all species, evaluated for arrays of mixed species at once."""

    def __init__(self, codes: Sequence[str], curves: Sequence[YieldCurve]):
        self.codes = tuple(codes)
        self.curves = tuple(curves)

    @classmethod
    def from_scenario(cls, scenario: Scenario) -> CurveSet:
        codes = sorted(scenario.species)
        return cls(codes, [curve_from_config(scenario.species[c]) for c in codes])

    def index(self, species: Sequence[str] | NDArray) -> NDArray[np.int32]:
        """Species codes -> positions in :attr:`codes`."""
        lookup = {c: i for i, c in enumerate(self.codes)}
        return np.asarray(pd.Series(species).map(lookup).to_numpy(), dtype=np.int32)

    def volume_m3_ha(self, species_idx: NDArray, age_years: NDArray, site_index: NDArray
                     ) -> NDArray[np.float64]:
        """Volume [m3/ha] for each element; the loop runs over the few species, not stands."""
        out = np.zeros(np.shape(age_years), dtype=np.float64)
        for i, curve in enumerate(self.curves):
            mask = species_idx == i
            if mask.any():
                out[mask] = curve.volume_m3_ha(age_years[mask], site_index[mask])
        return out


@dataclass(frozen=True)
class StandArrays:
    """Per-stand arrays the projection and scheduler run on (one element per stand)."""

    species_idx: NDArray[np.int32]
    site_index: NDArray[np.float64]
    age_years: NDArray[np.float64]
    area_ha: NDArray[np.float64]
    min_harvest_age: NDArray[np.float64]
    regen_delay_years: NDArray[np.float64]
    id_rank: NDArray[np.int64]  # rank of the stand id, the tie-breaker of every priority rule

    @property
    def n(self) -> int:
        return len(self.area_ha)

    @classmethod
    def from_table(cls, stands: pd.DataFrame, scenario: Scenario, curves: CurveSet
                   ) -> StandArrays:
        """Build the arrays from a stand table with the standard columns."""
        idx = curves.index(stands["species"].to_numpy())
        site = stands["site_index"].to_numpy(dtype=np.float64)
        delay = np.array([scenario.species[c].regen_delay_years for c in curves.codes])
        min_age = np.zeros(len(stands))
        for i, code in enumerate(curves.codes):  # per species; rules run per distinct site
            mine = idx == i
            if mine.any():
                min_age[mine] = min_harvest_ages(scenario.species[code], curves.curves[i],
                                                 site[mine], scenario.economics,
                                                 scenario.growth)
        ids = stands["stand_id"].to_numpy()
        rank = np.empty(len(ids), dtype=np.int64)
        rank[np.argsort(ids, kind="stable")] = np.arange(len(ids))
        return cls(
            species_idx=idx,
            site_index=site,
            age_years=stands["age_years"].to_numpy(dtype=np.float64),
            area_ha=stands["area_ha"].to_numpy(dtype=np.float64),
            min_harvest_age=min_age,
            regen_delay_years=delay[idx].astype(np.float64),
            id_rank=rank,
        )


def growing_stock_m3(curves: CurveSet, species_idx: NDArray, age_years: NDArray,
                     site_index: NDArray, area_ha: NDArray) -> float:
    """Standing volume [m3] summed over stands (or stand parts)."""
    return float(np.dot(curves.volume_m3_ha(species_idx, age_years, site_index), area_ha))


def ages_by_period(age_years: NDArray, periods: Periods) -> NDArray[np.float64]:
    """Ages of unharvested stands at each period start and at the horizon end, shape (n, P+1)."""
    return age_years[:, None] + periods.period_years * np.arange(periods.count + 1)[None, :]
