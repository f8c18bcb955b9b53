"""Indicators of a schedule and the verdict on whether its flow is sustainable.

Everything here is computed from a recorded simulation and the stand table, in memory:

- :func:`age_class_table`: area by zone and age class at chosen years (from the stand parts
  the simulation kept at those period boundaries);
- :func:`stand_ages_table`: each stand's age at those years (for maps and rasters);
- :func:`harvest_breakdown`: harvest by period, zone and species;
- :func:`revenue_by_period`: net revenue and its present value where prices are given;
- :func:`horizon_indicators`: one row per indicator over the whole horizon;
- :func:`judge`: the verdict, a list of checks with numbers and the period where one fails.

Every column is documented in docs/outputs.md.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np
import pandas as pd

from yieldscape.config import Scenario
from yieldscape.growth.economics import growth_factor
from yieldscape.policies import flow_policy
from yieldscape.projection import CurveSet, Periods, StandArrays, zone_codes, zone_names
from yieldscape.schedule import FlowResult
from yieldscape.schedule.simulate import PartsSnapshot

MEANINGS = {
    "horizon_years": "Length of the horizon.",
    "gross_area_ha": "Area of the stand layer.",
    "harvestable_ha": "Harvestable land base after the netdown.",
    "flow_level_m3_per_year": "The flow level found (see run.json flow for each policy).",
    "mean_harvest_m3_per_year": "Harvest over the horizon divided by its years.",
    "short_term_m3_per_year": "Mean harvest of the first two periods.",
    "mid_term_m3_per_year": "Mean harvest of the two middle periods.",
    "long_term_m3_per_year": "Mean harvest of the last two periods.",
    "total_harvest_m3": "Harvest over the horizon.",
    "total_harvest_ha": "Area cut over the horizon (area cut twice counts twice).",
    "mean_harvest_age_years": "Area-weighted mean age at harvest over the horizon.",
    "mean_harvest_volume_m3_ha": "Harvested volume per hectare cut over the horizon.",
    "ltsy_at_culmination_m3_per_year": "Long-term sustained yield: harvestable area x maximum MAI.",
    "ltsy_at_min_harvest_age_m3_per_year": "Harvestable area x MAI at each stand's minimum "
    "harvest age.",
    "level_to_ltsy": "Flow level over the long-term sustained yield at culmination.",
    "largest_drop": "Largest fall of harvest from one period to the next, as a share.",
    "largest_drop_period": "Period in which that fall happens (empty without a fall).",
    "largest_increase": "Largest rise of harvest from one period to the next, as a share.",
    "initial_growing_stock_m3": "Growing stock at the start, whole forest.",
    "ending_growing_stock_m3": "Growing stock at the end of the horizon, whole forest.",
    "ending_to_initial_growing_stock": "Ending over initial growing stock, whole forest.",
    "initial_hlb_growing_stock_m3": "Growing stock on the harvestable land base at the start.",
    "ending_hlb_growing_stock_m3": "Growing stock on the harvestable land base at the end.",
    "ending_to_initial_hlb_growing_stock": "Ending over initial, harvestable land base.",
    "regulated_hlb_growing_stock_m3": "Growing stock of a regulated forest on the harvestable "
    "land base cut at the minimum harvest ages.",
    "total_net_growth_m3": "Growth over the horizon net of disturbance losses.",
    "harvest_to_net_growth": "Harvest over net growth across the horizon.",
    "total_disturbed_ha": "Area disturbed over the horizon (expected value).",
    "total_disturbed_m3": "Volume lost to disturbance over the horizon.",
    "periods_meeting_policy": "Periods whose harvest meets what the flow policy requires.",
    "sustainable": "The verdict: 1 when every check holds (verdict.csv).",
    "total_net_revenue": "Net revenue of all harvests, undiscounted.",
    "net_present_value": "Net revenue discounted to the start year.",
    "spatial_cost_m3_per_year": "Flow level lost to the green-up and opening rules.",
    "lp_harvest_m3_per_year": "The harvest LP's mean harvest per year.",
    "lp_level_m3_per_year": "The level every period of the harvest LP holds (its bound).",
    "gap_to_lp": "Gap of the schedule's smallest harvest to the LP's level (else its total).",
    "max_shortfall_probability": "Highest share of disturbance replicates short of a "
    "period's target.",
}
# The indicators and the checks of the verdict in words, as the report shows them (the CSV
# files keep the names and add these as a `label` column).
LABELS = {
    "horizon_years": "Horizon",
    "gross_area_ha": "Gross area",
    "harvestable_ha": "Harvestable land base",
    "flow_level_m3_per_year": "Flow level",
    "mean_harvest_m3_per_year": "Mean harvest",
    "short_term_m3_per_year": "Short-term harvest",
    "mid_term_m3_per_year": "Mid-term harvest",
    "long_term_m3_per_year": "Long-term harvest",
    "total_harvest_m3": "Total harvest",
    "total_harvest_ha": "Total area cut",
    "mean_harvest_age_years": "Mean age at harvest",
    "mean_harvest_volume_m3_ha": "Mean volume per hectare cut",
    "ltsy_at_culmination_m3_per_year": "Long-term sustained yield at MAI culmination",
    "ltsy_at_min_harvest_age_m3_per_year": "Long-term sustained yield at the minimum harvest ages",
    "level_to_ltsy": "Flow level to long-term sustained yield",
    "largest_drop": "Largest fall between periods",
    "largest_drop_period": "Period of the largest fall",
    "largest_increase": "Largest rise between periods",
    "initial_growing_stock_m3": "Initial growing stock",
    "ending_growing_stock_m3": "Ending growing stock",
    "ending_to_initial_growing_stock": "Ending to initial growing stock",
    "initial_hlb_growing_stock_m3": "Initial growing stock, harvestable land base",
    "ending_hlb_growing_stock_m3": "Ending growing stock, harvestable land base",
    "ending_to_initial_hlb_growing_stock": "Ending to initial growing stock, harvestable land base",
    "regulated_hlb_growing_stock_m3": "Regulated forest's growing stock, harvestable land base",
    "total_net_growth_m3": "Net growth over the horizon",
    "harvest_to_net_growth": "Harvest to net growth",
    "total_disturbed_ha": "Area disturbed",
    "total_disturbed_m3": "Volume lost to disturbance",
    "periods_meeting_policy": "Periods meeting the flow policy",
    "sustainable": "Sustainable",
    "total_net_revenue": "Net revenue",
    "net_present_value": "Net present value",
    "spatial_cost_m3_per_year": "Cost of the spatial rules",
    "lp_harvest_m3_per_year": "Harvest of the harvest LP",
    "lp_level_m3_per_year": "Level of the harvest LP",
    "gap_to_lp": "Gap to the harvest LP",
    "max_shortfall_probability": "Highest shortfall probability",
}
CHECK_LABELS = {
    "flow_policy_held": "Flow policy held",
    "ending_growing_stock": "Ending growing stock kept",
    "harvestable_stock_kept": "Harvestable growing stock kept",
    "within_long_term_sustained_yield": "Within the long-term sustained yield",
    "cover_targets_met": "Cover targets met",
}
STOCK_TOLERANCE = 0.01  # a harvestable growing stock within 1% counts as not falling


def term_rows(n_periods: int) -> dict[str, slice]:
    """Periods that stand for the short, mid and long term: the first two, the two in the
    middle, the last two (one each when the horizon is that short)."""
    mid = n_periods // 2
    return {
        "short_term": slice(0, min(2, n_periods)),
        "mid_term": slice(max(mid - 1, 0), max(mid + 1, 1)),
        "long_term": slice(max(n_periods - 2, 0), n_periods),
    }


def boundary_index(periods: Periods, year: int) -> int:
    """The period boundary (0 .. periods.count) at calendar ``year``."""
    return int(round((year - periods.start_year) / periods.period_years))


def _zone_names(stands: pd.DataFrame) -> tuple[np.ndarray, list]:
    """Zone code per stand and the names (None for stands without a zone)."""
    return zone_codes(stands), [n or None for n in zone_names(stands)]


def age_class_table(
    snapshots: dict[int, PartsSnapshot],
    stands: pd.DataFrame,
    periods: Periods,
    years: tuple[int, ...],
    width_years: float,
) -> pd.DataFrame:
    """Area [ha] by year, zone and age class, on the whole forest and on the harvestable land
    base. Classes are ``width_years`` wide from age 0; area not yet regenerated (negative age
    while the regeneration delay runs) counts in the first class. Every class up to the oldest
    one occupied in any of the years is listed, also where it is empty."""
    codes, names = _zone_names(stands)
    nz = len(names)
    hist = {}
    top = 0
    for year in years:
        snap = snapshots[boundary_index(periods, year)]
        cls = np.floor(np.maximum(snap.age_years, 0.0) / width_years).astype(np.int64)
        top = max(top, int(cls.max()) + 1 if len(cls) else 1)
        hist[year] = (codes[snap.stand], cls, snap.area_ha, snap.in_hlb)
    frames = []
    for year, (zone, cls, area, hlb) in hist.items():
        key = zone * top + cls
        total = np.bincount(key, area, nz * top).reshape(nz, top)
        on_hlb = np.bincount(key[hlb], area[hlb], nz * top).reshape(nz, top)
        lo = np.arange(top) * width_years
        frames.append(
            pd.DataFrame(
                {
                    "year": year,
                    "zone": np.repeat(np.array(names, dtype=object), top),
                    "age_class": np.tile([f"{a:g}-{a + width_years:g}" for a in lo], nz),
                    "age_from_years": np.tile(lo, nz),
                    "age_to_years": np.tile(lo + width_years, nz),
                    "area_ha": total.ravel(),
                    "harvestable_ha": on_hlb.ravel(),
                }
            )
        )
    return pd.concat(frames, ignore_index=True)


def analysis_unit_table(
    snapshots: dict[int, PartsSnapshot],
    periods: Periods,
    years: tuple[int, ...],
    codes: tuple[str, ...],
) -> pd.DataFrame:
    """Area [ha] by report year and the code it grows as (its analysis unit, or the code it
    regrew as), on the whole forest and on the harvestable land base: how regeneration
    changes the forest over time."""
    n = len(codes)
    frames = []
    for year in years:
        snap = snapshots[boundary_index(periods, year)]
        code = snap.code if snap.code is not None else np.zeros(len(snap.stand), np.int64)
        total = np.bincount(code, snap.area_ha, n)
        on_hlb = np.bincount(code[snap.in_hlb], snap.area_ha[snap.in_hlb], n)
        frames.append(
            pd.DataFrame(
                {
                    "year": year,
                    "analysis_unit": np.array(codes, dtype=object),
                    "area_ha": total,
                    "harvestable_ha": on_hlb,
                }
            )
        )
    out = pd.concat(frames, ignore_index=True)
    return out[out.groupby("analysis_unit")["area_ha"].transform("max") > 0].reset_index(drop=True)


def stand_ages_table(
    snapshots: dict[int, PartsSnapshot],
    stands: pd.DataFrame,
    periods: Periods,
    years: tuple[int, ...],
) -> pd.DataFrame:
    """Per stand and year: the age of its largest part and its area-weighted mean age [years]
    (negative ages of area not yet regenerated count as 0), and the share of its area younger
    than at the start would make it, i.e. cut or disturbed since."""
    n, k = len(stands), len(years)
    # one preallocated column each (year after year, stands in order), not a frame per year
    # and their concatenation: half the peak memory at 1M stands x 5 years
    cols = {name: np.empty(n * k) for name in ("age_years", "mean_age_years", "renewed_share")}
    start_age = stands["age_years"].to_numpy(dtype=np.float64)
    for i, year in enumerate(years):
        snap = snapshots[boundary_index(periods, year)]
        age = np.maximum(snap.age_years, 0.0)
        order = np.lexsort((-snap.area_ha, snap.stand))  # by stand, largest part first
        s = snap.stand[order]
        first = np.r_[True, s[1:] != s[:-1]] if len(s) else np.zeros(0, bool)
        main = cols["age_years"][i * n : (i + 1) * n]
        main[:] = np.nan
        main[s[first]] = age[order][first]
        area = np.bincount(snap.stand, snap.area_ha, n)
        per_area = np.where(area > 0, area, 1.0)
        cols["mean_age_years"][i * n : (i + 1) * n] = (
            np.bincount(snap.stand, age * snap.area_ha, n) / per_area
        )
        then = start_age + (year - periods.start_year)
        young = snap.age_years < then[snap.stand] - 1e-6
        cols["renewed_share"][i * n : (i + 1) * n] = (
            np.bincount(snap.stand, snap.area_ha * young, n) / per_area
        )
    return pd.DataFrame(
        {
            "stand_id": stands["stand_id"].array.take(np.tile(np.arange(n), k)),
            "year": np.repeat(np.asarray(years, dtype=np.int64), n),
            **cols,
        },
        copy=False,  # the columns as they are, not consolidated into a copy
    )


def harvest_breakdown(
    flow: FlowResult, stands: pd.DataFrame, periods: Periods, curve_codes: tuple[str, ...]
) -> pd.DataFrame:
    """Harvest by period, zone and species (the code cut: a species or an analysis unit):
    area, volume, per year, mean age and m3/ha. Thinnings count in the volume, clearcuts in
    the area and the age."""
    sim = flow.simulation
    cols = [
        "period",
        "start_year",
        "zone",
        "species",
        "harvest_ha",
        "harvest_m3",
        "harvest_ha_per_year",
        "harvest_m3_per_year",
        "mean_harvest_age_years",
        "volume_m3_ha",
    ]
    if not len(sim.event_stand):
        return pd.DataFrame(columns=cols)
    codes, names = _zone_names(stands)
    # group by each code's place among the codes in name order, not by its name: the same
    # groups in the same order, without a string per event
    by_name = sorted(curve_codes)
    rank = np.array([by_name.index(c) for c in curve_codes], dtype=np.int64)
    clear = sim.event_treatment == 0
    ev = pd.DataFrame(
        {
            "period": sim.event_period.astype(np.int64),
            "zone_code": codes[sim.event_stand],
            "species": rank[sim.event_code.astype(np.int64)],
            "harvest_ha": np.where(clear, sim.event_area_ha, 0.0),
            "harvest_m3": sim.event_volume_m3,
            "age_area": np.where(clear, sim.event_age_years * sim.event_area_ha, 0.0),
        },
        copy=False,  # the new arrays as they are, not consolidated into a copy
    )
    g = ev.groupby(["period", "zone_code", "species"], as_index=False, sort=True).sum()
    L = periods.period_years
    out = pd.DataFrame(
        {
            "period": g["period"],
            "start_year": periods.start_years[g["period"].to_numpy() - 1],
            "zone": np.array(names, dtype=object)[g["zone_code"].to_numpy()],
            "species": np.array(by_name, dtype=object)[g["species"].to_numpy()],
            "harvest_ha": g["harvest_ha"],
            "harvest_m3": g["harvest_m3"],
            "harvest_ha_per_year": g["harvest_ha"] / L,
            "harvest_m3_per_year": g["harvest_m3"] / L,
            "mean_harvest_age_years": g["age_area"] / g["harvest_ha"],
            "volume_m3_ha": g["harvest_m3"] / g["harvest_ha"],
        }
    )
    return out[cols]


def revenue_by_period(
    flow: FlowResult,
    arrays: StandArrays,
    curves: CurveSet,
    scenario: Scenario,
    periods: Periods,
) -> tuple[np.ndarray, np.ndarray]:
    """Net revenue of each period's harvest (price x volume of clearcuts and thinnings, per
    code cut, minus the regeneration cost x area of the code each cut regrows as) and its
    value discounted to ``start_year`` from the harvest moment, with
    ``economics.discount_rate``. NaN where a species has no price (or, for the discounted
    value, without a discount rate)."""
    P = periods.count
    nan = np.full(P, np.nan)
    cfg = [scenario.species[c] for c in curves.codes]
    if any(c.price_per_m3 is None for c in cfg):
        return nan, nan.copy()
    sim = flow.simulation
    price = np.array([c.price_per_m3 for c in cfg], dtype=np.float64)
    regen = np.array([c.regen_cost_per_ha for c in cfg], dtype=np.float64)
    value = price[sim.event_code] * sim.event_volume_m3
    cost = regen[sim.regen_to] * sim.regen_area_ha  # paid by the code regrown into
    net = np.bincount(sim.event_period - 1, value, P) if len(value) else np.zeros(P)
    if len(cost):
        net = net - np.bincount(sim.regen_period - 1, cost, P)
    rate = scenario.economics.discount_rate
    if rate is None:
        return net, nan
    t = periods.harvest_years - periods.start_year
    return net, net / growth_factor(t, rate, scenario.economics.compounding)


@dataclass(frozen=True)
class Check:
    """One test of sustainability: whether it holds, in words with numbers, and the first
    period in which it fails (None when it holds or has no period)."""

    name: str
    holds: bool
    detail: str
    period: int | None = None

    @property
    def label(self) -> str:
        return CHECK_LABELS[self.name]


@dataclass(frozen=True)
class Verdict:
    """Whether the flow is sustainable over the horizon, why, and what limits it."""

    sustainable: bool
    headline: str  # one sentence
    statement: str  # the headline's grounds, with numbers
    limited_by: str
    checks: list[Check] = field(default_factory=list)

    def table(self) -> pd.DataFrame:
        """One row per check (verdict.csv): its name, whether it holds, the first failing
        period, the detail and the check in words."""
        rows = [
            {
                "check": c.name,
                "holds": c.holds,
                "first_failing_period": c.period,
                "detail": c.detail,
                "label": c.label,
            }
            for c in self.checks
        ]
        frame = pd.DataFrame(
            rows, columns=["check", "holds", "first_failing_period", "detail", "label"]
        )
        frame["first_failing_period"] = frame["first_failing_period"].astype("Int64")
        return frame

    def to_dict(self) -> dict:
        return asdict(self)


def judge(
    wood_flow: pd.DataFrame,
    flow: FlowResult,
    scenario: Scenario,
    ltsy_m3_per_year: float,
    regulated_hlb_stock_m3: float,
    long_term_periods: int,
    cover: pd.DataFrame | None = None,
) -> Verdict:
    """Judge the flow over the horizon (methods: docs/methods.md, "The verdict").

    The flow is called sustainable when all of these hold: every period meets what the flow
    policy requires of it; the ending growing stock meets ``flow.ending_stock``; the growing
    stock on the harvestable land base either is not falling (by more than 1%) over the last
    ``long_term_periods`` periods or ends at least at ``regulated_hlb_stock_m3``, the stock of
    a regulated forest on that land cut at its minimum harvest ages (a surplus still being
    drawn down is not a forest run down); the harvest of those periods is within the
    long-term sustained yield (harvestable area x maximum MAI); every cover target holds in
    every period.
    """
    wf = wood_flow
    P = len(wf)
    k = max(1, min(long_term_periods, P))
    checks = [
        _policy_check(wf, flow),
        _ending_check(wf, scenario.flow.ending_stock),
        _stock_check(wf, k, regulated_hlb_stock_m3),
        _ltsy_check(wf, k, ltsy_m3_per_year),
    ]
    if cover is not None and len(cover):
        checks.append(_cover_check(cover))
    return _verdict(checks, wf, flow, P * scenario.scenario.period_years)


def _policy_check(wf: pd.DataFrame, flow: FlowResult) -> Check:
    """Every period meets what the flow policy requires of it."""
    P = len(wf)
    policy = flow_policy(flow.policy).label
    short = ~wf["meets_policy"].to_numpy(dtype=bool)
    if short.any():
        p = int(np.flatnonzero(short)[0])
        row = wf.iloc[p]
        return Check(
            "flow_policy_held",
            False,
            f"the harvest falls short of the {policy} in {int(short.sum())} of {P} "
            f"periods, first in period {p + 1} ({int(row['start_year'])}-"
            f"{int(row['end_year'])}): {row['harvest_m3']:,.0f} m3 of the "
            f"{row['policy_required_m3']:,.0f} m3 required",
            p + 1,
        )
    else:
        return Check(
            "flow_policy_held",
            True,
            f"the harvest meets the {policy} in all {P} periods "
            f"({wf['harvest_m3_per_year'].min():,.0f} to "
            f"{wf['harvest_m3_per_year'].max():,.0f} m3/year)",
        )


def _ending_check(wf: pd.DataFrame, need: float) -> Check:
    """The ending growing stock meets flow.ending_stock."""
    P = len(wf)
    gs0 = float(wf["growing_stock_start_m3"].iloc[0])
    gs1 = float(wf["growing_stock_end_m3"].iloc[-1])
    ratio = gs1 / gs0 if gs0 > 0 else float("nan")
    ok = gs1 >= need * gs0 * (1 - 1e-6)
    return Check(
        "ending_growing_stock",
        bool(ok),
        f"the growing stock ends at {gs1:,.0f} m3, {100 * ratio:.1f}% of the initial "
        f"{gs0:,.0f} m3 (flow.ending_stock requires {100 * need:.0f}%)",
        None if ok else P,
    )


def _stock_check(wf: pd.DataFrame, k: int, regulated_hlb_stock_m3: float) -> Check:
    """The harvestable stock is not falling over the last k periods, or ends at least at a
    regulated forest's."""
    P = len(wf)
    hlb = wf["hlb_growing_stock_end_m3"].to_numpy()
    ref = float(wf["hlb_growing_stock_start_m3"].iloc[P - k])
    change = hlb[-1] / ref - 1 if ref > 0 else 0.0
    stable = change >= -STOCK_TOLERANCE
    enough = hlb[-1] >= regulated_hlb_stock_m3 * (1 - STOCK_TOLERANCE)
    ok = stable or enough
    detail = (
        f"the growing stock on the harvestable land base changes by {100 * change:+.1f}% over "
        f"the last {k} periods, to {hlb[-1]:,.0f} m3, "
        f"{hlb[-1] / regulated_hlb_stock_m3:.2f} times the {regulated_hlb_stock_m3:,.0f} m3 a "
        "regulated forest cut at the minimum harvest ages holds"
        if regulated_hlb_stock_m3 > 0
        else f"the growing stock on the harvestable land base changes by {100 * change:+.1f}% "
        f"over the last {k} periods, to {hlb[-1]:,.0f} m3"
    )
    if not ok:
        detail += ": the harvest runs the forest down"
    below = np.flatnonzero(
        (hlb < regulated_hlb_stock_m3 * (1 - STOCK_TOLERANCE)) & (np.r_[np.inf, hlb[:-1]] > hlb)
    )
    return Check(
        "harvestable_stock_kept",
        bool(ok),
        detail,
        None if ok else int(below[0] + 1) if len(below) else P,
    )


