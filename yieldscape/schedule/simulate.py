"""The rule-based harvest simulation: period by period, cut eligible stands in priority order.

State is a set of stand *parts*: each starts as a whole stand; cutting part of a stand's area
(the last stand taken in a period, to hit the volume target exactly) splits it into the uncut
remainder and a regenerating part. Area outside the harvestable land base starts as a part of
its own that grows but is never eligible. Everything inside a period is a numpy operation over
all parts; the only Python loop runs over periods.

Each period p has a target T_p and a floor F_p given by the flow level H and band b:
T_1 = F_1 = H, and for later periods T_p = min(H, (1 + b) h_{p-1}), F_p = (1 - b) h_{p-1},
where h is the harvest actually taken. The period takes as much of T_p as the eligible stands
and the area cap allow; a harvest below F_p makes the level H infeasible.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from yieldscape.policies import EvenFlow, FixedTargets, TargetRule, cut_order
from yieldscape.projection import CurveSet, Periods, StandArrays, growing_stock_m3
from yieldscape.schedule.cover import CoverRules
from yieldscape.schedule.picker import sequential_pick
from yieldscape.schedule.spatial import SpatialRules

_REL = 1e-9  # relative tolerance on volume targets
_MIN_PART_HA = 1e-9  # a smaller partial cut (<= ~1e-6 m3) is not worth a split


@dataclass
class Simulation:
    """Outcome of one simulated horizon at a flow level."""

    level_m3: float
    feasible: bool
    fail_period: int | None = None  # 1-based
    fail_reason: str = ""
    harvest_m3: NDArray = field(default_factory=lambda: np.zeros(0))
    harvest_ha: NDArray = field(default_factory=lambda: np.zeros(0))
    harvest_age_area: NDArray = field(default_factory=lambda: np.zeros(0))  # sum age x area
    growing_stock_start_m3: NDArray = field(default_factory=lambda: np.zeros(0))
    growing_stock_end_m3: NDArray = field(default_factory=lambda: np.zeros(0))
    initial_stock_m3: float = 0.0
    ending_stock_m3: float = float("nan")
    ending_hlb_stock_m3: float = float("nan")  # on the harvestable land base
    hlb_stock_start_m3: NDArray = field(default_factory=lambda: np.zeros(0))
    cover_area_ha: NDArray = field(default_factory=lambda: np.zeros((0, 0)))  # periods x rules
    disturbed_ha: NDArray = field(default_factory=lambda: np.zeros(0))
    disturbed_m3: NDArray = field(default_factory=lambda: np.zeros(0))
    final_age_years: NDArray = field(default_factory=lambda: np.zeros(0))  # parts at the end
    final_area_ha: NDArray = field(default_factory=lambda: np.zeros(0))
    # what the flow policy asked of each period (record=True only)
    target_m3: NDArray = field(default_factory=lambda: np.zeros(0))
    floor_m3: NDArray = field(default_factory=lambda: np.zeros(0))
    # the stand parts at chosen period boundaries (record=True only), by boundary index k:
    # k = 0 is the start, k = p the end of period p (before the next period's harvest)
    snapshots: dict[int, PartsSnapshot] = field(default_factory=dict)
    # harvest events, one per cut part (record=True only)
    event_stand: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    event_period: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    event_age_years: NDArray = field(default_factory=lambda: np.zeros(0))
    event_area_ha: NDArray = field(default_factory=lambda: np.zeros(0))
    event_volume_m3: NDArray = field(default_factory=lambda: np.zeros(0))


@dataclass(frozen=True)
class PartsSnapshot:
    """The stand parts at one period boundary: each part's stand (row of the stand table), age
    [years] (negative while regeneration is delayed), area [ha] and whether it lies on the
    harvestable land base."""

    stand: NDArray[np.int64]
    age_years: NDArray[np.float64]
    area_ha: NDArray[np.float64]
    in_hlb: NDArray[np.bool_]


def _pick_prefix(
    vol: NDArray, area: NDArray, target: float, cap: float
) -> tuple[NDArray, int, float]:
    """Aspatial pick: candidates in order until the target or the cap; the last one partly.

    Returns the positions cut whole, the position cut partly (-1: none) and its fraction.
    """
    cum_v = np.cumsum(vol)
    cum_a = np.cumsum(area)
    goal = min(target, float(cum_v[-1]))  # an unbounded target asks for everything
    n = int(
        min(
            np.searchsorted(cum_v, goal * (1 + _REL), side="right"),
            np.searchsorted(cum_a, cap * (1 + _REL), side="right"),
        )
    )
    got_v = cum_v[n - 1] if n else 0.0
    got_a = cum_a[n - 1] if n else 0.0
    if n < len(vol) and goal - got_v > _REL * goal:
        frac = min((goal - got_v) / vol[n], (cap - got_a) / area[n], 1.0)
        if frac * area[n] > _MIN_PART_HA:
            return np.arange(n), n, frac
    return np.arange(n), -1, 0.0


def simulate(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    level_m3: float,
    band: float = 0.0,
    priority: str = "oldest",
    max_area_ha: float | None = None,
    ending_stock: float = 0.0,
    record: bool = False,
    targets: NDArray | None = None,
    rule: TargetRule | None = None,
    stable_periods: int = 0,
    spatial: SpatialRules | None = None,
    planned: NDArray | None = None,
    cover: CoverRules | None = None,
    disturbance: float = 0.0,
    rng: np.random.Generator | None = None,
    snapshots: Sequence[int] = (),
) -> Simulation:
    """Run the horizon at flow level ``level_m3`` [m3 per period].

    With ``record`` every period's totals, growing stock and harvest events are kept and the
    run goes on to the end even where a floor is missed; without it the run stops at the
    first missed floor (the flow search only needs the verdict). ``targets`` [m3 per period]
    replaces the level and band by fixed per-period targets, each also its period's floor;
    ``rule`` (a :mod:`yieldscape.policies` target rule) replaces both. With
    ``stable_periods`` = K > 0 the run also fails unless the growing stock on the harvestable
    land base at the end is at least its value K periods before the end. ``spatial``
    (:class:`SpatialRules`) adds green-up and opening-size rules over the adjacency graph.
    ``planned`` (per stand, a period) puts stands planned for the period or earlier ahead of
    the others in the queue (the mapping of an LP schedule onto stands). ``cover``
    (:class:`CoverRules`) keeps old- and young-forest shares per zone; it needs
    ``stands.zone_idx``. ``disturbance`` is a stand-replacing rate per year applied at each
    period's midpoint to area not cut in the period: as expected area fractions, or, with
    ``rng``, as whole stands drawn at random (Monte Carlo). With ``record``, ``snapshots``
    names the period boundaries (0 .. periods) at which the stand parts are kept.
    """
    if spatial is not None:
        spatial = spatial.fresh()
    if rule is None:
        rule = FixedTargets(tuple(targets)) if targets is not None else EvenFlow(level_m3, band)
    P, L, off = periods.count, float(periods.period_years), periods.offset_years
    cap = np.inf if max_area_ha is None else float(max_area_ha)
    # parts: start as copies of the stand arrays; partial cuts append
    stand = np.arange(stands.n, dtype=np.int64)
    area = stands.area_ha.copy()
    min_age = stands.min_harvest_age.copy()
    if stands.harvestable_ha is not None:
        # area outside the harvestable land base is its own part that grows and is never cut
        reserved = np.flatnonzero(stands.area_ha - stands.harvestable_ha > 1e-9)
        area = np.minimum(stands.harvestable_ha, stands.area_ha)
        stand = np.r_[stand, reserved]
        area = np.r_[area, stands.area_ha[reserved] - area[reserved]]
        min_age = np.r_[min_age, np.full(len(reserved), np.inf)]
    in_hlb = np.ones(len(stand), dtype=bool)  # parts on the harvestable land base
    if stands.harvestable_ha is not None:
        in_hlb[stands.n :] = False
    sp = stands.species_idx[stand]
    si = curves.site_terms(sp, stands.site_index[stand])  # site terms, worked out once
    age = stands.age_years[stand]
    delay = stands.regen_delay_years[stand]
    rank = stands.id_rank[stand]
    zone = (
        stands.zone_idx[stand]
        if stands.zone_idx is not None
        else np.zeros(len(stand), dtype=np.int64)
    )

    sim = Simulation(level_m3=level_m3, feasible=True)
    sim.initial_stock_m3 = growing_stock_m3(curves, sp, age, si, area)
    h = np.zeros(P)
    ha = np.zeros(P)
    age_area = np.zeros(P)
    gs_start = np.full(P, np.nan)
    gs_end = np.full(P, np.nan)
    hlb_start = np.full(P, np.nan)
    events: list[tuple[NDArray, ...]] = []
    cover_rows: list[NDArray] = []
    dist_ha = np.zeros(P)
    dist_m3 = np.zeros(P)
    targets_p, floors_p = np.zeros(P), np.zeros(P)
    kept_at = set(snapshots) if record else set()

    def snapshot() -> PartsSnapshot:
        return PartsSnapshot(stand.copy(), age.copy(), area.copy(), in_hlb.copy())

    for p in range(P):
        if p in kept_at:
            sim.snapshots[p] = snapshot()
        if record:
            gs_start[p] = sim.initial_stock_m3 if p == 0 else gs_end[p - 1]
        target, floor = rule.bounds(p, h[p - 1] if p else 0.0)
        targets_p[p], floors_p[p] = target, floor
        if record or p == P - stable_periods:
            hlb_start[p] = growing_stock_m3(
                curves, sp[in_hlb], age[in_hlb], si.take(in_hlb), area[in_hlb]
            )
        age_h = age + off
        elig = np.flatnonzero((age_h >= min_age - 1e-9) & (area > 0))
        vol_ha = curves.volume_m3_ha(sp[elig], age_h[elig], terms=si.take(elig))
        keep = vol_ha > 0
        elig, vol_ha = elig[keep], vol_ha[keep]

        cut_full = np.zeros(0, dtype=np.intp)
        part, frac, blocked = -1, 0.0, ""
        if target > 0 and len(elig):
            first = None if planned is None else (planned[stand[elig]] > p + 1).astype(np.int8)
            order = cut_order(priority, age_h[elig], min_age[elig], vol_ha, rank[elig], first)
            cand = elig[order]
            v_ha = vol_ha[order]
            vol = v_ha * area[cand]
            rules: list = [spatial] if spatial is not None else []
            if cover is not None:
                rules.append(cover.budgets(zone[cand], age_h[cand], zone, age_h, area))
            if not rules:
                full_pos, part_pos, frac = _pick_prefix(vol, area[cand], target, cap)
            else:
                full_pos, part_pos, frac, refused = sequential_pick(
                    p * L + off, stand[cand], vol, area[cand], target, cap, rules
                )
                names = [r.name for r, n in zip(rules, refused, strict=True) if n]
                blocked = " and ".join(dict.fromkeys(names))
            cut_full = cand[full_pos]
            part = int(cand[part_pos]) if part_pos >= 0 else -1
            h[p] = vol[full_pos].sum() + (frac * vol[part_pos] if part >= 0 else 0.0)
            ha[p] = area[cut_full].sum() + (frac * area[part] if part >= 0 else 0.0)
            age_area[p] = np.dot(age_h[cut_full], area[cut_full]) + (
                frac * area[part] * age_h[part] if part >= 0 else 0.0
            )
            if record:
                ev_parts = cut_full if part < 0 else np.r_[cut_full, part]
                ev_area = area[ev_parts].copy()
                if part >= 0:
                    ev_area[-1] *= frac
                ev_pos = full_pos if part < 0 else np.r_[full_pos, part_pos]
                ev_vol = v_ha[ev_pos] * ev_area
                events.append(
                    (
                        stand[ev_parts],
                        np.full(len(ev_parts), p + 1),
                        age_h[ev_parts],
                        ev_area,
                        ev_vol,
                    )
                )

        if record and cover is not None:
            after_age = age_h.copy()
            after_area = area.copy()
            after_age[cut_full] = 0.0
            if part >= 0:  # the cut share of the last stand restarts; the rest stays
                after_age = np.r_[after_age, 0.0]
                after_area = np.r_[after_area, frac * area[part]]
                after_area[part] -= frac * area[part]
            zones_after = zone if part < 0 else np.r_[zone, zone[part]]
            cover_rows.append(cover.measure(zones_after, after_age, after_area))
        if h[p] < floor * (1 - _REL) and sim.feasible:
            sim.feasible = False
            sim.fail_period = p + 1
            if blocked:
                sim.fail_reason = f"eligible volume {blocked} allow exhausted"
            elif len(cut_full) + (part >= 0) == len(elig):
                sim.fail_reason = "eligible volume exhausted"
            else:
                sim.fail_reason = "area cap reached"
            if not record:
                break

        # grow: uncut parts age one period; cut parts restart after their delay
        regrown = L - off - delay
        new_age = age + L
        new_age[cut_full] = regrown[cut_full]
        if part >= 0:
            stand = np.r_[stand, stand[part]]
            sp, si = np.r_[sp, sp[part]], si.append(part)
            min_age, delay = np.r_[min_age, min_age[part]], np.r_[delay, delay[part]]
            rank = np.r_[rank, rank[part]]
            zone = np.r_[zone, zone[part]]
            in_hlb = np.r_[in_hlb, in_hlb[part]]
            new_age = np.r_[new_age, regrown[part]]
            cut_area = frac * area[part]
            area = np.r_[area, cut_area]
            area[part] -= cut_area
        n_before = len(age)
        age = new_age
        if disturbance > 0:
            # stand-replacing disturbance at the period's midpoint on area not cut this period
            exposed = np.zeros(len(age), dtype=bool)
            exposed[:n_before] = True
            exposed[cut_full] = False
            exposed &= area > 0
            share = 1.0 - (1.0 - disturbance) ** L
            if rng is None:  # expected fractions: the burnt share of each stand regrows as one
                idx = np.flatnonzero(exposed)
                lost = share * area[idx]
                vol = curves.volume_m3_ha(sp[idx], age[idx] - L / 2, terms=si.take(idx))
                dist_ha[p], dist_m3[p] = lost.sum(), float(np.dot(vol, lost))
                key = stand[idx] * 2 + in_hlb[idx]
                _, first, inv = np.unique(key, return_index=True, return_inverse=True)
                rep = idx[first]
                area[idx] -= lost
                stand = np.r_[stand, stand[rep]]
                sp, si = np.r_[sp, sp[rep]], si.append(rep)
                min_age, delay = np.r_[min_age, min_age[rep]], np.r_[delay, delay[rep]]
                rank, zone = np.r_[rank, rank[rep]], np.r_[zone, zone[rep]]
                in_hlb = np.r_[in_hlb, in_hlb[rep]]
                age = np.r_[age, L / 2 - delay[rep]]
                area = np.r_[area, np.bincount(inv, lost)]
            else:  # Monte Carlo: whole stands burn with that probability
                burn = rng.random(stands.n) < share
                hit = np.flatnonzero(exposed & burn[stand])
                vol = curves.volume_m3_ha(sp[hit], age[hit] - L / 2, terms=si.take(hit))
                dist_ha[p], dist_m3[p] = area[hit].sum(), float(np.dot(vol, area[hit]))
                age[hit] = L / 2 - delay[hit]
        if record or p == P - 1:
            stock = growing_stock_m3(curves, sp, age, si, area)
            gs_end[p] = stock
            if p == P - 1:
                sim.ending_stock_m3 = stock
                sim.ending_hlb_stock_m3 = growing_stock_m3(
                    curves, sp[in_hlb], age[in_hlb], si.take(in_hlb), area[in_hlb]
                )

    if sim.feasible and sim.ending_stock_m3 < ending_stock * sim.initial_stock_m3 * (1 - _REL):
        sim.feasible = False
        sim.fail_reason = "ending growing stock below the requirement"
    if sim.feasible and stable_periods > 0:
        ref = hlb_start[P - stable_periods]
        if sim.ending_hlb_stock_m3 < ref * (1 - 1e-6):
            sim.feasible = False
            sim.fail_reason = (
                f"growing stock on the harvestable land base still falls over "
                f"the last {stable_periods} periods"
            )
    if P in kept_at:
        sim.snapshots[P] = snapshot()
    sim.hlb_stock_start_m3 = hlb_start
    sim.target_m3, sim.floor_m3 = targets_p, floors_p
    sim.disturbed_ha, sim.disturbed_m3 = dist_ha, dist_m3
    if record:
        sim.final_age_years, sim.final_area_ha = age, area
    if cover_rows:
        sim.cover_area_ha = np.vstack(cover_rows)
    sim.harvest_m3, sim.harvest_ha, sim.harvest_age_area = h, ha, age_area
    sim.growing_stock_start_m3, sim.growing_stock_end_m3 = gs_start, gs_end
    if record and events:
        cols = [np.concatenate(c) for c in zip(*events, strict=True)]
        (
            sim.event_stand,
            sim.event_period,
            sim.event_age_years,
            sim.event_area_ha,
            sim.event_volume_m3,
        ) = cols
    return sim
