"""The output tables: wood flow per period, harvest events, and per-stand results.

Every column is documented in docs/outputs.md; names carry their units.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd

from yieldscape.config import Scenario
from yieldscape.growth.products import product_shares
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import FlowResult


def calendar_years(years: np.ndarray) -> np.ndarray | pd.arrays.IntegerArray:
    """Years as integers (INTEGER in the GeoPackage, no ``.0`` in a CSV) when every one given
    is whole, nullable ``Int64`` where some are missing (NaN). A harvest at the midpoint of
    a period of an odd number of years falls on a half year: then the years stay floats."""
    v = np.asarray(years, dtype=np.float64)
    known = v[~np.isnan(v)]
    if np.any(known != np.round(known)):
        return v
    if len(known) < len(v):
        return pd.array(v, dtype="Int64")
    return v.astype(np.int64)


def wood_flow_table(
    flow: FlowResult,
    periods: Periods,
    lp_bound: np.ndarray | None = None,
    revenue: tuple[np.ndarray, np.ndarray] | None = None,
) -> pd.DataFrame:
    """One row per period: harvest, area, mean harvest age, growing stock and growth, what
    the flow policy required and whether it was met, the LP's harvest of the period when an
    LP was solved, and the net revenue (``revenue``: net and discounted, per period)."""
    sim = flow.simulation
    P, L = periods.count, periods.period_years
    h, ha = sim.harvest_m3, sim.harvest_ha
    thin = sim.thinning_m3 if len(sim.thinning_m3) else np.zeros(P)
    final = h - thin
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_age = np.where(ha > 0, sim.harvest_age_area / np.where(ha > 0, ha, 1.0), np.nan)
        per_ha = np.where(ha > 0, final / np.where(ha > 0, ha, 1.0), np.nan)
        change = np.r_[
            np.nan, np.where(h[:-1] > 0, h[1:] / np.where(h[:-1] > 0, h[:-1], 1) - 1, np.nan)
        ]
    gs0, gs1 = sim.growing_stock_start_m3, sim.growing_stock_end_m3
    hlb0 = sim.hlb_stock_start_m3
    hlb1 = np.r_[hlb0[1:], sim.ending_hlb_stock_m3]
    # explicit targets (and the LP's, in the optimised mode) are what a period must take;
    # the other policies fail a period only below their floor
    takes_target = flow.policy in ("targets", "optimize")
    required = sim.target_m3 if takes_target else sim.floor_m3
    if revenue is None:
        revenue = (np.full(P, np.nan), np.full(P, np.nan))
    return pd.DataFrame(
        {
            "period": np.arange(1, P + 1),
            "start_year": periods.start_years,
            "end_year": periods.end_years,
            "harvest_year": calendar_years(periods.harvest_years),
            "harvest_m3": h,
            "harvest_m3_per_year": h / L,
            "final_harvest_m3": final,
            "thinning_m3": thin,
            "thinning_ha": sim.thinning_ha if len(sim.thinning_ha) else np.zeros(P),
            "harvest_ha": ha,
            "harvest_ha_per_year": ha / L,
            "harvest_volume_m3_ha": per_ha,
            "mean_harvest_age_years": mean_age,
            "growing_stock_start_m3": gs0,
            "growing_stock_end_m3": gs1,
            "hlb_growing_stock_start_m3": hlb0,
            "hlb_growing_stock_end_m3": hlb1,
            "net_growth_m3": gs1 - gs0 + h,
            "net_growth_m3_per_year": (gs1 - gs0 + h) / L,
            "change_from_previous": change,
            "flow_level_m3": np.full(P, flow.level_m3_per_period),
            "policy_target_m3": sim.target_m3,
            "policy_required_m3": required,
            "meets_policy": h >= required * (1 - 1e-6),
            "lp_bound_m3": lp_bound if lp_bound is not None else np.full(P, np.nan),
            "disturbed_ha": sim.disturbed_ha if len(sim.disturbed_ha) else np.zeros(P),
            "disturbed_m3": sim.disturbed_m3 if len(sim.disturbed_m3) else np.zeros(P),
            "net_revenue": revenue[0],
            "discounted_net_revenue": revenue[1],
        }
    )


TREATMENTS = ("clearcut", "thinning")  # Simulation.event_treatment 0, 1


def harvests_layer(
    flow: FlowResult, stands: gpd.GeoDataFrame, periods: Periods, codes: tuple[str, ...]
) -> gpd.GeoDataFrame:
    """One polygon row per stand and period in which (part of) the stand is cut.

    The geometry is the whole stand; ``area_ha`` is the area cut, which is less than the
    stand's area for a partial cut. Two parts of one stand cut in one period are one row, with
    the area-weighted age. A thinning is a row of its own (``treatment``), as is each code
    (``analysis_unit``) a stand's parts grow as when cut.
    """
    sim = flow.simulation
    # the events grouped by (period, stand, treatment, code) in that order, each group's
    # events in the order cut, as DataFrame.groupby(sort=True) has them: one stable sort of
    # the four keys packed into one integer
    n_stands, n_kinds, n_codes = len(stands), len(TREATMENTS), max(len(codes), 1)
    key = sim.event_period.astype(np.int64) * n_stands + sim.event_stand
    key = (key * n_kinds + sim.event_treatment) * n_codes + sim.event_code
    order = np.argsort(key, kind="stable")
    key = key[order]
    new = np.r_[True, key[1:] != key[:-1]] if len(key) else np.zeros(0, dtype=bool)
    age_area, area, volume = group_sums(
        np.cumsum(new) - 1,
        [
            (sim.event_age_years * sim.event_area_ha)[order],
            sim.event_area_ha[order],
            sim.event_volume_m3[order],
        ],
    )
    del order
    key = key[new]
    key, code = np.divmod(key, n_codes)
    key, treatment = np.divmod(key, n_kinds)
    period, pos = np.divmod(key, n_stands)
    # a cut is partial when it takes less than the stand's harvestable area
    limit = "harvestable_ha" if "harvestable_ha" in stands else "area_ha"
    stand_area = stands[limit].to_numpy()[pos]
    # text columns taken from Arrow-backed arrays by position: no Python string per row
    units = pd.Series(np.array(codes, dtype=object)).array
    kinds = pd.Series(np.array(TREATMENTS, dtype=object)).array
    frame = pd.DataFrame(
        {
            "stand_id": stands["stand_id"].array.take(pos),
            "species": stands["species"].array.take(pos),
            "analysis_unit": units.take(code),
            "zone": stands["zone"].array.take(pos),
            "treatment": kinds.take(treatment),
            "period": period,
            "start_year": periods.start_years[period - 1],
            "harvest_year": calendar_years(periods.harvest_years[period - 1]),
            "age_years": age_area / area,
            "area_ha": area,
            "volume_m3": volume,
            "volume_m3_ha": volume / area,
            "partial": (area < stand_area * (1 - 1e-9)) & (treatment == 0),
        },
        copy=False,  # the new arrays as they are, not consolidated into a copy
    )
    geom = stands.geometry.to_numpy()[pos]
    return gpd.GeoDataFrame(  # copy=False: geopandas copies a DataFrame's columns by default
        frame, geometry=gpd.GeoSeries(geom, crs=stands.crs).values, crs=stands.crs, copy=False
    )


def group_sums(group: np.ndarray, columns: list[np.ndarray]) -> list[np.ndarray]:
    """Per group, the sum of each column's values, ``group`` being sorted (0, 0, 1, 2, 2, ...)
    and each group's values in the order to add them; NaN skipped. Kahan's compensated
    summation in that order (Kahan 1965, *Further remarks on reducing truncation errors*,
    Comm. ACM 8:40), as pandas' ``groupby().sum()`` adds (``pandas/_libs/groupby.pyx``,
    ``group_sum``), done for all groups at once, one pass per rank within a group. The
    harvests built with it equal those of the pandas groupby it replaced, at 100k stands and
    on the sample region."""
    n = int(group[-1]) + 1 if len(group) else 0
    starts = np.flatnonzero(np.r_[True, group[1:] != group[:-1]]) if len(group) else group
    rank = np.arange(len(group)) - starts[group] if len(group) else group
    out = []
    for values in columns:
        total, comp = np.zeros(n), np.zeros(n)
        for k in range(int(rank.max()) + 1 if len(rank) else 0):
            at = np.flatnonzero((rank == k) & ~np.isnan(values))
            g, v = group[at], values[at]
            with np.errstate(invalid="ignore"):  # inf - inf: the NaN dropped below
                y = v - comp[g]
                t = total[g] + y
                c = t - total[g] - y
            comp[g] = np.where(np.isnan(c), 0.0, c)  # an infinite sum stays infinite
            total[g] = t
        out.append(total)
    return out


def stands_layer(
    flow: FlowResult,
    stands: gpd.GeoDataFrame,
    arrays: StandArrays,
    curves: CurveSet,
    periods: Periods,
) -> gpd.GeoDataFrame:
    """The input stands with their start volume and what the schedule does to each."""
    sim = flow.simulation
    n = len(stands)
    out = stands.copy(deep=False)  # copy-on-write: the new columns leave ``stands`` alone
    out["volume_m3_ha"] = start_volume_m3_ha(arrays, curves)
    clear = sim.event_treatment == 0
    stand, period = sim.event_stand[clear], sim.event_period[clear]
    age, area = sim.event_age_years[clear], sim.event_area_ha[clear]
    first = np.full(n, np.iinfo(np.int64).max)
    np.minimum.at(first, stand, period)
    cut = first < np.iinfo(np.int64).max
    first_age = np.full(n, np.nan)
    is_first = period == first[stand]
    # area-weighted age of what is clearcut in the first harvest period
    w_age = np.bincount(stand[is_first], age[is_first] * area[is_first], n)
    w = np.bincount(stand[is_first], area[is_first], n)
    first_age[cut] = w_age[cut] / w[cut]
    out["first_harvest_period"] = pd.array(np.where(cut, first, 0), dtype="Int64")
    out.loc[~cut, "first_harvest_period"] = pd.NA
    years = periods.harvest_years
    out["first_harvest_year"] = calendar_years(
        np.where(cut, years[np.where(cut, first, 1) - 1], np.nan)
    )
    out["first_harvest_age_years"] = first_age
    out["harvest_count"] = periods_cut(stand, period, n, periods.count)
    out["harvested_area_ha"] = np.bincount(stand, area, n)
    out["harvested_volume_m3"] = np.bincount(stand, sim.event_volume_m3[clear], n)
    thin = ~clear
    out["thinned_volume_m3"] = np.bincount(sim.event_stand[thin], sim.event_volume_m3[thin], n)
    geom_col = out.geometry.name
    cols = [c for c in out.columns if c != geom_col] + [geom_col]
    return out[cols]


def periods_cut(stand: np.ndarray, period: np.ndarray, n: int, periods: int) -> np.ndarray:
    """Per stand (0 .. n-1), the number of distinct periods (1 .. ``periods``) among its
    events: one pass per period marking the stands cut in it (a sort of the 2.3M (stand,
    period) pairs of a 1M-stand run took 0.8 s)."""
    count = np.zeros(n, dtype=np.int64)
    cut = np.zeros(n, dtype=bool)
    for p in range(1, periods + 1):
        cut[:] = False
        cut[stand[period == p]] = True
        count += cut
    return count


def wood_flow_by_product(
    flow: FlowResult, arrays: StandArrays, curves: CurveSet, scenario: Scenario
) -> pd.DataFrame:
    """Harvested volume per period, species and product (long form).

    Each harvest event's volume (clearcut or thinning) is split by its code's product
    shares at the age it was cut (:mod:`yieldscape.growth.products`); the products of a
    period add up to its harvest.
    """
    sim = flow.simulation
    mine = [np.flatnonzero(sim.event_code == i) for i in range(len(curves.codes))]
    shares = [
        product_shares(scenario.species[code].products, sim.event_age_years[m])
        for code, m in zip(curves.codes, mine, strict=True)
    ]
    products = list(dict.fromkeys(p for s in shares for p in s))
    # species and products as their places in name order (small integers, not a string per
    # event): the same groups in the same order as grouping by the names; one preallocated
    # column each, filled species after species and product after product
    species, by_name = sorted(curves.codes), sorted(products)
    rows = sum(len(m) * len(s) for m, s in zip(mine, shares, strict=True))
    cols = {"period": np.empty(rows, np.int64), "species": np.empty(rows, np.int64)}
    cols |= {"product": np.empty(rows, np.int64), "volume_m3": np.empty(rows)}
    at = 0
    for i, (m, s) in enumerate(zip(mine, shares, strict=True)):
        for product, share in s.items():
            part = slice(at, at + len(m))
            cols["period"][part] = sim.event_period[m]
            cols["species"][part] = species.index(curves.codes[i])
            cols["product"][part] = by_name.index(product)
            cols["volume_m3"][part] = sim.event_volume_m3[m] * share
            at += len(m)
    frame = pd.DataFrame(cols, copy=False)
    out = frame.groupby(["period", "species", "product"], as_index=False)["volume_m3"].sum()
    out["species"] = np.array(species, dtype=object)[out["species"].to_numpy()]
    out["product"] = np.array(by_name, dtype=object)[out["product"].to_numpy()]
    return out.sort_values(["period", "species", "product"], ignore_index=True)


def start_volume_m3_ha(arrays: StandArrays, curves: CurveSet) -> np.ndarray:
    """Each stand's standing volume [m3/ha] at the start: its code's gross yield at its age,
    less the thinnings of that age on the harvestable land base."""
    v = curves.volume_m3_ha(arrays.species_idx, arrays.age_years, arrays.site_index)
    reg = arrays.regimes
    if reg is None or not reg.thins:
        return v
    terms = curves.site_terms(arrays.species_idx, arrays.site_index)
    removed = reg.removed(
        arrays.species_idx, reg.removals(curves, arrays.species_idx, terms), arrays.age_years
    )
    thinned = arrays.cuttable_ha
    return np.where(thinned > 0, v - removed, v)


def regeneration_table(flow: FlowResult, codes: tuple[str, ...]) -> pd.DataFrame:
    """Per period, the area clearcut from each code and regrowing as each code."""
    sim = flow.simulation
    # grouped by each code's place in name order, not by its name (the same groups in the
    # same order, without two strings per regenerating part: 0.17 GB held at 1M stands)
    names = sorted(codes)
    rank = np.array([names.index(c) for c in codes], dtype=np.int64)
    frame = pd.DataFrame(
        {
            "period": sim.regen_period.astype(np.int64),
            "from_species": rank[sim.regen_from.astype(np.int64)],
            "to_species": rank[sim.regen_to.astype(np.int64)],
            "area_ha": sim.regen_area_ha,
        },
        copy=False,
    )
    keys = ["period", "from_species", "to_species"]
    g = frame.groupby(keys, as_index=False, sort=True)["area_ha"].sum()
    by_name = np.array(names, dtype=object)
    for key in keys[1:]:
        g[key] = by_name[g[key].to_numpy()]
    return g