def _ltsy_check(wf: pd.DataFrame, k: int, ltsy_m3_per_year: float) -> Check:
    """The harvest of the last k periods is within the long-term sustained yield."""
    P = len(wf)
    lt = wf["harvest_m3_per_year"].to_numpy()[P - k :]
    lt_mean = float(lt.mean())
    ok = lt_mean <= ltsy_m3_per_year * (1 + 1e-6)
    over = np.flatnonzero(lt > ltsy_m3_per_year * (1 + 1e-6))
    if ltsy_m3_per_year > 0:
        share = f"{100 * lt_mean / ltsy_m3_per_year:.0f}% of"
    else:  # no harvestable land or growth: a share of nothing has no meaning
        share = "against"
    return Check(
        "within_long_term_sustained_yield",
        bool(ok),
        f"the harvest of the last {k} periods, {lt_mean:,.0f} m3/year, is "
        f"{share} the long-term sustained yield of {ltsy_m3_per_year:,.0f} m3/year"
        + ("" if ok else ", so it cannot be held beyond the horizon"),
        None if ok or not len(over) else int(P - k + over[0] + 1),
    )


def _cover_check(cover: pd.DataFrame) -> Check:
    """Every cover target holds in every period."""
    bad = cover[~cover["met"].astype(bool)]
    if len(bad):
        first = bad.sort_values("period").iloc[0]
        return Check(
            "cover_targets_met",
            False,
            f"{len(bad)} target-periods miss their cover target, first in period "
            f"{int(first['period'])}: zone {first['zone']} {first['rule']} reaches "
            f"{100 * first['share']:.1f}%",
            int(first["period"]),
        )
    n = int(len(cover.groupby(["zone", "rule"])))
    which = {1: "the cover target holds", 2: "both cover targets hold"}.get(
        n, f"all {n} cover targets hold"
    )
    return Check("cover_targets_met", True, f"{which} in every period")


