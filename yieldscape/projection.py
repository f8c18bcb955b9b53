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

from yieldscape.config import Scenario
from yieldscape.growth import TableYield, YieldCurve
from yieldscape.growth.curves import _Parametric
from yieldscape.growth.rules import Search, max_mai, min_harvest_ages
from yieldscape.regimes import Regimes

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


@dataclass(frozen=True)
class SiteTerms:
    """Per-element terms that place a stand on its species' tabulated curve (see CurveSet).

    ``row``: the table row (the species, or its lower site class); ``scale_v``, ``scale_t``:
    the site scheme's rho_a and rho_k (1 for tables); ``blend``: weight of the next row up
    (site-class tables; 0 otherwise).
    """

    row: NDArray[np.intp]
    scale_v: NDArray[np.float64]
    scale_t: NDArray[np.float64]
    blend: NDArray[np.float64]

    def take(self, idx: NDArray) -> SiteTerms:
        return SiteTerms(self.row[idx], self.scale_v[idx], self.scale_t[idx], self.blend[idx])

    def append(self, idx: int) -> SiteTerms:
        return SiteTerms(
            np.r_[self.row, self.row[idx]],
            np.r_[self.scale_v, self.scale_v[idx]],
            np.r_[self.scale_t, self.scale_t[idx]],
            np.r_[self.blend, self.blend[idx]],
        )


