"""Minimum harvest age rules and the per-site curve summary they draw on.

Rules, combinable per species (the largest age wins):

- ``min_harvest_age``: a fixed age;
- ``min_harvest_mai_share``: the first age at which MAI reaches that share of its maximum
  (0.95 is common practice in North American public-land planning);
- ``min_harvest_volume_m3_ha``: the first age with at least that volume per hectare;
- ``min_harvest_economic``: the Faustmann (LEV-maximising) rotation.

A rule a stand can never meet (a volume the curve never reaches within ``growth.max_age_years``)
gives an infinite age: the stand is never eligible, and the curves report says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy.optimize import brentq

from yieldscape.growth.curves import StockGrowth, YieldCurve
from yieldscape.growth.economics import Rotation, faustmann_rotation, fisher_rotation
from yieldscape.growth.increments import Culmination, culmination, yield_class

RULES = ("fixed", "mai_share", "volume", "economic")


@dataclass(frozen=True)
class AgeRules:
    """A species' minimum harvest age rules (None: not used); the largest age wins."""

    fixed_years: float | None = None
    mai_share: float | None = None
    volume_m3_ha: float | None = None
    economic: bool = False

    @property
    def per_site(self) -> bool:
        """Whether the age depends on site (every rule but a fixed age does)."""
        return self.mai_share is not None or self.volume_m3_ha is not None or self.economic


@dataclass(frozen=True)
class Money:
    """What a hectare of the species earns and costs, and the rate money is discounted at."""

    price_per_m3: float | None = None
    regen_cost_per_ha: float = 0.0
    annual_cost_per_ha: float = 0.0
    discount_rate: float | None = None
    compounding: str = "continuous"


@dataclass(frozen=True)
class Search:
    """How far and how finely curves are searched: the oldest age, the yield-class step
    [m3/ha/yr] and the site index rounding of per-site rules [m]."""

    max_age_years: float = 400.0
    yield_class_step: float = 2.0
    site_step_m: float = 0.1


@dataclass(frozen=True)
class SiteSummary:
    """Everything the curves report says of one species on one site index."""

    species: str
    site_index: float
    culmination: Culmination
    yield_class: float
    rule_ages: dict[str, float]  # rule -> age [years] (only the rules the species uses)
    min_harvest_age_years: float
    faustmann: Rotation | None
    fisher: Rotation | None
    lev_per_ha: float | None
    msy_stock_m3_ha: float | None
    msy_growth_m3_ha_yr: float | None
    collapses: bool


def _curve_fns(curve: YieldCurve, site: float):
    def vol(t):
        return curve.volume_m3_ha(t, np.full(np.shape(t), site))

    def cai(t):
        return curve.cai_m3_ha_yr(t, np.full(np.shape(t), site))

    return vol, cai


def summarise_site(
    species: str,
    curve: YieldCurve,
    site: float,
    rules: AgeRules,
    money: Money = Money(),
    search: Search = Search(),
) -> SiteSummary:
    """Culmination, yield class, every rule's age and the economic rotations at one site."""
    vol, cai = _curve_fns(curve, site)
    max_age = search.max_age_years
    cul = culmination(vol, cai, max_age)
    faus = fish = None
    lev = None
    if money.discount_rate is not None and money.price_per_m3 is not None:
        faus = _faustmann(vol, money, max_age)
        fish = fisher_rotation(*_money_args(vol, money), max_age=max_age)
        lev = faus.value
    ages = _rule_ages(vol, cul, rules, money, max_age, faus)
    msy_s = msy_g = None
    collapses = False
    if isinstance(curve, StockGrowth):
        s, g = curve.msy(np.asarray(site))
        msy_s, msy_g = float(s), float(g)
        collapses = curve.collapses
    return SiteSummary(
        species=species,
        site_index=float(site),
        culmination=cul,
        yield_class=yield_class(cul.mai, search.yield_class_step),
        rule_ages=ages,
        min_harvest_age_years=max(ages.values()),
        faustmann=faus,
        fisher=fish,
        lev_per_ha=lev,
        msy_stock_m3_ha=msy_s,
        msy_growth_m3_ha_yr=msy_g,
        collapses=collapses,
    )


def _money_args(vol, money: Money) -> tuple:
    assert money.price_per_m3 is not None and money.discount_rate is not None
    return vol, money.price_per_m3, money.regen_cost_per_ha, money.discount_rate, money.compounding