def _verdict(checks: list[Check], wf: pd.DataFrame, flow: FlowResult, horizon: int) -> Verdict:
    """The headline and the statement from the checks."""
    policy = flow_policy(flow.policy).label
    sustainable = all(c.holds for c in checks)
    level = (
        f"the {policy} of {flow.level_m3_per_year:,.0f} m3/year"
        if flow.policy in ("even", "optimize")
        else f"the {policy} (period 1: {float(wf['harvest_m3_per_year'].iloc[0]):,.0f} m3/year)"
    )
    failed = [c for c in checks if not c.holds]
    if sustainable:
        headline = (
            f"Sustainable over the {horizon}-year horizon: {level} passes all {len(checks)} checks."
        )
        grounds = checks
    else:
        first = min((c.period for c in failed if c.period is not None), default=None)
        where = f", the first in period {first}" if first is not None else ""
        which = "; ".join(c.label[0].lower() + c.label[1:] for c in failed)
        headline = (
            f"Not sustainable over the {horizon}-year horizon: {level} fails "
            f"{len(failed)} of {len(checks)} checks ({which}){where}."
        )
        grounds = failed
    statement = headline[:-1] + ": " + "; ".join(c.detail for c in grounds) + "."
    return Verdict(sustainable, headline, statement, flow.binding, checks)