class CurveSet:
    """The yield curves of all species, evaluated for arrays of mixed species at once.

    The projection evaluates the same few curves hundreds of millions of times, so every curve
    (every site class of a table) is tabulated once, as one row of a single table on a uniform
    age grid (``step_years``, 1/16 year), and read back by linear interpolation: one gather
    for all species, no per-species masks. Grid nodes hold the exact curve values, so ages on
    the grid (whole and half years, wherever site does not speed time up) come out exact;
    between nodes linear interpolation errs by at most h^2/8 max|V''| (h = step): under
    5e-4 m3/ha for any curve whose CAI changes by less than 1 m3/ha/yr from one year to the
    next. Site enters through :class:`SiteTerms` worked out once per stand: the factors
    (rho_a, rho_k) of the site scheme, or the lower site class and the weight between classes.
    Ages beyond the grid (``max_age_years``) are evaluated with the exact formula.
    """

    def __init__(
        self,
        codes: Sequence[str],
        curves: Sequence[YieldCurve],
        max_age_years: float = 1000.0,
        step_years: float = 1 / 16,
    ):
        self.codes = tuple(codes)
        self.curves = tuple(curves)
        self.step = float(step_years)
        self.grid = np.arange(0.0, max_age_years + step_years / 2, step_years)
        rows, self._first_row = [], []
        for curve in self.curves:
            self._first_row.append(sum(len(r) for r in rows))
            if isinstance(curve, _Parametric):
                rows.append(curve.reference(self.grid)[None, :])
            elif isinstance(curve, TableYield):
                rows.append(
                    np.stack(
                        [
                            curve.volume_m3_ha(self.grid, np.full(self.grid.shape, c))
                            for c in curve.site_classes_m
                        ]
                    )
                )
            else:
                raise TypeError(f"cannot tabulate a curve of type {type(curve).__name__}")
        table = np.vstack(rows)
        self._values = np.ascontiguousarray(table[:, :-1]).ravel()
        self._diffs = np.diff(table, axis=1).ravel()
        self._cols = table.shape[1] - 1

    @classmethod
    def from_scenario(cls, scenario: Scenario, max_age_years: float = 1000.0) -> CurveSet:
        codes = sorted(scenario.species)
        return cls(
            codes,
            [scenario.species[c].yield_curve() for c in codes],
            max_age_years=max_age_years,
        )

    def first_row(self, i: int) -> int:
        """Row of code ``i``'s lowest site class in the tabulated curves."""
        return self._first_row[i]

    def index(self, species: Sequence[str] | NDArray) -> NDArray[np.int32]:
        """Species codes -> positions in :attr:`codes`."""
        lookup = {c: i for i, c in enumerate(self.codes)}
        return np.asarray(pd.Series(species).map(lookup).to_numpy(), dtype=np.int32)

    def site_terms(self, species_idx: NDArray, site_index: NDArray) -> SiteTerms:
        """The :class:`SiteTerms` of each element, worked out once per stand."""
        site_index = np.asarray(site_index, dtype=np.float64)
        n = len(site_index)
        row = np.zeros(n, dtype=np.intp)
        scale_v, scale_t, blend = np.ones(n), np.ones(n), np.zeros(n)
        present = np.bincount(species_idx, minlength=len(self.curves)) > 0
        for i in np.flatnonzero(present):  # per species, not per stand
            curve = self.curves[i]
            mask = species_idx == i
            si = site_index[mask]
            if isinstance(curve, _Parametric):
                row[mask] = self._first_row[i]
                scale_v[mask], scale_t[mask] = curve.site.factors(si)
            else:
                classes = np.asarray(curve.site_classes_m)  # type: ignore[attr-defined]
                if len(classes) == 1:
                    row[mask] = self._first_row[i]
                    continue
                c = np.clip(si, classes[0], classes[-1])
                hi = np.clip(np.searchsorted(classes, c, side="right"), 1, len(classes) - 1)
                row[mask] = self._first_row[i] + hi - 1
                blend[mask] = (c - classes[hi - 1]) / (classes[hi] - classes[hi - 1])
        return SiteTerms(row, scale_v, scale_t, blend)

    def volume_m3_ha(
        self,
        species_idx: NDArray,
        age_years: NDArray,
        site_index: NDArray | None = None,
        terms: SiteTerms | None = None,
    ) -> NDArray[np.float64]:
        """Volume [m3/ha] for each element, from site index or precomputed site terms."""
        age_years = np.asarray(age_years, dtype=np.float64)
        if terms is None:
            terms = self.site_terms(species_idx, np.broadcast_to(site_index, age_years.shape))
        scaled = np.maximum(age_years, 0.0) * terms.scale_t
        pos = scaled * (1.0 / self.step)
        j = pos.astype(np.intp)
        np.minimum(j, self._cols - 1, out=j)
        pos -= j  # now the fraction between grid nodes
        flat = terms.row * self._cols + j
        v = self._values[flat] + pos * self._diffs[flat]
        mixed = np.flatnonzero(terms.blend > 0)
        if len(mixed):  # site-class tables: blend with the next class up
            up = flat[mixed] + self._cols
            v[mixed] += terms.blend[mixed] * (
                self._values[up] + pos[mixed] * self._diffs[up] - v[mixed]
            )
        v *= terms.scale_v
        v[age_years < 0] = 0.0
        if len(scaled) and scaled.max() > self.grid[-1]:  # past the grid: the exact curve
            beyond = np.flatnonzero(scaled > self.grid[-1])
            for i, curve in enumerate(self.curves):
                # tables are flat past their last age, which the grid covers: their grid
                # value stands; parametric curves go on changing and are evaluated exactly
                if isinstance(curve, _Parametric):
                    mine = beyond[species_idx[beyond] == i]
                    v[mine] = terms.scale_v[mine] * curve.reference(scaled[mine])
        return v


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
    harvestable_ha: NDArray[np.float64] | None = None  # None: all of area_ha may be cut
    zone_idx: NDArray[np.int64] | None = None  # zone code per stand (cover targets)
    regimes: Regimes | None = None  # transitions and thinnings (None: regrow as before)
    # each code's minimum harvest age at each stand's site (codes x stands), for regrowth
    min_age_by_code: NDArray[np.float64] | None = None

    @property
    def cuttable_ha(self) -> NDArray[np.float64]:
        """The area of each stand the schedule may cut: its harvestable area, or its whole
        area without a netdown."""
        return self.harvestable_ha if self.harvestable_ha is not None else self.area_ha

    @property
    def n(self) -> int:
        return len(self.area_ha)

    @classmethod
    def from_table(cls, stands: pd.DataFrame, scenario: Scenario, curves: CurveSet) -> StandArrays:
        """Build the arrays from a stand table with the standard columns."""
        code = stands["analysis_unit"] if "analysis_unit" in stands else stands["species"]
        idx = curves.index(code.to_numpy())
        site = stands["site_index"].to_numpy(dtype=np.float64)
        delay = np.array([scenario.species[c].regen_delay_years for c in curves.codes])
        regimes = Regimes.from_scenario(scenario, curves)
        by_code = regimes.min_age_by_code(scenario, curves, site) if regimes.changes else None
        done = np.zeros(len(curves.codes), bool) if by_code is None else ~np.isnan(by_code).all(1)
        min_age = np.zeros(len(stands))
        for i, code in enumerate(curves.codes):  # per species; rules run per distinct site
            mine = idx == i
            if done[i]:
                min_age[mine] = by_code[i, mine]  # a code regrown into: worked out already
            elif mine.any():
                sp = scenario.species[code]
                min_age[mine] = min_harvest_ages(
                    curves.curves[i],
                    site[mine],
                    sp.age_rules(),
                    sp.money(scenario.economics),
                    scenario.growth.search(),
                )
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
            harvestable_ha=(
                stands["harvestable_ha"].to_numpy(dtype=np.float64)
                if "harvestable_ha" in stands
                else None
            ),
            zone_idx=zone_codes(stands),
            regimes=regimes if regimes.changes or regimes.thins else None,
            min_age_by_code=by_code,
        )


