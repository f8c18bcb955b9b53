"""Harvest scheduling as a linear programme (Model II; Johnson & Scheurman 1977), solved by HiGHS.

Strata group the harvestable area of the stands by species, site class, age class and zone
(area-weighted mean age and site). Variables, all areas [ha]:

- ``x[s, p]``: area of existing stratum s first cut in period p (only where its age at the
  harvest moment reaches the minimum harvest age), and ``x[s, 0]``: never cut;
- ``y[g, i, j]``: area of regeneration group g (species x site class) that was cut in period i
  and is cut again in period j > i (where its new age reaches the minimum), ``y[g, i, 0]``:
  not cut again.

Rows: each stratum's area is conserved; the area cut from group g in period i is the area that
regenerates in i and is cut again later or never; harvest H_p is the volume of every cut in
period p; flow rows tie consecutive H_p (even: equal, or within a band; non-declining:
H_p >= H_{p-1}; none: no flow rows); the ending growing stock (including the area outside the
harvestable land base, which is never cut) is at least ``ending_stock`` x the initial; an
optional area cap.
Objectives: ``max-even-flow`` maximises H_1 under the flow rows; ``max-volume`` the sum of H_p.

The solution is mapped back to stands by cutting, within each stratum, stands in stand-id order
until each period's stratum area is used (the last stand partly), and the volume of that
stand schedule, read from the stands' own curves, is compared with the LP's: the gap is what
aggregation into strata costs or adds.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import highspy
import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy.sparse import coo_matrix

from yieldscape.errors import InputError
from yieldscape.growth.economics import growth_factor
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule.cover import CoverRules

INF = highspy.kHighsInf


@dataclass
class Strata:
    """Strata of the harvestable area: per stratum species, site, mean age, area, min age."""

    species_idx: NDArray
    site_index: NDArray
    age_years: NDArray
    area_ha: NDArray
    min_age: NDArray
    regen_delay: NDArray
    group: NDArray  # regeneration group (species x site class)
    of_stand: NDArray  # stratum of each stand (-1: no harvestable area)
    group_species: NDArray
    group_site: NDArray
    group_min_age: NDArray
    group_delay: NDArray
    zone: NDArray  # zone code of each stratum
    group_zone: NDArray  # zone code of each regeneration group

    @property
    def n(self) -> int:
        return len(self.area_ha)


def make_strata(
    stands: StandArrays, zone_codes: NDArray, site_step: float, age_step: float
) -> Strata:
    """Group stands with harvestable area by species, site class, age class and zone."""
    area = stands.harvestable_ha if stands.harvestable_ha is not None else stands.area_ha
    live = area > 0
    site_cls = np.round(stands.site_index / site_step).astype(np.int64)
    age_cls = np.floor(stands.age_years / age_step).astype(np.int64)
    key = pd.DataFrame(
        {
            "sp": stands.species_idx,
            "si": site_cls,
            "age": age_cls,
            "zone": zone_codes,
            "min": stands.min_harvest_age,
        }
    )
    codes = key[live].groupby(list(key.columns), sort=True).ngroup().to_numpy()
    of_stand = np.full(stands.n, -1, dtype=np.int64)
    of_stand[live] = codes
    n = int(codes.max()) + 1 if len(codes) else 0
    w = area[live]

    def mean(v: NDArray) -> NDArray:
        return np.bincount(codes, v[live] * w, n) / np.bincount(codes, w, n)

    first = np.zeros(n, dtype=np.int64)
    first[codes[::-1]] = np.flatnonzero(live)[::-1]  # a representative stand per stratum
    site = mean(stands.site_index)
    gkey = pd.DataFrame(
        {
            "sp": stands.species_idx[first],
            "si": site_cls[first],
            "min": stands.min_harvest_age[first],
            "zone": zone_codes[first],  # regrowth stays in its zone (cover targets)
        }
    )
    group = gkey.groupby(list(gkey.columns), sort=True).ngroup().to_numpy()
    ng = int(group.max()) + 1 if n else 0
    gfirst = np.zeros(ng, dtype=np.int64)
    gfirst[group[::-1]] = np.arange(n)[::-1]
    return Strata(
        species_idx=stands.species_idx[first],
        site_index=site,
        age_years=mean(stands.age_years),
        area_ha=np.bincount(codes, w, n),
        min_age=stands.min_harvest_age[first],
        regen_delay=stands.regen_delay_years[first],
        group=group,
        of_stand=of_stand,
        group_species=stands.species_idx[first][gfirst],
        group_site=site[gfirst],
        group_min_age=stands.min_harvest_age[first][gfirst],
        group_delay=stands.regen_delay_years[first][gfirst],
        zone=np.asarray(zone_codes)[first],
        group_zone=np.asarray(zone_codes)[first][gfirst],
    )


@dataclass
class LPModel:
    """min cost.x subject to row_lo <= A x <= row_hi, x >= 0 (A in CSC form)."""

    cost: NDArray
    matrix: object  # scipy.sparse.csc_matrix
    row_lo: NDArray
    row_hi: NDArray
    h_col: NDArray
    ending_row: int
    flow_rows: list[int]
    x_stratum: NDArray  # per column: stratum of an x column, -1 otherwise
    x_period: NDArray  # per column: first-cut period of an x column, 0 otherwise
    strata: int
    periods: int = 0
    context: dict = field(default_factory=dict)  # what an infeasibility message needs


@dataclass
class LPResult:
    status: str
    objective: float
    harvest_m3: NDArray  # LP harvest per period
    seconds: float
    columns: int
    rows: int
    strata: int
    duals: dict[str, float] = field(default_factory=dict)
    cut_area: NDArray = field(default_factory=lambda: np.zeros(0))  # (strata, periods)


@dataclass(frozen=True)
class Economics:
    """For ``max-npv``: net price [per m3] and regeneration cost [per ha] by species index,
    the real discount rate and compounding, and how the standing forest at the horizon's end
    is valued (``"none"``, or ``"standing"``: its volume at the net price)."""

    price: NDArray
    regen_cost: NDArray
    rate: float
    compounding: str = "continuous"
    terminal_value: str = "none"


def solve_lp(*args, **kwargs) -> LPResult:  # noqa: ANN002, ANN003 - those of build_lp
    """Build the Model II LP of the module docstring (:func:`build_lp`, same arguments) and
    solve it with HiGHS."""
    t0 = time.perf_counter()
    return solve_highs(build_lp(*args, **kwargs), t0)


def build_lp(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    strata: Strata,
    objective: str = "max-even-flow",
    policy: str = "even",
    band: float = 0.0,
    ending_stock: float = 1.0,
    max_area_ha: float | None = None,
    economics: Economics | None = None,
    cover: CoverRules | None = None,
    stand_zone: NDArray | None = None,
    disturbance: float = 0.0,
) -> LPModel:
    """The Model II LP of the module docstring as a matrix model."""
    P, L, off = periods.count, float(periods.period_years), periods.offset_years
    S, G = strata.n, int(strata.group.max()) + 1 if strata.n else 0
    # columns, built per period as arrays: kind (0 x, 1 y), a (stratum or group), b (period
    # cut: x first cut / y established), c (y period cut again; 0 never), volume, end volume
    parts = []
    for p in range(1, P + 1):
        age_h = strata.age_years + (p - 1) * L + off
        ok = np.flatnonzero(age_h >= strata.min_age - 1e-9)
        v = curves.volume_m3_ha(strata.species_idx[ok], age_h[ok], strata.site_index[ok])
        parts.append(
            (np.zeros(len(ok)), ok, np.full(len(ok), p), np.zeros(len(ok)), v, np.zeros(len(ok)))
        )
    v_end = curves.volume_m3_ha(strata.species_idx, strata.age_years + P * L, strata.site_index)
    parts.append((np.zeros(S), np.arange(S), np.zeros(S), np.zeros(S), np.zeros(S), v_end))
    for i in range(1, P + 1):
        for j in range(i + 1, P + 1):
            age = (j - i) * L - strata.group_delay
            ok = np.flatnonzero(age >= strata.group_min_age - 1e-9)
            v = curves.volume_m3_ha(strata.group_species[ok], age[ok], strata.group_site[ok])
            parts.append(
                (
                    np.ones(len(ok)),
                    ok,
                    np.full(len(ok), i),
                    np.full(len(ok), j),
                    v,
                    np.zeros(len(ok)),
                )
            )
        age = (P - i) * L + (L - off) - strata.group_delay
        v = curves.volume_m3_ha(strata.group_species, age, strata.group_site)
        parts.append((np.ones(G), np.arange(G), np.full(G, i), np.zeros(G), np.zeros(G), v))
    kind, a_, b_, c_, vol_a, end_a = (np.concatenate(col) for col in zip(*parts, strict=True))
    vol_a[vol_a < 1e-6] = 0.0  # below a millilitre per hectare: nothing to a solver
    end_a[end_a < 1e-6] = 0.0
    a_, b_, c_ = a_.astype(np.int64), b_.astype(np.int64), c_.astype(np.int64)
    xs, ys = kind == 0, kind == 1
    nvar = len(kind)
    h_col = nvar + np.arange(P)  # H_p variables
    cols_idx = np.arange(nvar)

    # expected disturbance: a share dist of the standing area each period (after its harvest)
    dist = 1.0 - (1.0 - disturbance) ** L if disturbance > 0 else 0.0
    keep = 1.0 - dist
    start = np.where(xs, 0, b_)  # exposed from the period after establishment (x: from 1)
    surv_cut = np.where(
        period_cut_all(xs, b_, c_) > 0,
        keep ** np.maximum(period_cut_all(xs, b_, c_) - start - 1, 0),
        0.0,
    )
    surv_end = keep ** (P - start)

    def surv_at(p: int) -> NDArray:
        """Share of each column's area still standing at period p's harvest moment."""
        return keep ** np.maximum(p - start - 1, 0)

    # rows: [0, S) stratum areas; then G*P regeneration balances; then P harvest definitions
    reg0 = S
    harv0 = S + G * P
    ri: list[NDArray] = []
    cj: list[NDArray] = []
    vv: list[NDArray] = []

    def put(rows: NDArray, cols: NDArray, values: NDArray | float) -> None:
        """Add matrix entries (rows[k], cols[k]) = values[k]."""
        ri.append(np.asarray(rows))
        cj.append(np.asarray(cols))
        vv.append(np.broadcast_to(np.asarray(values, dtype=np.float64), np.shape(cols)))

    put(a_[xs], cols_idx[xs], 1.0)  # stratum areas
    # y established in period b_ leaves the balance of (g, b_); cut again in c_ it enters
    # the balance of (g, c_); existing area cut in b_ enters the balance of (group, b_)
    put(reg0 + a_[ys] * P + (b_[ys] - 1), cols_idx[ys], 1.0)
    yi = ys & (c_ > 0)
    put(reg0 + a_[yi] * P + (c_[yi] - 1), cols_idx[yi], -surv_cut[yi])
    xi = xs & (b_ > 0)
    put(reg0 + strata.group[a_[xi]] * P + (b_[xi] - 1), cols_idx[xi], -surv_cut[xi])
    if dist > 0:  # disturbed standing area regrows in its group from that period
        group_of = np.where(xs, strata.group[np.clip(a_, 0, max(S - 1, 0))], a_)
        last = np.where(period_cut_all(xs, b_, c_) > 0, period_cut_all(xs, b_, c_), P + 1)
        for k in range(1, P + 1):  # periods
            exposed = (k > start) & (k < last)
            frac = keep ** (k - start[exposed] - 1) * dist
            put(reg0 + group_of[exposed] * P + (k - 1), cols_idx[exposed], -frac)
    period_cut = np.where(xs, b_, c_)  # period in which a column cuts (0: none)
    hv = (period_cut > 0) & (vol_a > 0)
    put(harv0 + period_cut[hv] - 1, cols_idx[hv], vol_a[hv] * surv_cut[hv])  # harvest ...
    put(harv0 + np.arange(P), h_col, -1.0)  # ... minus H_p is 0
    lo = [*strata.area_ha, *np.zeros(G * P), *np.zeros(P)]
    hi = [*strata.area_ha, *np.zeros(G * P), *np.zeros(P)]
    nrow = harv0 + P

    def add_row(cidx: NDArray, cval: NDArray, rlo: float, rhi: float) -> int:
        nonlocal nrow
        put(np.full(len(cidx), nrow), cidx, cval)
        lo.append(rlo)
        hi.append(rhi)
        nrow += 1
        return nrow - 1

    flow_rows = []
    for p in range(2, P + 1 if policy != "none" else 2):  # flow rows on consecutive H_p
        pair = np.array([h_col[p - 1], h_col[p - 2]])
        if policy == "nondeclining":
            flow_rows.append(add_row(pair, np.array([1.0, -1.0]), 0.0, INF))
        else:
            flow_rows.append(add_row(pair, np.array([1.0, -(1 - band)]), 0.0, INF))
            flow_rows.append(add_row(pair, np.array([1.0, -(1 + band)]), -INF, 0.0))
    reserved_end = reserved_stock(stands, curves, periods, dist)
    initial = float(
        np.dot(
            curves.volume_m3_ha(stands.species_idx, stands.age_years, stands.site_index),
            stands.area_ha,
        )
    )
    idx = np.flatnonzero(end_a > 0)
    ending_row = add_row(
        idx, end_a[idx] * surv_end[idx], ending_stock * initial - reserved_end, INF
    )
    if cover is not None:  # old- and young-forest shares per zone at each harvest moment
        zone_col = np.where(
            xs,
            strata.zone[np.clip(a_, 0, max(S - 1, 0))],
            strata.group_zone[np.clip(a_, 0, max(G - 1, 0))],
        )
        x_age0 = strata.age_years[np.clip(a_, 0, max(S - 1, 0))]
        y_delay = strata.group_delay[np.clip(a_, 0, max(G - 1, 0))]
        reserved = stands.area_ha - (
            stands.harvestable_ha if stands.harvestable_ha is not None else stands.area_ha
        )
        sz = stand_zone if stand_zone is not None else np.zeros(stands.n, dtype=np.int64)
        for rule in cover.rules:  # a handful of rules x periods
            inz = np.ones(nvar, bool) if rule.zone < 0 else zone_col == rule.zone
            rz = np.ones(stands.n, bool) if rule.zone < 0 else sz == rule.zone
            for p in range(1, P + 1):
                t = (p - 1) * L + off
                # standing at p's harvest moment, after its cut: existing area not yet cut,
                # and regrowth established at or before p and not cut again by then
                x_up = xs & ((b_ > p) | (b_ == 0))
                y_up = ys & (b_ <= p) & ((c_ > p) | (c_ == 0))
                age = np.where(xs, x_age0 + t, (p - b_) * L - y_delay)
                hit = np.flatnonzero((x_up | y_up) & inz & rule.counts(age))
                fixed = reserved_cover(
                    reserved[rz],
                    stands.age_years[rz],
                    p,
                    L,
                    off,
                    dist,
                    stands.regen_delay_years[rz],
                    rule,
                )
                bound = rule.share * cover.area_of(rule) - fixed
                # old forest: at least the target share; young forest: at most
                lo_, hi_ = (bound, INF) if rule.kind == "old" else (-INF, bound)
                add_row(hit, surv_at(p)[hit], lo_, hi_)
    if max_area_ha is not None:
        for p in range(1, P + 1):
            idx = np.flatnonzero(period_cut == p)
            add_row(idx, surv_cut[idx], -INF, max_area_ha)
    rows_i, rows_j, vals = ri, cj, vv
    ncol = nvar + P
    cost = np.zeros(ncol)
    if objective == "max-volume":
        cost[h_col] = -1.0
    elif objective == "max-npv":
        if economics is None:
            raise InputError("flow.objective = 'max-npv' needs prices and a discount rate")
        sp = np.where(
            xs,
            strata.species_idx[np.clip(a_, 0, max(S - 1, 0))],
            strata.group_species[np.clip(a_, 0, max(G - 1, 0))],
        )
        t_cut = (period_cut - 1) * L + off
        disc = 1.0 / growth_factor(t_cut, economics.rate, economics.compounding)
        npv = np.where(
            period_cut > 0, (economics.price[sp] * vol_a - economics.regen_cost[sp]) * disc, 0.0
        )
        if economics.terminal_value == "standing":
            npv = npv + economics.price[sp] * end_a / growth_factor(
                np.full(nvar, P * L), economics.rate, economics.compounding
            )
        cost[:nvar] = -npv
    else:
        cost[h_col[0]] = -1.0
    A = coo_matrix(
        (np.concatenate(vals), (np.concatenate(rows_i), np.concatenate(rows_j))), shape=(nrow, ncol)
    ).tocsc()
    xcol = xs & (b_ > 0)
    x_stratum = np.where(xcol, a_, -1)
    x_period = np.where(xcol, b_, 0)
    return LPModel(
        cost,
        A,
        np.array(lo, dtype=np.float64),
        np.array(hi, dtype=np.float64),
        h_col,
        ending_row,
        flow_rows,
        np.r_[x_stratum, np.full(P, -1)],
        np.r_[x_period, np.zeros(P, dtype=np.int64)],
        S,
        periods=P,
        context={
            "ending_stock": ending_stock,
            "max_area_ha": max_area_ha,
            "policy": policy,
            "cover": cover is not None,
        },
    )


def _new_highs() -> highspy.Highs:
    """A silent HiGHS instance (its banner, printed once per process, kept off stdout)."""
    import os
    import sys

    sys.stdout.flush()
    saved = os.dup(1)
    try:
        with open(os.devnull, "w") as null:
            os.dup2(null.fileno(), 1)
            h = highspy.Highs()
    finally:
        os.dup2(saved, 1)
        os.close(saved)
    h.setOptionValue("output_flag", False)
    return h


def solve_highs(model: LPModel, t0: float | None = None) -> LPResult:
    """Solve with HiGHS (interior point for large models); explain an infeasible model."""
    A = model.matrix
    ncol, nrow = A.shape[1], A.shape[0]
    P = model.periods
    t0 = time.perf_counter() if t0 is None else t0
    h = _new_highs()
    if model.strata * P > 20_000:
        h.setOptionValue("solver", "ipm")  # far faster than simplex on large harvest LPs
    lp = highspy.HighsLp()
    lp.num_col_, lp.num_row_ = ncol, nrow
    lp.col_cost_ = model.cost
    lp.col_lower_ = np.zeros(ncol)
    lp.col_upper_ = np.full(ncol, INF)
    lp.row_lower_ = model.row_lo
    lp.row_upper_ = model.row_hi
    lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
    lp.a_matrix_.start_ = A.indptr.astype(np.int32)
    lp.a_matrix_.index_ = A.indices.astype(np.int32)
    lp.a_matrix_.value_ = A.data
    if h.passModel(lp) not in (highspy.HighsStatus.kOk, highspy.HighsStatus.kWarning):
        raise RuntimeError("HiGHS did not accept the harvest LP")
    h.run()
    status = h.modelStatusToString(h.getModelStatus())
    if h.getModelStatus() != highspy.HighsModelStatus.kOptimal:
        raise InputError(explain_infeasible(status, **model.context))
    sol = h.getSolution()
    x = np.asarray(sol.col_value)
    dual = np.asarray(sol.row_dual)
    cut = np.zeros((model.strata, P))
    m = model.x_stratum >= 0
    np.add.at(cut, (model.x_stratum[m], model.x_period[m] - 1), x[m])
    # HiGHS reports duals of a minimisation; the objective here is maximised (cost = -volume)
    duals = {"ending_stock_m3_per_m3": float(-dual[model.ending_row])}
    if model.flow_rows:
        duals["flow_rows_m3_per_m3"] = float(-dual[model.flow_rows].sum())
    return LPResult(
        status,
        float(-h.getInfo().objective_function_value),
        x[model.h_col],
        time.perf_counter() - t0,
        ncol,
        nrow,
        model.strata,
        duals,
        cut,
    )


def period_cut_all(xs: NDArray, b_: NDArray, c_: NDArray) -> NDArray:
    """Period in which each column cuts (0: never)."""
    return np.where(xs, b_, c_)


def reserved_cover(
    area: NDArray, age0: NDArray, p: int, L: float, off: float, dist: float, delay: NDArray, rule
) -> float:  # noqa: ANN001
    """Expected old (or young) area at period p's harvest moment outside the harvestable land
    base, under the expected disturbance: never disturbed since the start, or last disturbed
    in period k < p (at its midpoint) and regrown since."""
    t = (p - 1) * L + off
    keep = 1.0 - dist

    total = float(np.dot(area, rule.counts(age0 + t))) * keep ** (p - 1)
    for k in range(1, p):  # periods before p
        share = dist * keep ** (p - 1 - k)
        total += share * float(np.dot(area, rule.counts((p - k) * L + off - L / 2 - delay)))
    return total


def reserved_stock(
    stands: StandArrays, curves: CurveSet, periods: Periods, dist: float = 0.0
) -> float:
    """Volume at the horizon's end on the area outside the harvestable land base."""
    if stands.harvestable_ha is None:
        return 0.0
    area = stands.area_ha - stands.harvestable_ha
    P, L = periods.count, periods.period_years
    age = stands.age_years + P * L
    keep = 1.0 - dist
    v = curves.volume_m3_ha(stands.species_idx, age, stands.site_index)
    total = float(np.dot(v, area)) * keep**P
    for k in range(1, P + 1 if dist > 0 else 1):  # last disturbed in period k
        regrown = (P - k) * L + L / 2 - stands.regen_delay_years
        v = curves.volume_m3_ha(stands.species_idx, regrown, stands.site_index)
        total += dist * keep ** (P - k) * float(np.dot(v, area))
    return total


def explain_infeasible(
    status: str,
    ending_stock: float,
    max_area_ha: float | None,
    policy: str,
    cover: bool = False,
) -> str:
    """Which constraint families can make the harvest LP infeasible, and what to relax."""
    hints = [f"flow.ending_stock = {ending_stock:g} (try a lower share)"]
    if cover:
        hints.append("the [[cover]] targets (the forest may not hold them even uncut)")
    if max_area_ha is not None:
        hints.append(f"harvest.max_area_ha_per_period = {max_area_ha:g}")
    if policy in ("even", "nondeclining"):
        hints.append(f"the {policy} flow rows (try flow.band > 0)")
    return (
        f"the harvest LP is {status.lower()}: no schedule meets every constraint; the "
        f"families that can bind are {', '.join(hints)}"
    )