def horizon_indicators(
    wood_flow: pd.DataFrame,
    flow: FlowResult,
    scenario: Scenario,
    gross_ha: float,
    harvestable_ha: float,
    ltsy: dict[str, float],
    regulated_hlb_stock_m3: float,
    verdict: Verdict,
    lp: dict | None = None,
    monte_carlo: pd.DataFrame | None = None,
) -> pd.DataFrame:
    """One row per indicator over the whole horizon: ``indicator``, ``value``, ``unit``."""
    wf = wood_flow
    P = len(wf)
    L = scenario.scenario.period_years
    h = wf["harvest_m3"].to_numpy()
    rows: list[tuple[str, float, str]] = [
        ("horizon_years", P * L, "years"),
        ("gross_area_ha", gross_ha, "ha"),
        ("harvestable_ha", harvestable_ha, "ha"),
        ("flow_level_m3_per_year", flow.level_m3_per_year, "m3/year"),
        ("mean_harvest_m3_per_year", float(h.sum()) / (P * L), "m3/year"),
    ]
    for name, rows_ in term_rows(P).items():
        rows.append(
            (f"{name}_m3_per_year", float(wf["harvest_m3_per_year"].iloc[rows_].mean()), "m3/year")
        )
    rows += _harvest_rows(wf, flow, ltsy)
    rows += _stock_rows(wf, regulated_hlb_stock_m3, verdict)
    rows += _optional_rows(wf, flow, L, lp, monte_carlo)
    frame = pd.DataFrame(rows, columns=["indicator", "value", "unit"])
    frame["meaning"] = frame["indicator"].map(MEANINGS)
    frame["label"] = frame["indicator"].map(LABELS)
    return frame