def area_sum(per_ha: NDArray, area_ha: NDArray) -> float:
    """Sum of per-hectare values times areas [ha]. numpy's einsum loop, not a BLAS dot: a
    multithreaded BLAS stalls on a busy machine (``docs/performance.md``), and these sums run
    every period of every trial horizon."""
    return float(np.einsum("i,i->", per_ha, area_ha))


def growing_stock_m3(
    curves: CurveSet, species_idx: NDArray, age_years: NDArray, terms: SiteTerms, area_ha: NDArray
) -> float:
    """Standing volume [m3] summed over stands (or stand parts), from their site terms."""
    return area_sum(curves.volume_m3_ha(species_idx, age_years, terms=terms), area_ha)


def long_run_codes(arrays: StandArrays) -> list[tuple[int, NDArray, NDArray]]:
    """What each stand's harvestable land grows as in the long run (after the regeneration
    chain has settled, :meth:`Regimes.long_run`): per code, the share of each stand's area on
    it and the code's minimum harvest age at the stand's site. Without transitions every
    stand stays its own code."""
    reg = arrays.regimes
    if reg is None or not reg.changes:
        out = []
        for i in np.unique(arrays.species_idx):
            share = (arrays.species_idx == i).astype(np.float64)
            out.append((int(i), share, arrays.min_harvest_age))
        return out
    assert arrays.min_age_by_code is not None
    pi = reg.long_run()[arrays.species_idx]  # stands x codes
    return [
        (int(j), pi[:, j], arrays.min_age_by_code[j])
        for j in np.flatnonzero(pi.max(axis=0) > 1e-12)
    ]


def standing_m3_ha(
    curves: CurveSet, code: NDArray, age: NDArray, site: NDArray, reg: Regimes | None
) -> NDArray[np.float64]:
    """Standing volume [m3/ha] of thinned stands at these ages: the gross yield less the
    thinnings taken up to each age (the gross yield where a code is not thinned)."""
    v = curves.volume_m3_ha(code, age, site)
    if reg is None or not reg.thins:
        return v
    terms = curves.site_terms(code, site)
    return v - reg.removed(code, reg.removals(curves, code, terms), age)