def _faustmann(vol, money: Money, max_age: float) -> Rotation:
    return faustmann_rotation(
        *_money_args(vol, money), annual_cost=money.annual_cost_per_ha, max_age=max_age
    )


def _rule_ages(
    vol,
    cul: Culmination | None,
    rules: AgeRules,
    money: Money,
    max_age: float,
    faus: Rotation | None = None,
) -> dict[str, float]:
    """The age [years] each of the species' rules gives at one site (the Faustmann rotation
    worked out here unless given; the culmination is needed by the MAI share rule only)."""
    ages: dict[str, float] = {}
    if rules.fixed_years is not None:
        ages["fixed"] = float(rules.fixed_years)
    if rules.mai_share is not None:
        assert cul is not None
        ages["mai_share"] = _first_mai_share(vol, cul, rules.mai_share)
    if rules.volume_m3_ha is not None:
        ages["volume"] = _first_volume(vol, rules.volume_m3_ha, max_age)
    if rules.economic:
        ages["economic"] = (faus or _faustmann(vol, money, max_age)).age_years
    return ages


def _min_age_at(
    curve: YieldCurve, site: float, rules: AgeRules, money: Money, search: Search
) -> float:
    """The minimum harvest age [years] at one site: the oldest of the rules' ages (only what
    the rules need is worked out; the curves report's summary has the rest)."""
    vol, cai = _curve_fns(curve, site)
    max_age = search.max_age_years
    cul = culmination(vol, cai, max_age) if rules.mai_share is not None else None
    return max(_rule_ages(vol, cul, rules, money, max_age).values())


def site_summaries(
    species: str,
    curve: YieldCurve,
    site_index: NDArray,
    rules: AgeRules,
    money: Money = Money(),
    search: Search = Search(),
) -> tuple[list[SiteSummary], NDArray[np.intp]]:
    """Summaries for each distinct site index (rounded to ``search.site_step_m``) and the
    index that maps every stand onto its summary. The loop runs over distinct sites."""
    step = search.site_step_m
    rounded = np.round(np.asarray(site_index, dtype=np.float64) / step) * step
    unique, inverse = np.unique(rounded, return_inverse=True)
    return [summarise_site(species, curve, s, rules, money, search) for s in unique], inverse


def min_harvest_ages(
    curve: YieldCurve,
    site_index: NDArray,
    rules: AgeRules,
    money: Money = Money(),
    search: Search = Search(),
) -> NDArray[np.float64]:
    """Minimum harvest age [years] for each stand's site index (one species).

    Only a fixed age is the same everywhere; other rules are worked out once per distinct site
    index, rounded to ``search.site_step_m``, and mapped back to the stands.
    """
    site_index = np.asarray(site_index, dtype=np.float64)
    if not rules.per_site:
        return np.full(site_index.shape, float(rules.fixed_years or 0.0))
    step = search.site_step_m
    rounded = np.round(site_index / step) * step
    unique, inverse = np.unique(rounded, return_inverse=True)
    ages = [_min_age_at(curve, float(s), rules, money, search) for s in unique]  # per site
    return np.array(ages)[inverse]


def max_mai(
    curve: YieldCurve, site_index: NDArray, search: Search = Search()
) -> NDArray[np.float64]:
    """Maximum MAI [m3/ha/yr] for each stand's site index (one species)."""
    step = search.site_step_m
    rounded = np.round(np.asarray(site_index, dtype=np.float64) / step) * step
    unique, inverse = np.unique(rounded, return_inverse=True)
    out = []
    for site in unique:  # per distinct site
        vol, cai = _curve_fns(curve, site)
        out.append(culmination(vol, cai, search.max_age_years).mai)
    return np.array(out)[inverse]


def _first_mai_share(vol, cul: Culmination, share: float) -> float:
    target = share * cul.mai

    def f(t: float) -> float:
        return float(vol(np.asarray([t]))[0] / t - target)

    lo = 1e-6
    if f(cul.age_years) < 0:  # only when not culminated and the grid max is at the end
        return cul.age_years
    return float(brentq(f, lo, cul.age_years, xtol=1e-8)) if f(lo) < 0 else lo


def _first_volume(vol, volume: float, max_age: float) -> float:
    t = np.arange(0.0, max_age + 0.25, 0.5)
    v = vol(t)
    hit = np.flatnonzero(v >= volume)
    if not len(hit):
        return math.inf
    i = int(hit[0])
    if i == 0:
        return 0.0
    return float(
        brentq(lambda x: float(vol(np.asarray([x]))[0] - volume), t[i - 1], t[i], xtol=1e-8)
    )