Row = tuple[str, float, str]


def _harvest_rows(wf: pd.DataFrame, flow: FlowResult, ltsy: dict[str, float]) -> list[Row]:
    """Harvest totals and means, against the long-term sustained yield; the largest change."""
    P = len(wf)
    h = wf["harvest_m3"].to_numpy()
    ha = wf["harvest_ha"].to_numpy()
    rows: list[Row] = []
    culm = ltsy.get("at_culmination", float("nan"))
    rows += [
        ("total_harvest_m3", float(h.sum()), "m3"),
        ("total_harvest_ha", float(ha.sum()), "ha"),
        (
            "mean_harvest_age_years",
            float(np.dot(wf["mean_harvest_age_years"].fillna(0), ha) / ha.sum())
            if ha.sum() > 0
            else float("nan"),
            "years",
        ),
        (
            "mean_harvest_volume_m3_ha",
            float(h.sum() / ha.sum()) if ha.sum() > 0 else float("nan"),
            "m3/ha",
        ),
        ("ltsy_at_culmination_m3_per_year", culm, "m3/year"),
        ("ltsy_at_min_harvest_age_m3_per_year", ltsy.get("at_min_harvest_age", np.nan), "m3/year"),
        ("level_to_ltsy", flow.level_m3_per_year / culm if culm > 0 else np.nan, "fraction"),
    ]
    change = wf["change_from_previous"].to_numpy()
    if P > 1 and np.isfinite(change[1:]).any():
        j = int(np.nanargmin(change[1:])) + 1
        drop = -float(change[j]) if change[j] < -1e-9 else 0.0
        rise = float(np.nanmax(change[1:]))
        rows += [
            ("largest_drop", drop, "fraction"),
            ("largest_drop_period", float(j + 1) if drop > 0 else np.nan, "period"),
            ("largest_increase", rise if rise > 1e-9 else 0.0, "fraction"),
        ]
    return rows


