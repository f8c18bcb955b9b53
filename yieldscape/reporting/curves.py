"""The curves report: per species and site, culmination, yield class, rule ages, rotations."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from yieldscape.config import Scenario
from yieldscape.growth.rules import RULES, SiteSummary, summarise_site

COLUMNS = [
    "species",
    "curve",
    "site_index",
    "stands",
    "area_ha",
    "culmination_age_years",
    "max_mai_m3_ha_yr",
    "culminated",
    "yield_class",
    *[f"min_age_{r}_years" for r in RULES],
    "min_harvest_age_years",
    "faustmann_rotation_years",
    "fisher_rotation_years",
    "lev_per_ha",
    "msy_stock_m3_ha",
    "msy_growth_m3_ha_yr",
    "collapses",
]


def site_values(
    stands: pd.DataFrame, step_m: float, scenario: Scenario | None = None
) -> dict[str, pd.DataFrame]:
    """Per code: the site index values in use (rounded to ``step_m``), stands and area. A
    code counts a stand that grows as it now (its analysis unit, else its species) or may
    regrow as it after a clearcut (``regenerate_as``, followed along its chain)."""
    rounded = np.round(stands["site_index"].to_numpy() / step_m) * step_m
    own = stands["analysis_unit"] if "analysis_unit" in stands else stands["species"]
    code, names = pd.factorize(own, use_na_sentinel=False)  # no Python string per stand
    area = stands["area_ha"].to_numpy()
    if scenario is None:
        reach = [[name] for name in names]
    else:
        chains = reachable_codes(scenario)
        reach = [sorted(chains[name]) for name in names]
    # a row per stand and code it counts for, stand after stand, codes in name order: the
    # frame DataFrame.explode made of a list per stand, built from a small table of names
    count = np.array([len(r) for r in reach], dtype=np.int64)[code]
    stand = np.repeat(np.arange(len(code)), count)
    rank = np.arange(len(stand)) - np.repeat(np.cumsum(count) - count, count)
    table = np.array([r + [None] * (max(map(len, reach)) - len(r)) for r in reach], dtype=object)
    frame = pd.DataFrame(
        {
            "species": pd.Series(table[code[stand], rank], dtype=object),
            "site_index": rounded[stand],
            "area_ha": area[stand],
        }
    )
    grouped = (
        frame.groupby(["species", "site_index"])
        .agg(stands=("area_ha", "size"), area_ha=("area_ha", "sum"))
        .reset_index()
    )
    return {str(sp): g.reset_index(drop=True) for sp, g in grouped.groupby("species")}


def reachable_codes(scenario: Scenario) -> dict[str, set[str]]:
    """Each code and every code its clearcuts may regrow as, along the chain (any option)."""
    nxt = {
        code: set(sp.regenerate_as.codes) if sp.regenerate_as else set()
        for code, sp in scenario.species.items()
    }
    out = {}
    for code in scenario.species:  # a handful of codes
        seen, todo = {code}, [code]
        while todo:
            for to in nxt[todo.pop()] - seen:
                seen.add(to)
                todo.append(to)
        out[code] = seen
    return out


def curves_table(
    scenario: Scenario, stands: pd.DataFrame, step_m: float = 1.0
) -> tuple[pd.DataFrame, dict[str, list[SiteSummary]]]:
    """One row per species and site value used; the summaries behind the rows by species."""
    rows = []
    summaries: dict[str, list[SiteSummary]] = {}
    for code, sites in site_values(stands, step_m, scenario).items():
        cfg = scenario.species[code]
        curve = cfg.yield_curve()
        summaries[code] = []
        for site, n, area in sites[["site_index", "stands", "area_ha"]].itertuples(index=False):
            s = summarise_site(
                code,
                curve,
                float(site),
                cfg.age_rules(),
                cfg.money(scenario.economics),
                scenario.growth.search(),
            )
            summaries[code].append(s)
            rows.append(
                {
                    "species": code,
                    "curve": cfg.curve,
                    "site_index": float(site),
                    "stands": int(n),
                    "area_ha": float(area),
                    "culmination_age_years": s.culmination.age_years,
                    "max_mai_m3_ha_yr": s.culmination.mai,
                    "culminated": s.culmination.culminated,
                    "yield_class": s.yield_class,
                    **{f"min_age_{r}_years": s.rule_ages.get(r, math.nan) for r in RULES},
                    "min_harvest_age_years": s.min_harvest_age_years,
                    "faustmann_rotation_years": s.faustmann.age_years if s.faustmann else math.nan,
                    "fisher_rotation_years": s.fisher.age_years if s.fisher else math.nan,
                    "lev_per_ha": s.lev_per_ha if s.lev_per_ha is not None else math.nan,
                    "msy_stock_m3_ha": s.msy_stock_m3_ha
                    if s.msy_stock_m3_ha is not None
                    else math.nan,
                    "msy_growth_m3_ha_yr": s.msy_growth_m3_ha_yr
                    if s.msy_growth_m3_ha_yr is not None
                    else math.nan,
                    "collapses": s.collapses,
                }
            )
    return pd.DataFrame(rows, columns=COLUMNS), summaries


def notes(table: pd.DataFrame) -> list[str]:
    """Plain-language warnings a planner must see before trusting the curves."""
    out = []
    for code, g in table.groupby("species"):
        if not g["culminated"].all():
            out.append(
                f"{code}: MAI has not culminated within the curve at "
                f"{int((~g['culminated']).sum())} site values"
            )
        if g["collapses"].any():
            out.append(
                f"{code}: the starting stock is below the minimum viable stock; "
                "regenerated stands collapse instead of growing"
            )
        unpaid = g["lev_per_ha"] <= 0
        if unpaid.any():
            out.append(
                f"{code}: LEV <= 0 at {int(unpaid.sum())} site values: growing timber "
                "does not pay there at these prices, so the economic rotations there "
                "mean little"
            )
        if np.isinf(g["min_harvest_age_years"]).any():
            out.append(
                f"{code}: some sites never meet the minimum harvest volume; those "
                "stands are never eligible"
            )
    return out


def rotation_summary(table: pd.DataFrame) -> pd.DataFrame:
    """One row per species from the curves table: site index range and area, and the
    area-weighted MAI culmination age, maximum MAI, minimum harvest age and Faustmann
    rotation (infinite ages, never met, are left out of the means)."""
    rows = []
    for code, g in table.groupby("species", sort=True):
        w = g["area_ha"].to_numpy()

        def mean(col: str, g: pd.DataFrame = g, w: np.ndarray = w) -> float:
            v = g[col].to_numpy(dtype=np.float64)
            ok = np.isfinite(v) & (w > 0)
            return float(np.average(v[ok], weights=w[ok])) if ok.any() else math.nan

        rows.append(
            {
                "species": code,
                "curve": g["curve"].iloc[0],
                "site_index_min": float(g["site_index"].min()),
                "site_index_max": float(g["site_index"].max()),
                "area_ha": float(w.sum()),
                "culmination_age_years": mean("culmination_age_years"),
                "max_mai_m3_ha_yr": mean("max_mai_m3_ha_yr"),
                "min_harvest_age_years": mean("min_harvest_age_years"),
                "faustmann_rotation_years": mean("faustmann_rotation_years"),
            }
        )
    return pd.DataFrame(rows)