def regulated_growing_stock_m3(
    curves: CurveSet, stands: StandArrays, area_ha: NDArray, nodes: int = 65
) -> float:
    """Growing stock [m3] of the same area as a fully regulated (normal) forest cut at the
    minimum harvest age R of the codes it grows as in the long run: equal area in every age
    from 0 to R, so a hectare holds (1/R) * integral_0^R S(t) dt, S the standing volume
    (thinnings taken). The integral is Simpson's rule on ``nodes`` ages, worked out once per
    distinct (code, site index, R). Land never eligible (R infinite or 0) holds no regulated
    stock of its own and is left out."""
    total = 0.0
    x = np.linspace(0.0, 1.0, nodes)  # nodes odd: Simpson weights 1 4 2 4 ... 4 1
    w = np.ones(nodes)
    w[1:-1:2], w[2:-1:2] = 4.0, 2.0
    w /= w.sum()
    for j, share, r in long_run_codes(stands):  # per code
        weight = area_ha * share
        ok = np.isfinite(r) & (r > 0) & (weight > 0)
        if not ok.any():
            continue
        # the distinct (site index, R) pairs as complex numbers, which sort and compare as
        # the pairs do (real part first): a 1-D unique, 5x faster than np.unique(axis=0)
        keys = np.empty(int(ok.sum()), dtype=np.complex128)
        keys.real, keys.imag = stands.site_index[ok], r[ok]
        uniq, inv = np.unique(keys, return_inverse=True)
        si, rr = uniq.real, uniq.imag
        t = rr[:, None] * x[None, :]
        code = np.full(t.size, j, dtype=np.int64)
        v = standing_m3_ha(curves, code, t.ravel(), np.repeat(si, nodes), stands.regimes)
        mean_v = v.reshape(len(uniq), nodes) @ w  # (1/R) integral_0^R S
        total += float(np.dot(np.bincount(inv.ravel(), weight[ok], len(uniq)), mean_v))
    return total


def zone_codes(stands: pd.DataFrame) -> NDArray[np.int64]:
    """Integer code of each stand's zone, in sorted order of the zone names ('' for none)."""
    return _zones(stands)[0]


def zone_names(stands: pd.DataFrame) -> list[str]:
    return _zones(stands)[1]


def _zones(stands: pd.DataFrame) -> tuple[NDArray[np.int64], list[str]]:
    """The zone codes and sorted names of ``stands["zone"].fillna("").astype(str)``, from
    the column's distinct values (hashed, not sorted: an np.unique of a million strings took
    a second, and iterating an Arrow-backed column in Python as long again)."""
    factor, uniques = pd.factorize(stands["zone"], use_na_sentinel=True)
    texts = pd.Series(uniques, dtype=object).astype(str).tolist()
    names = sorted(set(texts) | ({""} if (factor < 0).any() else set()))
    at = {name: i for i, name in enumerate(names)}
    lookup = np.array([at[t] for t in texts] + [at.get("", -1)], dtype=np.int64)  # -1: none
    return lookup[factor], names


@dataclass(frozen=True)
class SustainedYield:
    """Each stand's long-term sustained yield per hectare [m3/ha/year]: the MAI of total yield
    (final felling plus thinnings) on the curves the land regrows into in the long run
    (:func:`long_run_codes`), at each code's MAI culmination and at its minimum harvest age
    (the rotation the rules use). Worked out once for the region (a root search per code and
    distinct site) and summed over the harvestable areas of the region or of any part of it
    (:meth:`over`, a management unit's)."""

    at_culmination_m3_ha: NDArray[np.float64]
    at_min_harvest_age_m3_ha: NDArray[np.float64]

    @classmethod
    def of(cls, curves: CurveSet, arrays: StandArrays, search: Search) -> SustainedYield:
        at_cul = np.zeros(arrays.n)
        at_rot = np.zeros(arrays.n)
        for j, share, r in long_run_codes(arrays):  # per code; per distinct site inside
            mine = share > 0
            at_cul[mine] += share[mine] * max_mai(curves.curves[j], arrays.site_index[mine], search)
            ok = mine & np.isfinite(r) & (r > 0)
            code = np.full(int(ok.sum()), j)
            gross = curves.volume_m3_ha(code, r[ok], arrays.site_index[ok])
            at_rot[ok] += share[ok] * gross / r[ok]
        return cls(at_cul, at_rot)

    def over(self, area_ha: NDArray) -> dict[str, float]:
        """The sustained yields [m3/year] of stands with these harvestable areas [ha]."""
        return {
            "at_culmination": float(np.dot(area_ha, self.at_culmination_m3_ha)),
            "at_min_harvest_age": float(np.dot(area_ha, self.at_min_harvest_age_m3_ha)),
        }