def _stock_rows(wf: pd.DataFrame, regulated_hlb_stock_m3: float, verdict: Verdict) -> list[Row]:
    """Growing stock at the start and the end, growth, disturbance and the verdict."""
    h = wf["harvest_m3"].to_numpy()
    gs0 = float(wf["growing_stock_start_m3"].iloc[0])
    gs1 = float(wf["growing_stock_end_m3"].iloc[-1])
    hlb0 = float(wf["hlb_growing_stock_start_m3"].iloc[0])
    hlb1 = float(wf["hlb_growing_stock_end_m3"].iloc[-1])
    growth = float(wf["net_growth_m3"].sum())
    return [
        ("initial_growing_stock_m3", gs0, "m3"),
        ("ending_growing_stock_m3", gs1, "m3"),
        ("ending_to_initial_growing_stock", gs1 / gs0 if gs0 > 0 else np.nan, "fraction"),
        ("initial_hlb_growing_stock_m3", hlb0, "m3"),
        ("ending_hlb_growing_stock_m3", hlb1, "m3"),
        ("ending_to_initial_hlb_growing_stock", hlb1 / hlb0 if hlb0 > 0 else np.nan, "fraction"),
        ("regulated_hlb_growing_stock_m3", regulated_hlb_stock_m3, "m3"),
        ("total_net_growth_m3", growth, "m3"),
        ("harvest_to_net_growth", float(h.sum()) / growth if growth > 0 else np.nan, "fraction"),
        ("total_disturbed_ha", float(wf["disturbed_ha"].sum()), "ha"),
        ("total_disturbed_m3", float(wf["disturbed_m3"].sum()), "m3"),
        ("periods_meeting_policy", float(wf["meets_policy"].sum()), "periods"),
        ("sustainable", float(verdict.sustainable), "1 = yes"),
    ]


def _optional_rows(
    wf: pd.DataFrame,
    flow: FlowResult,
    L: int,
    lp: dict | None,
    monte_carlo: pd.DataFrame | None,
) -> list[Row]:
    """Revenue, the spatial rules' cost, the LP and the disturbance risk, where they apply
    (``L``: the period length [years])."""
    P = len(wf)
    rows: list[Row] = []
    if wf["net_revenue"].notna().all():
        rows.append(("total_net_revenue", float(wf["net_revenue"].sum()), "currency"))
    if wf["discounted_net_revenue"].notna().all():
        rows.append(("net_present_value", float(wf["discounted_net_revenue"].sum()), "currency"))
    if "spatial_cost_m3_per_period" in flow.details:
        rows.append(
            (
                "spatial_cost_m3_per_year",
                flow.details["spatial_cost_m3_per_period"] / L,
                "m3/year",
            )
        )
    if lp is not None:
        rows.append(
            ("lp_harvest_m3_per_year", lp["total_harvest_m3"] / (P * L), "m3/year"),
        )
        if lp.get("level_m3_per_period") is not None:
            rows.append(("lp_level_m3_per_year", lp["level_m3_per_period"] / L, "m3/year"))
        rows.append(("gap_to_lp", lp["gap_of_schedule_to_lp"], "fraction"))
    if monte_carlo is not None and len(monte_carlo):
        rows.append(
            (
                "max_shortfall_probability",
                float(monte_carlo["shortfall_probability"].max()),
                "fraction",
            )
        )
    return rows
