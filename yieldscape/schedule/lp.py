"""Harvest scheduling as a linear programme (Model II; Johnson & Scheurman 1977), solved by HiGHS.

Strata group the harvestable area of the stands by species (code), site class, age class and
zone (area-weighted mean age and site). Variables, all areas [ha]:

- ``x[s, p]``: area of existing stratum s first cut in period p (only where its age at the
  harvest moment reaches the minimum harvest age), and ``x[s, 0]``: never cut;
- ``y[g, i, j]``: area of regeneration group g that was established in period i and is cut
  again in period j > i (where its new age reaches the minimum), ``y[g, i, 0]``: not cut
  again. A group is keyed by the code the area regrows as (its curve, delay and thinnings),
  the site class, that code's minimum harvest age there and the zone
  (:mod:`yieldscape.schedule.lp_regimes`);
- ``z[n, p, o]``: where a code's regeneration is a choice (``regenerate_as`` an array), the
  area cut in period p from the sources of choice n that regrows as option o.

Rows: each stratum's area is conserved; the area established in group g in period i is what
the cuts of period i send to g (each cut regrows as its code's transitions say, in their
shares; a choice's cut is split among its options by the z); harvest H_p is the volume of
every cut in period p (the standing volume: gross less the thinnings taken) plus the
thinnings taken in p on the area standing uncut; flow rows tie consecutive H_p (even: equal,
or within a band; non-declining: H_p >= H_{p-1}; none: no flow rows; ``FLOW_ROWS`` picks them
by policy); the ending growing stock (including the area outside the harvestable land base,
which is never cut) is at least ``ending_stock`` x the initial; an optional area cap.
Objectives: ``max-even-flow`` maximises the level M that every period's harvest reaches (H_p >=
M: the max-min flow; the band rows limit the change between periods, never lift the level);
``max-volume`` the sum of H_p;
``max-npv`` the net present value. ``max-level`` is the bound of a rule-based run: its flow
rows are the limits the rule-based search obeys (``BOUND_ROWS``, on a level column M and the
clearcut volumes C_p beside H_p), and the LP maximises the level M that every period's harvest
reaches (the max-min even flow), with the total harvest as a tie-break.
Without transitions and thinnings every cut regrows in its own stratum's group, as before.

The solution is mapped back to stands by cutting, within each stratum, stands in stand-id order
until each period's stratum area is used (the last stand partly), and the volume of that
stand schedule, read from the stands' own curves, is compared with the LP's: the gap is what
aggregation into strata costs or adds.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace

import highspy
import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy.sparse import coo_matrix, csc_matrix, csr_matrix

from yieldscape.errors import InputError
from yieldscape.growth.economics import growth_factor
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.regimes import Regimes
from yieldscape.schedule.cover import CoverRule, CoverRules
from yieldscape.schedule.lp_regimes import (
    Regrowth,
    Removals,
    regeneration_groups,
    thinnings_by_period,
)
from yieldscape.schedule.lp_units import Cells, Partition, UnitFlow

INF = highspy.kHighsInf
# strata x periods from which interior point solves the LP (:func:`lp_solver`)
LP_IPM_FROM = 500
LEVEL_OBJECTIVES = ("max-even-flow", "max-level")  # the objectives on a level column M
TIE_BREAK = 1e-7  # their weight on each period's harvest beside the level's 1


@dataclass
class Strata:
    """Strata of the harvestable area: per stratum species, site, mean age, area, min age; the
    regeneration groups (:mod:`yieldscape.schedule.lp_regimes`) and where each cut regrows."""

    species_idx: NDArray
    site_index: NDArray
    age_years: NDArray
    area_ha: NDArray
    min_age: NDArray
    regen_delay: NDArray
    group: NDArray  # each stratum's own group (its code, site class, zone; -1: none)
    of_stand: NDArray  # stratum of each stand (-1: no harvestable area)
    group_species: NDArray
    group_site: NDArray
    group_min_age: NDArray
    group_delay: NDArray
    zone: NDArray  # zone code of each stratum
    group_zone: NDArray  # zone code of each regeneration group
    regrowth: Regrowth  # the groups (or choice) the area cut from each stratum and group enters
    regimes: Regimes | None = None  # the stands' transitions and thinnings
    # the cells (management unit and partition membership) the strata and their regrowth
    # never leave (:mod:`yieldscape.schedule.lp_units`): each stratum's and group's cell
    cells: Cells | None = None
    cell: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    group_cell: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

    @property
    def n(self) -> int:
        return len(self.area_ha)

    @property
    def groups(self) -> int:
        """The number of regeneration groups."""
        return len(self.group_species)


def make_strata(
    stands: StandArrays,
    zone_codes: NDArray,
    site_step: float,
    age_step: float,
    disturbed: bool = False,
    cells: Cells | None = None,
) -> Strata:
    """Group stands with harvestable area by species, site class, age class, zone and cell
    (unit and partition membership, :class:`~yieldscape.schedule.lp_units.Cells`; default one
    cell), and find the regeneration groups they regrow into (with ``disturbed`` each
    stratum's own group too: disturbed area regrows as its own code); regrowth stays in its
    zone and cell."""
    area = stands.cuttable_ha
    live = area > 0
    if cells is None:
        cells = Cells.single(stands.n, int(stands.species_idx.max(initial=0)) + 1)
    # zone and cell as one key (in zone order, then cell), which the groups carry as "zone"
    pairs, zone_cell = np.unique(
        np.column_stack([np.asarray(zone_codes), cells.of_stand]), axis=0, return_inverse=True
    )
    zone_cell = zone_cell.reshape(-1)
    site_cls = np.round(stands.site_index / site_step).astype(np.int64)
    age_cls = np.floor(stands.age_years / age_step).astype(np.int64)
    key = pd.DataFrame(
        {
            "sp": stands.species_idx,
            "si": site_cls,
            "age": age_cls,
            "zone": zone_cell,
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
    sources = pd.DataFrame(
        {"sp": stands.species_idx[first], "si": site_cls[first], "zone": zone_cell[first]}
    ).assign(rep=first, site=site)
    groups = regeneration_groups(stands, sources, disturbed)
    g = groups.frame
    g_key = g["zone"].to_numpy(np.int64)
    return Strata(
        species_idx=stands.species_idx[first],
        site_index=site,
        age_years=mean(stands.age_years),
        area_ha=np.bincount(codes, w, n),
        min_age=stands.min_harvest_age[first],
        regen_delay=stands.regen_delay_years[first],
        group=groups.own,
        of_stand=of_stand,
        group_species=g["sp"].to_numpy(np.int64),
        group_site=g["site"].to_numpy(np.float64),
        group_min_age=g["min"].to_numpy(np.float64),
        group_delay=g["delay"].to_numpy(np.float64),
        zone=pairs[zone_cell[first], 0],
        group_zone=pairs[g_key, 0],  # regrowth stays in its zone (cover targets) and cell
        regrowth=groups.regrowth,
        regimes=stands.regimes,
        cells=cells,
        cell=pairs[zone_cell[first], 1],
        group_cell=pairs[g_key, 1],
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
    codes: tuple[str, ...] = ()  # the CurveSet codes
    regimes: bool = False  # transitions or thinnings in the model
    # takes a solution to the area regrowing from each code into each, per period (rows
    # (p - 1) C^2 + from C + to; C codes)
    regeneration: object = None  # scipy.sparse.csr_matrix
    level_col: int = -1  # the level column M (max-even-flow, max-level), -1 otherwise
    level_cols: list[int] = field(default_factory=list)  # each unit's level column
    unit_h_cols: list[NDArray] = field(default_factory=list)  # each unit's harvest columns
    units: tuple[str, ...] = ()  # the units' names
    constraints: list[Constraint] = field(default_factory=list)  # rows whose duals are reported


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
    # area [ha] cut in each period from each code and regrowing as each (periods x codes x
    # codes: the transitions' shares and the LP's choices), and the codes
    regen_area_ha: NDArray = field(default_factory=lambda: np.zeros((0, 0, 0)))
    codes: tuple[str, ...] = ()
    # the level M [m3 per period] (max-even-flow, max-level; with units the sum of theirs)
    level_m3: float | None = None
    units: tuple[str, ...] = ()  # the management units' names
    unit_harvest_m3: NDArray = field(default_factory=lambda: np.zeros((0, 0)))  # (units, P)
    unit_level_m3: NDArray = field(default_factory=lambda: np.zeros(0))  # each unit's level
    # per reported row: kind, name, unit, period, rhs_unit, activity, lower, upper and dual
    # (the objective's change per unit of the right-hand side; :func:`constraint_table`)
    constraints: pd.DataFrame = field(default_factory=lambda: pd.DataFrame())

    def regeneration(self) -> pd.DataFrame:
        """The LP's regeneration as a table: ``period``, ``from_species``, ``to_species``,
        ``area_ha`` (rows with an area)."""
        p, i, j = np.nonzero(self.regen_area_ha > 1e-6)
        return pd.DataFrame(
            {
                "period": (p + 1).astype(np.int64),
                "from_species": [self.codes[k] for k in i],
                "to_species": [self.codes[k] for k in j],
                "area_ha": self.regen_area_ha[p, i, j],
            }
        )


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
    units: Sequence[UnitFlow] | None = None,
    partitions: Sequence[Partition] = (),
) -> LPModel:
    """The Model II LP of the module docstring as a matrix model.

    Columns: :func:`lp_columns` (x and y), then H_1..H_P, then the choice columns z
    (:func:`choice_columns`), then per unit its level M_u, its clearcut volumes C_(u,p) (the
    bound) and, with more than one unit, its harvests H_(u,p); then the partitions' volumes
    V_(k,p). Rows, in this order: the stratum areas, the regeneration balances (G x P) and the
    choices' split rows (choices x P), the harvest definitions (P), per unit its harvest and
    clearcut definitions and the flow rows of its policy (:data:`FLOW_ROWS`), the ending
    stock (per unit), the partitions, the cover rows (rule x period), the area cap (P).

    ``units`` (:mod:`yieldscape.schedule.lp_units`): one flow per unit of ``strata.cells``, in
    unit order (default: one unit with ``policy``, ``band`` and ``ending_stock``); the level
    objectives then maximise the sum of the units' levels. ``partitions``: the limits on the
    harvest of each partition of ``strata.cells``.
    """
    P = periods.count
    cols = lp_columns(strata, curves, periods)
    surv = _survival(cols, periods, disturbance)
    choices = choice_columns(strata, P)
    h_col = cols.n + np.arange(P)  # H_p variables
    z_col = cols.n + P + np.arange(choices.n)  # choice variables
    units = list(units) if units else [UnitFlow("", policy, band, ending_stock)]
    alloc = _Columns(cols.n + P + choices.n)
    regrow = _cuts_regrow(strata, cols, surv)
    m = MatrixBuilder()
    _area_rows(m, strata, cols)
    balance0 = _regeneration_rows(m, strata, cols, regrow, choices, z_col, P)
    _disturbed_regrowth(m, strata, cols, surv, balance0, P)
    cuts, thins = _cut_entries(cols, surv), _thin_entries(cols, surv)
    _volume_rows(m, (cuts, thins), h_col)
    cells = strata.cells or Cells.single(stands.n, len(curves.codes))
    col_cell = cols.per_column(strata.cell, strata.group_cell)
    flows = _unit_flows(m, alloc, units, objective, h_col, cuts, thins, cells.unit[col_cell])
    constraints = [
        _ending_stock_row(m, stands, curves, periods, cols, surv, u.ending_stock, mask, u.name)
        for u, mask in _unit_masks(units, cells, col_cell, stands)
    ]
    if partitions:
        code = cols.per_column(strata.species_idx, strata.group_species)
        in_part = cells.member[col_cell, code]  # (columns, partitions)
        constraints += _partition_rows(m, alloc, partitions, in_part, cuts, thins, h_col)
    if cover is not None:
        constraints += _cover_rows(m, stands, strata, periods, cols, surv, cover, stand_zone)
    if max_area_ha is not None:
        constraints += _area_cap_rows(m, cols, surv, max_area_ha, P)
    cost = _lp_costs(objective, cols, strata, periods, economics, h_col, choices, surv)
    cost = np.r_[cost, np.zeros(alloc.n - len(cost))]
    if flows.levels:
        cost[flows.levels] = -1.0
        # tie-break: of the schedules at the highest level, the one with the most volume (a
        # weight far too small to trade any level for volume)
        cost[h_col] = -TIE_BREAK
    matrix, row_lo, row_hi = m.build(len(cost))
    C = len(curves.codes)
    regen = _regeneration_map(strata, cols, regrow, choices, z_col, P, C, len(cost))
    context = {"ending_stock": ending_stock, "max_area_ha": max_area_ha, "policy": policy}
    context["cover"] = cover is not None
    context["partitions"] = tuple(p.name for p in partitions)
    return LPModel(
        cost,
        matrix,
        row_lo,
        row_hi,
        h_col,
        constraints[0].row,
        flows.rows,
        *_first_cuts(cols, len(cost) - cols.n),
        strata.n,
        periods=P,
        context=context,
        codes=tuple(curves.codes),
        regeneration=regen,
        regimes=strata.regimes is not None and (strata.regimes.changes or strata.regimes.thins),
        level_col=flows.levels[0] if len(flows.levels) == 1 else -1,
        level_cols=flows.levels,
        unit_h_cols=flows.harvest,
        units=tuple(u.name for u in units),
        constraints=constraints,
    )


class _Columns:
    """Hands out the LP's columns after the first ``n``, in the order asked for."""

    def __init__(self, n: int) -> None:
        self.n = n

    def take(self, count: int) -> NDArray:
        out = self.n + np.arange(count)
        self.n += count
        return out


@dataclass(frozen=True)
class Constraint:
    """A row whose dual the LP reports: its kind (``ending_stock``, ``partition``, ``cover``,
    ``area_cap``), name, unit, period (0: none), row, and the unit of its right-hand side. A
    share row (``rhs_unit`` "share") is V - s H_p >= 0 (<= 0) on the columns ``scale_col``
    (H_p) and ``value_col`` (the partition's volume V): its dual is reported per unit of
    share, the row's dual times H_p."""

    kind: str
    name: str
    unit: str
    period: int
    row: int
    rhs_unit: str
    scale_col: int = -1
    value_col: int = -1


@dataclass(frozen=True)
class _Flows:
    rows: list[int]  # every unit's flow rows
    levels: list[int]  # each unit's level column (level objectives; else empty)
    harvest: list[NDArray]  # each unit's H_(u,p) columns (one unit: the H_p)


def _unit_masks(
    units: list[UnitFlow], cells: Cells, col_cell: NDArray, stands: StandArrays
) -> list[tuple[UnitFlow, tuple[NDArray, NDArray] | None]]:
    """Per unit, the masks of its stands and its columns (None: one unit, every one)."""
    if len(units) == 1:
        return [(units[0], None)]
    stand_unit = cells.unit[cells.of_stand]
    return [(u, (stand_unit == k, cells.unit[col_cell] == k)) for k, u in enumerate(units)]


def _unit_flows(
    m: MatrixBuilder,
    alloc: _Columns,
    units: list[UnitFlow],
    objective: str,
    h_col: NDArray,
    cuts: tuple[NDArray, NDArray, NDArray],
    thins: tuple[NDArray, NDArray, NDArray],
    col_unit: NDArray,
) -> _Flows:
    """Per unit: its level column (level objectives), with the bound its clearcut volumes
    C_(u,p) and their rows, with several units its harvests H_(u,p) and their rows, then the
    flow rows of its policy (:data:`BOUND_ROWS` for the bound, :data:`FLOW_ROWS` otherwise)."""
    P, bound = len(h_col), objective == "max-level"
    rows, levels, harvest = [], [], []
    for k, u in enumerate(units):
        level = int(alloc.take(1)[0]) if objective in LEVEL_OBJECTIVES else -1
        c_col = alloc.take(P) if bound else np.zeros(0, dtype=np.int64)
        mine = None if len(units) == 1 else col_unit
        uh = h_col
        if mine is not None:  # the unit's harvest H_(u,p)
            uh = alloc.take(P)
            _volume_rows(m, (_of(cuts, mine, k), _of(thins, mine, k)), uh)
        if bound:
            if u.policy not in BOUND_ROWS:
                raise ValueError(f"no bound rows for flow policy {u.policy!r}")
            _volume_rows(m, (cuts if mine is None else _of(cuts, mine, k),), c_col)
            rows += BOUND_ROWS[u.policy](m, uh, c_col, level, u.band)
        else:
            # a name without an entry takes the even rows, as before (the pipeline itself
            # passes the rule-based "stepdown" and "targets" as "even")
            rows += FLOW_ROWS.get(u.policy, even_flow_rows)(m, uh, u.band)
            if level >= 0:  # every period at least the level
                rows += [_pair(m, h, level, -1.0, 0.0, INF) for h in uh]
        levels += [level] if level >= 0 else []
        harvest.append(uh)
    return _Flows(rows, levels, harvest)


def _of(entries: tuple[NDArray, NDArray, NDArray], col_unit: NDArray, k: int) -> tuple:
    """The (period, column, value) entries of unit k's columns."""
    keep = col_unit[entries[1]] == k
    return tuple(e[keep] for e in entries)


def _partition_rows(
    m: MatrixBuilder,
    alloc: _Columns,
    partitions: Sequence[Partition],
    in_part: NDArray,
    cuts: tuple[NDArray, NDArray, NDArray],
    thins: tuple[NDArray, NDArray, NDArray],
    h_col: NDArray,
) -> list[Constraint]:
    """Per partition k, its volume V_(k,p) in each period (the harvest entries of its columns)
    and its limits: V - s H_p >= 0 (minimum share s), <= 0 (maximum share), V >= (<=) an
    amount."""
    out = []
    for k, part in enumerate(partitions):
        v_col = alloc.take(len(h_col))
        entries = [tuple(e[in_part[cuts[1], k]] for e in cuts)]
        entries.append(tuple(e[in_part[thins[1], k]] for e in thins))
        _volume_rows(m, entries, v_col)
        for key, value in part.limits():
            low = key.startswith("min")
            name = f"{part.name}.{key}"
            for p, (v, h) in enumerate(zip(v_col, h_col, strict=True), start=1):
                if key.endswith("share"):  # V - s H_p >= 0 (<= 0)
                    row = _pair(m, v, h, -value, *((0.0, INF) if low else (-INF, 0.0)))
                    out.append(Constraint("partition", name, "", p, row, "share", h, v))
                else:
                    bounds = (value, INF) if low else (-INF, value)
                    row = m.add_row(np.array([v]), np.ones(1), *bounds)
                    out.append(Constraint("partition", name, "", p, row, "m3", -1, v))
    return out


def _first_cuts(cols: Columns, rest: int) -> tuple[NDArray, NDArray]:
    """Per column (the area columns, then ``rest`` more), the stratum and period of an x
    column's first cut (-1 and 0 otherwise)."""
    first_cut = cols.is_x & (cols.first > 0)
    return (
        np.r_[np.where(first_cut, cols.index, -1), np.full(rest, -1)],
        np.r_[np.where(first_cut, cols.first, 0), np.zeros(rest, dtype=np.int64)],
    )


@dataclass(frozen=True)
class Choices:
    """The choice columns z[n, p, o], in column order: the area cut in period p that choice n
    sends to its option o (a Model I-style choice of regime inside Model II; Johnson &
    Scheurman 1977, For. Sci. Monogr. 18). Per column: the choice, the period, the option's
    group and code, and the code cut."""

    choice: NDArray
    period: NDArray
    group: NDArray
    code: NDArray
    code_cut: NDArray

    @property
    def n(self) -> int:
        return len(self.choice)


def choice_columns(strata: Strata, P: int) -> Choices:
    """A column per choice, period and option, periods outermost."""
    r = strata.regrowth
    T = len(r.option_group)
    opt = np.tile(np.arange(T), P)
    choice = np.repeat(np.arange(r.choices), np.diff(r.option_start))[opt]
    return Choices(
        choice,
        np.repeat(np.arange(1, P + 1), T),
        r.option_group[opt],
        r.option_code[opt],
        r.choice_code[choice],
    )


@dataclass(frozen=True)
class Columns:
    """The area columns of the LP, in column order (the H_p columns follow them), all [ha].

    ``is_x``: a column of an existing stratum (x), else of a regeneration group (y);
    ``index``: its stratum or group; ``first``: x, the period of its first cut (0: never cut),
    y, the period its regrowth was established; ``again``: y, the period it is cut again (0:
    never; always 0 for x); ``volume_m3_ha``: what a cut yields (0 where nothing is cut);
    ``end_volume_m3_ha``: what stands at the horizon's end (never-cut columns only); the
    ``thin_*`` entries: what thinnings take in each period in which a column stands uncut.
    """

    is_x: NDArray
    index: NDArray
    first: NDArray
    again: NDArray
    volume_m3_ha: NDArray
    end_volume_m3_ha: NDArray
    # thinnings while a column stands uncut: per entry its column, period and removal [m3/ha]
    thin_col: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    thin_period: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    thin_m3_ha: NDArray = field(default_factory=lambda: np.zeros(0))

    @property
    def n(self) -> int:
        return len(self.is_x)

    @property
    def is_y(self) -> NDArray:
        return ~self.is_x

    @property
    def cut_period(self) -> NDArray:
        """Period in which each column cuts (0: never)."""
        return np.where(self.is_x, self.first, self.again)

    def take(self, values: NDArray) -> NDArray:
        """Per column, ``values[index]``: a per-stratum array read on the x columns, or a
        per-group one on the y columns (the other kind's index is clipped into range)."""
        return values[np.clip(self.index, 0, max(len(values) - 1, 0))]

    def per_column(self, of_stratum: NDArray, of_group: NDArray) -> NDArray:
        """Per column, its stratum's value (x) or its group's (y)."""
        return np.where(self.is_x, self.take(of_stratum), self.take(of_group))


def lp_columns(strata: Strata, curves: CurveSet, periods: Periods) -> Columns:
    """The columns of each stratum and regeneration group, and their volumes.

    Per period p, then never: x[s, p] where stratum s reaches its minimum harvest age at p's
    harvest moment (its volume at that age), x[s, 0] (its volume at the horizon's end). Then per
    establishment period i: y[g, i, j] for j > i where the regrowth, (j - i) periods old less the
    regeneration delay, reaches the group's minimum age, and y[g, i, 0] (its volume at the
    horizon's end). With thinnings the volumes are what stands (:func:`_thinned`). Volumes
    below a millilitre per hectare are 0: nothing to a solver.
    """
    P, L, off = periods.count, float(periods.period_years), periods.offset_years
    S, G = strata.n, strata.groups
    blocks = []  # per block: is_x, index, first, again, volume, end volume, age
    for p in range(1, P + 1):
        age_h = strata.age_years + (p - 1) * L + off
        ok = np.flatnonzero(age_h >= strata.min_age - 1e-9)
        v = curves.volume_m3_ha(strata.species_idx[ok], age_h[ok], strata.site_index[ok])
        blocks.append(_block(True, ok, p, 0, v, np.zeros(len(ok)), age_h[ok]))
    age_end = strata.age_years + P * L
    v_end = curves.volume_m3_ha(strata.species_idx, age_end, strata.site_index)
    blocks.append(_block(True, np.arange(S), 0, 0, np.zeros(S), v_end, age_end))
    # a regrowth's volume depends on its age only: per lag j - i of a cut (1 .. P - 1) and
    # per establishment period i at the end, each worked out once for every group
    lag = np.arange(1, P)[:, None] * L - strata.group_delay[None, :]  # (P - 1, G)
    v_lag = curves.volume_m3_ha(
        np.tile(strata.group_species, P - 1), lag.ravel(), np.tile(strata.group_site, P - 1)
    ).reshape(lag.shape)
    ok_lag = lag >= strata.group_min_age[None, :] - 1e-9
    at_end = (P - np.arange(1, P + 1))[:, None] * L + (L - off) - strata.group_delay[None, :]
    v_end_y = curves.volume_m3_ha(
        np.tile(strata.group_species, P), at_end.ravel(), np.tile(strata.group_site, P)
    ).reshape(at_end.shape)
    for i in range(1, P + 1):
        for j in range(i + 1, P + 1):
            ok = np.flatnonzero(ok_lag[j - i - 1])
            age = lag[j - i - 1, ok]
            blocks.append(_block(False, ok, i, j, v_lag[j - i - 1, ok], np.zeros(len(ok)), age))
        blocks.append(_block(False, np.arange(G), i, 0, np.zeros(G), v_end_y[i - 1], at_end[i - 1]))
    is_x, index, first, again, volume, end, age = (
        np.concatenate(part) for part in zip(*blocks, strict=True)
    )
    cols = Columns(is_x, index.astype(np.int64), first, again, volume, end)
    if strata.regimes is not None and strata.regimes.thins:
        cols = _thinned(cols, age, strata, curves, periods)
    cols.volume_m3_ha[cols.volume_m3_ha < 1e-6] = 0.0
    cols.end_volume_m3_ha[cols.end_volume_m3_ha < 1e-6] = 0.0
    return cols


def _block(
    is_x: bool,
    index: NDArray,
    first: int,
    again: int,
    volume: NDArray,
    end: NDArray,
    age: NDArray,
) -> tuple[NDArray, ...]:
    """One block of columns of :func:`lp_columns` as its seven arrays."""
    n = len(index)
    return (
        np.full(n, is_x),
        index,
        np.full(n, first, dtype=np.int64),
        np.full(n, again, dtype=np.int64),
        volume,
        end,
        age,
    )


def _thinned(
    cols: Columns, age: NDArray, strata: Strata, curves: CurveSet, periods: Periods
) -> Columns:
    """The columns with thinnings, taken as the simulation takes them (yieldscape.regimes): a
    cut takes the gross volume at ``age`` less the thinnings taken before its period (an
    existing stratum has had those of its present age), the horizon's end finds the gross
    less those taken by period P's harvest moment, and in each period in which a column stands
    uncut the thinnings due then are taken (the ``thin_*`` entries)."""
    assert strata.regimes is not None
    P, L, off = periods.count, float(periods.period_years), periods.offset_years
    S = strata.n
    rem = Removals.of(
        strata.regimes,
        curves,
        np.r_[strata.species_idx, strata.group_species].astype(np.int64),
        np.r_[strata.site_index, strata.group_site],
    )
    unit = np.where(cols.is_x, cols.index, S + cols.index)
    age0 = cols.take(strata.age_years)
    cut = cols.cut_period > 0
    prev = np.where(cols.is_x, np.maximum(age - L, age0), age - L)  # the previous moment
    volume = np.where(cut, cols.volume_m3_ha - rem.taken(unit, prev), 0.0)
    end = np.where(cut, 0.0, cols.end_volume_m3_ha - rem.taken(unit, age - (L - off)))
    due_x, due_y = thinnings_by_period(rem, strata.age_years, strata.group_delay, periods)
    last = np.where(cut, cols.cut_period, P + 1)  # the column stands before this period
    col, period, m3 = [], [], []
    for k in range(1, P + 1):  # periods
        on_x = np.flatnonzero(cols.is_x & (k < last))
        on_y = np.flatnonzero(cols.is_y & (cols.first < k) & (k < last))
        idx = np.r_[on_x, on_y]
        v = np.r_[due_x[cols.index[on_x], k - 1], due_y[cols.index[on_y], k - cols.first[on_y] - 1]]
        col.append(idx[v > 0])
        period.append(np.full(int((v > 0).sum()), k))
        m3.append(v[v > 0])
    return replace(
        cols,
        volume_m3_ha=volume,
        end_volume_m3_ha=end,
        thin_col=np.concatenate(col),
        thin_period=np.concatenate(period),
        thin_m3_ha=np.concatenate(m3),
    )


@dataclass(frozen=True)
class _Survival:
    """Expected disturbance: a share ``dist`` of each column's standing area is disturbed every
    period after its harvest (``dist = 1 - (1 - annual rate)^L``, ``keep = 1 - dist``). A column
    stands exposed from the period after its establishment (x: from period 1); per column,
    ``cut``: the share still standing when it is cut (0: never cut), ``end``: at the horizon's
    end. Without disturbance every share is 1."""

    dist: float
    keep: float
    start: NDArray  # period of establishment (x: 0)
    cut: NDArray
    end: NDArray

    def at(self, p: int) -> NDArray:
        """Share of each column's area still standing at period p's harvest moment."""
        return self.keep ** np.maximum(p - self.start - 1, 0)


def _survival(cols: Columns, periods: Periods, disturbance: float) -> _Survival:
    """The :class:`_Survival` of the columns under an annual disturbance rate."""
    P, L = periods.count, float(periods.period_years)
    dist = 1.0 - (1.0 - disturbance) ** L if disturbance > 0 else 0.0
    keep = 1.0 - dist
    start = np.where(cols.is_x, 0, cols.first)
    cut_p = cols.cut_period
    cut = np.where(cut_p > 0, keep ** np.maximum(cut_p - start - 1, 0), 0.0)
    return _Survival(dist, keep, start, cut, keep ** (P - start))


class MatrixBuilder:
    """The LP's rows as they are added: sparse entries (row, column, value), in blocks, and
    each row's bounds. Rows are numbered in the order they are added."""

    def __init__(self) -> None:
        self.n_rows = 0
        self._rows: list[NDArray] = []
        self._cols: list[NDArray] = []
        self._values: list[NDArray] = []
        self._lo: list[NDArray] = []
        self._hi: list[NDArray] = []

    def add_rows(self, count: int, lo: NDArray | float, hi: NDArray | float) -> int:
        """Add ``count`` rows with these bounds (scalars or one per row); the first's index."""
        first = self.n_rows
        self._lo.append(np.broadcast_to(np.asarray(lo, dtype=np.float64), count))
        self._hi.append(np.broadcast_to(np.asarray(hi, dtype=np.float64), count))
        self.n_rows += count
        return first

    def put(self, rows: NDArray, cols: NDArray, values: NDArray | float) -> None:
        """Add matrix entries (rows[k], cols[k]) = values[k] to rows already added."""
        self._rows.append(np.asarray(rows))
        self._cols.append(np.asarray(cols))
        self._values.append(np.broadcast_to(np.asarray(values, dtype=np.float64), np.shape(cols)))

    def add_row(self, cols: NDArray, values: NDArray, lo: float, hi: float) -> int:
        """Add one row, lo <= sum values[k] x[cols[k]] <= hi; its index."""
        row = self.add_rows(1, lo, hi)
        self.put(np.full(len(cols), row), cols, values)
        return row

    def build(self, n_cols: int) -> tuple[csc_matrix, NDArray, NDArray]:
        """The matrix (CSC) and the row bounds."""
        matrix = coo_matrix(
            (
                np.concatenate(self._values),
                (np.concatenate(self._rows), np.concatenate(self._cols)),
            ),
            shape=(self.n_rows, n_cols),
        ).tocsc()
        return matrix, np.concatenate(self._lo), np.concatenate(self._hi)


def _area_rows(m: MatrixBuilder, strata: Strata, cols: Columns) -> None:
    """Each stratum's area is first cut in one period or never: sum_p x[s, p] + x[s, 0] = A_s
    (rows 0..S-1)."""
    first = m.add_rows(strata.n, strata.area_ha, strata.area_ha)
    x = np.flatnonzero(cols.is_x)
    m.put(first + cols.index[x], x, 1.0)


def _cuts_regrow(
    strata: Strata, cols: Columns, surv: _Survival
) -> tuple[NDArray, NDArray, NDArray]:
    """Where the area of each cutting column regrows (:class:`~yieldscape.schedule.lp_regimes.
    Regrowth`): per entry the column, the target (a group, or G + a choice) and the area per
    hectare of the column, its share of the area still standing at the cut."""
    col = np.flatnonzero(cols.cut_period > 0)
    source = np.where(cols.is_x[col], cols.index[col], strata.n + cols.index[col])
    pos, target, share = strata.regrowth.of(source)
    return col[pos], target, surv.cut[col[pos]] * share


def _regeneration_rows(
    m: MatrixBuilder,
    strata: Strata,
    cols: Columns,
    regrow: tuple[NDArray, NDArray, NDArray],
    choices: Choices,
    z_col: NDArray,
    P: int,
) -> int:
    """Per regeneration group g and period p (row ``first + g P + p - 1``), the area
    established equals the area cut that regrows into g: sum_j y[g, p, j] + y[g, p, 0] - sum
    share keep c[p] - sum_o z[n, p, o] = 0 over the cutting columns c of the sources regrowing
    into g in their shares (:func:`_cuts_regrow`; ``keep``: the share still standing at the
    cut, :class:`_Survival`) and the choice columns whose option is g. Per choice n and period
    p (row ``first + (G + n) P + p - 1``) the choice columns take what the sources choosing n
    cut: sum_o z[n, p, o] - sum keep c[p] = 0. Returns the first row."""
    G = strata.groups
    first = m.add_rows((G + strata.regrowth.choices) * P, 0.0, 0.0)
    col = np.arange(cols.n)
    ys = cols.is_y
    m.put(first + cols.index[ys] * P + (cols.first[ys] - 1), col[ys], 1.0)
    cut, target, area = regrow
    m.put(first + target * P + (cols.cut_period[cut] - 1), cut, -area)
    if choices.n:
        m.put(first + (G + choices.choice) * P + choices.period - 1, z_col, 1.0)
        m.put(first + choices.group * P + choices.period - 1, z_col, -1.0)
    return first


def _regeneration_map(
    strata: Strata,
    cols: Columns,
    regrow: tuple[NDArray, NDArray, NDArray],
    choices: Choices,
    z_col: NDArray,
    P: int,
    C: int,
    n_cols: int,
) -> csr_matrix:
    """The matrix that takes a solution to the area cut in each period from each code and
    regrowing as each (rows (p - 1) C^2 + from C + to): the fixed shares of the cutting
    columns, and the choice columns (C codes)."""
    cut, target, area = regrow
    fixed = target < strata.groups
    cut, target, area = cut[fixed], target[fixed], area[fixed]
    code_cut = cols.per_column(strata.species_idx, strata.group_species)[cut]
    rows = (cols.cut_period[cut] - 1) * C * C + code_cut * C + strata.group_species[target]
    z_rows = (choices.period - 1) * C * C + choices.code_cut * C + choices.code
    return coo_matrix(
        (np.r_[area, np.ones(choices.n)], (np.r_[rows, z_rows], np.r_[cut, z_col])),
        shape=(P * C * C, n_cols),
    ).tocsr()


def _disturbed_regrowth(
    m: MatrixBuilder, strata: Strata, cols: Columns, surv: _Survival, first: int, P: int
) -> None:
    """The share of a column's area disturbed in period k (after k's harvest, while it stands:
    from the period after its establishment until its cut) regrows in its group from k: it
    enters the regeneration balance of (group, k) of :func:`_regeneration_rows`, whose first
    row is ``first``."""
    if surv.dist <= 0:
        return
    if (strata.group < 0).any():
        raise ValueError("disturbed area regrows in its own group: make_strata(disturbed=True)")
    group = cols.per_column(strata.group, np.arange(strata.groups))
    cut_p = cols.cut_period
    last = np.where(cut_p > 0, cut_p, P + 1)
    col = np.arange(cols.n)
    for k in range(1, P + 1):  # periods
        exposed = (k > surv.start) & (k < last)
        share = surv.keep ** (k - surv.start[exposed] - 1) * surv.dist
        m.put(first + group[exposed] * P + (k - 1), col[exposed], -share)


def _cut_entries(cols: Columns, surv: _Survival) -> tuple[NDArray, NDArray, NDArray]:
    """The volume of every cut as (period, column, m3 per ha of the column): v keep."""
    cut_p = cols.cut_period
    cut = np.flatnonzero((cut_p > 0) & (cols.volume_m3_ha > 0))
    return cut_p[cut], cut, cols.volume_m3_ha[cut] * surv.cut[cut]


def _thin_entries(cols: Columns, surv: _Survival) -> tuple[NDArray, NDArray, NDArray]:
    """The thinnings taken on the columns standing uncut as (period, column, m3 per ha of the
    column): r keep."""
    if not len(cols.thin_col):
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, np.zeros(0)
    keep = surv.keep ** np.maximum(cols.thin_period - surv.start[cols.thin_col] - 1, 0)
    return cols.thin_period, cols.thin_col, cols.thin_m3_ha * keep


def _volume_rows(m: MatrixBuilder, entries: Sequence[tuple], v_col: NDArray) -> None:
    """Per period p, the volume column v_col[p - 1] is the sum of the entries of p: sum e x -
    V_p = 0. The harvest H_p takes the cuts and thinnings (:func:`_cut_entries`,
    :func:`_thin_entries`), the clearcut volume C_p the cuts alone."""
    first = m.add_rows(len(v_col), 0.0, 0.0)
    for period, col, value in entries:
        m.put(first + period - 1, col, value)
    m.put(first + np.arange(len(v_col)), v_col, -1.0)


def even_flow_rows(m: MatrixBuilder, h_col: NDArray, band: float) -> list[int]:
    """Even flow: every period within ``band`` of the one before, H_p - (1 - band) H_(p-1) >= 0
    and H_p - (1 + band) H_(p-1) <= 0 (with no band, one common level)."""
    rows = []
    for p in range(2, len(h_col) + 1):
        pair = np.array([h_col[p - 1], h_col[p - 2]])
        rows.append(m.add_row(pair, np.array([1.0, -(1 - band)]), 0.0, INF))
        rows.append(m.add_row(pair, np.array([1.0, -(1 + band)]), -INF, 0.0))
    return rows


def nondeclining_rows(m: MatrixBuilder, h_col: NDArray, band: float) -> list[int]:
    """Non-declining flow: every period at least the one before, H_p - H_(p-1) >= 0 (the band
    does not apply)."""
    rows = []
    for p in range(2, len(h_col) + 1):
        pair = np.array([h_col[p - 1], h_col[p - 2]])
        rows.append(m.add_row(pair, np.array([1.0, -1.0]), 0.0, INF))
    return rows


def no_flow_rows(m: MatrixBuilder, h_col: NDArray, band: float) -> list[int]:
    """No flow policy: the H_p are free of each other."""
    return []


FlowRows = Callable[[MatrixBuilder, NDArray, float], list[int]]

FLOW_ROWS: dict[str, FlowRows] = {
    "even": even_flow_rows,
    "nondeclining": nondeclining_rows,
    "none": no_flow_rows,
}
"""The LP's part of the flow-policy registry: per policy name, the function that adds its flow
rows on the H_p columns (``h_col``) with the scenario's band and returns their indices (the
duals of these rows are reported). A new flow policy adds its LP rows by one entry here."""


def _pair(m: MatrixBuilder, a: int, b: int, wb: float, lo: float, hi: float) -> int:
    """The row lo <= x_a + wb x_b <= hi."""
    return m.add_row(np.array([a, b]), np.array([1.0, wb]), lo, hi)


def even_bound_rows(
    m: MatrixBuilder, h_col: NDArray, c_col: NDArray, level: int, band: float
) -> list[int]:
    """The rule-based even flow (:class:`yieldscape.policies.EvenFlow`) as rows on the common
    level M, the harvests H_p and the clearcut volumes C_p: every H_p >= M, and with a band
    the rules' own limits on the change between periods. The rules give each later period the
    target min(L, (1 + band) H_(p-1)) and the floor (1 - band) min(H_(p-1), L); a period that
    clears anything takes at most its target, and thinnings alone may carry it past (then
    C_p = 0). So every schedule the rules accept meets C_p <= (1 + band) H_(p-1) and
    H_p >= (1 - band) C_(p-1) (as C_(p-1) <= min(H_(p-1), L)), with M its smallest harvest:
    the LP over these rows is a relaxation of the search, and its highest M bounds the level
    the schedule holds in every period. With no band and no thinnings that level is the
    search's, exactly."""
    rows = [_pair(m, h_col[p], level, -1.0, 0.0, INF) for p in range(len(h_col))]
    if band > 0:
        for p in range(1, len(h_col)):
            rows.append(_pair(m, h_col[p], c_col[p - 1], -(1 - band), 0.0, INF))
            rows.append(_pair(m, c_col[p], h_col[p - 1], -(1 + band), -INF, 0.0))
    return rows


def nondeclining_bound_rows(
    m: MatrixBuilder, h_col: NDArray, c_col: NDArray, level: int, band: float
) -> list[int]:
    """The rule-based non-declining flow as rows: each period takes a target that is also its
    floor and is never below the one before
    (:func:`yieldscape.schedule.flow.find_nondeclining`), so H_p >= M, and H_p >= C_(p-1) for
    p > 1 (a period's clearcuts stay within its target, thinnings alone may pass it); the LP's
    highest M bounds the schedule's smallest harvest, its period 1."""
    rows = [_pair(m, h_col[p], level, -1.0, 0.0, INF) for p in range(len(h_col))]
    for p in range(1, len(h_col)):
        rows.append(_pair(m, h_col[p], c_col[p - 1], -1.0, 0.0, INF))
    return rows


BoundRows = Callable[[MatrixBuilder, NDArray, NDArray, int, float], list[int]]

BOUND_ROWS: dict[str, BoundRows] = {
    "even": even_bound_rows,
    "nondeclining": nondeclining_bound_rows,
}
"""The bound's part of the flow-policy registry: per policy the LP models, the rows that state
the rule-based search's limits on M, H_p and C_p (objective ``max-level``)."""


def _ending_stock_row(
    m: MatrixBuilder,
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    cols: Columns,
    surv: _Survival,
    ending_stock: float,
    masks: tuple[NDArray, NDArray] | None = None,
    unit: str = "",
) -> Constraint:
    """The growing stock at the horizon's end, on the never-cut columns still standing plus the
    area outside the harvestable land base (:func:`reserved_stock`), is at least
    ``ending_stock`` x the initial stock of all stands; with ``masks`` (stands, columns) of
    those of one unit."""
    weight = None if masks is None else masks[0].astype(np.float64)
    reserved_end = reserved_stock(stands, curves, periods, surv.dist, weight)
    area = stands.area_ha if weight is None else stands.area_ha * weight
    initial = float(
        np.dot(curves.volume_m3_ha(stands.species_idx, stands.age_years, stands.site_index), area)
    )
    reg = stands.regimes
    if reg is not None and reg.thins:  # the harvestable area has had its thinnings so far
        sp = stands.species_idx
        amounts = reg.removals(curves, sp, curves.site_terms(sp, stands.site_index))
        hlb = stands.area_ha
        if stands.harvestable_ha is not None:
            hlb = np.minimum(stands.harvestable_ha, stands.area_ha)
        hlb = hlb if weight is None else hlb * weight
        initial -= float(np.dot(reg.removed(sp, amounts, stands.age_years), hlb))
    on = cols.end_volume_m3_ha > 0
    end = np.flatnonzero(on if masks is None else on & masks[1])
    row = m.add_row(
        end,
        cols.end_volume_m3_ha[end] * surv.end[end],
        ending_stock * initial - reserved_end,
        INF,
    )
    return Constraint("ending_stock", "flow.ending_stock", unit, 0, row, "m3")


def _cover_rows(
    m: MatrixBuilder,
    stands: StandArrays,
    strata: Strata,
    periods: Periods,
    cols: Columns,
    surv: _Survival,
    cover: CoverRules,
    stand_zone: NDArray | None,
) -> list[Constraint]:
    """Per cover rule and period, the old (or young) area of the rule's zone standing at the
    period's harvest moment after its cut: the columns not cut yet whose age the rule counts,
    plus the area outside the harvestable land base (:func:`reserved_cover`), at least (old)
    or at most (young) the rule's share of the zone's area."""
    P, L, off = periods.count, float(periods.period_years), periods.offset_years
    zone = cols.per_column(strata.zone, strata.group_zone)
    x_age0 = cols.take(strata.age_years)
    y_delay = cols.take(strata.group_delay)
    harvestable = stands.cuttable_ha
    reserved = stands.area_ha - harvestable
    sz = stand_zone if stand_zone is not None else np.zeros(stands.n, dtype=np.int64)
    xs, ys, b_, c_ = cols.is_x, cols.is_y, cols.first, cols.again
    out = []
    for rule in cover.rules:  # a handful of rules x periods
        inz = np.ones(cols.n, bool) if rule.zone < 0 else zone == rule.zone
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
                surv.dist,
                stands.regen_delay_years[rz],
                rule,
            )
            bound = rule.share * cover.area_of(rule) - fixed
            lo, hi = (bound, INF) if rule.kind == "old" else (-INF, bound)
            row = m.add_row(hit, surv.at(p)[hit], lo, hi)
            name = f"{rule.zone_name}: {rule.label}"
            out.append(Constraint("cover", name, "", p, row, "ha"))
    return out


def _area_cap_rows(
    m: MatrixBuilder, cols: Columns, surv: _Survival, max_area_ha: float, P: int
) -> list[Constraint]:
    """The area cut in each period, as it stands at the cut, is at most ``max_area_ha``."""
    cut_p = cols.cut_period
    out = []
    for p in range(1, P + 1):
        cut = np.flatnonzero(cut_p == p)
        row = m.add_row(cut, surv.cut[cut], -INF, max_area_ha)
        out.append(Constraint("area_cap", "harvest.max_area_ha_per_period", "", p, row, "ha"))
    return out


def _lp_costs(
    objective: str,
    cols: Columns,
    strata: Strata,
    periods: Periods,
    economics: Economics | None,
    h_col: NDArray,
    choices: Choices,
    surv: _Survival,
) -> NDArray:
    """The costs of a minimisation: ``max-volume``: -sum H_p; ``max-npv``: -NPV of each area
    column (:func:`_npv_per_ha`) and the regeneration cost of each choice column, discounted;
    ``max-even-flow`` and ``max-level``: none here (build_lp adds the level column's)."""
    cost = np.zeros(cols.n + len(h_col) + choices.n)
    if objective == "max-volume":
        cost[h_col] = -1.0
    elif objective in LEVEL_OBJECTIVES:
        pass  # on the level column, which build_lp adds
    elif objective == "max-npv":
        if economics is None:
            raise InputError("flow.objective = 'max-npv' needs prices and a discount rate")
        cost[: cols.n] = -_npv_per_ha(cols, strata, periods, economics, surv)
        L, off = float(periods.period_years), periods.offset_years
        t = (choices.period - 1) * L + off
        disc = 1.0 / growth_factor(t, economics.rate, economics.compounding)
        cost[cols.n + len(h_col) :] = economics.regen_cost[choices.code] * disc
    else:
        raise ValueError(f"unknown LP objective {objective!r}")
    return cost


def _npv_per_ha(
    cols: Columns, strata: Strata, periods: Periods, economics: Economics, surv: _Survival
) -> NDArray:
    """Per area column, the net present value of a hectare: price x volume less the
    regeneration cost (of the codes it regrows as, in their shares; a choice's columns pay
    their own), discounted from the harvest moment of its cut, and price x the volume of
    each thinning it takes, discounted from then; with ``terminal_value = "standing"`` also
    its standing volume at the horizon's end at the net price, discounted from then."""
    P, L, off = periods.count, float(periods.period_years), periods.offset_years
    species = cols.per_column(strata.species_idx, strata.group_species)
    price, regen_cost = economics.price[species], _regen_cost(strata, economics)[species]
    cut_p = cols.cut_period
    t_cut = (cut_p - 1) * L + off
    disc = 1.0 / growth_factor(t_cut, economics.rate, economics.compounding)
    npv = np.where(cut_p > 0, (price * cols.volume_m3_ha - regen_cost) * disc, 0.0)
    if len(cols.thin_col):
        c, k = cols.thin_col, cols.thin_period
        keep = surv.keep ** np.maximum(k - surv.start[c] - 1, 0)
        t = (k - 1) * L + off
        value = price[c] * cols.thin_m3_ha * keep
        npv += np.bincount(
            c, value / growth_factor(t, economics.rate, economics.compounding), cols.n
        )
    if economics.terminal_value == "standing":
        npv = npv + price * cols.end_volume_m3_ha / growth_factor(
            np.full(cols.n, P * L), economics.rate, economics.compounding
        )
    return npv


def _regen_cost(strata: Strata, economics: Economics) -> NDArray:
    """Regeneration cost [per ha cut] of each code: that of the codes it regrows as, in their
    shares (paid by the code regrown into, as in the revenue figures); 0 where the code's
    regeneration is a choice, whose columns pay it."""
    reg = strata.regimes
    if reg is None:
        return economics.regen_cost
    shares = reg.transitions.copy()
    shares[[i for i, c in enumerate(reg.choices) if c]] = 0.0
    return shares @ economics.regen_cost


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


def lp_solver(model: LPModel) -> str:
    """The HiGHS solver for this model: interior point ("ipm", crossover on by default, so the
    solution is a vertex) but for the smallest models without regimes, dual simplex there."""
    # benchmarks/bench_lp.py, 20 periods, one stratum a stand: interior point 1.0-2.0x faster
    # at 30 strata, 2-8x at 100-300, 9-12x at 1,000; within the noise either way at 10-20
    # (hundredths of a second); with regimes 1.7x at 30 strata (docs/performance.md)
    return "ipm" if model.strata * model.periods >= LP_IPM_FROM or model.regimes else "simplex"


def solve_highs(model: LPModel, t0: float | None = None, solver: str | None = None) -> LPResult:
    """Solve with HiGHS (``solver``: "simplex" or "ipm"; by default :func:`lp_solver`); explain
    an infeasible model."""
    A = model.matrix
    ncol, nrow = A.shape[1], A.shape[0]
    P = model.periods
    t0 = time.perf_counter() if t0 is None else t0
    h = _new_highs()
    h.setOptionValue("solver", solver or lp_solver(model))
    # the arrays overload: a HighsLp's attributes copy each array once more, ~10x the time of
    # this whole call (an empty integrality array is refused: zeros, all continuous)
    status = h.passModel(
        ncol,
        nrow,
        A.nnz,
        int(highspy.MatrixFormat.kColwise),
        int(highspy.ObjSense.kMinimize),
        0.0,
        model.cost,
        np.zeros(ncol),
        np.full(ncol, INF),
        model.row_lo,
        model.row_hi,
        A.indptr.astype(np.int32, copy=False),
        A.indices.astype(np.int32, copy=False),
        A.data,
        np.zeros(ncol, dtype=np.int32),
    )
    if status not in (highspy.HighsStatus.kOk, highspy.HighsStatus.kWarning):
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
    C = len(model.codes)
    regen = np.zeros((P, C, C)) if model.regeneration is None else model.regeneration @ x
    duals = {"ending_stock_m3_per_m3": float(-dual[model.ending_row])}
    if model.flow_rows:
        duals["flow_rows_m3_per_m3"] = float(-dual[model.flow_rows].sum())
    level = float(x[model.level_col]) if model.level_col >= 0 else None
    objective = float(-h.getInfo().objective_function_value)
    if model.level_cols:  # the units' levels, without the tie-break
        objective = float(x[model.level_cols].sum())
        level = objective  # the region's level: the sum of its units' levels
    return LPResult(
        status,
        objective,
        x[model.h_col],
        time.perf_counter() - t0,
        ncol,
        nrow,
        model.strata,
        duals,
        cut,
        np.reshape(regen, (P, C, C)),
        model.codes,
        level,
        model.units,
        np.array([x[c] for c in model.unit_h_cols]).reshape(len(model.unit_h_cols), P),
        x[model.level_cols] if model.level_cols else np.zeros(0),
        constraint_table(model, x, dual, np.asarray(sol.row_value)),
    )


def constraint_table(model: LPModel, x: NDArray, dual: NDArray, activity: NDArray) -> pd.DataFrame:
    """The reported rows (:class:`Constraint`) with their activity, bounds and dual: the
    objective's change per unit of the right-hand side (m3 per period of level, or of harvest,
    per m3, ha or share); a share row's activity is the partition's share of the harvest."""
    rows = model.constraints
    r = np.array([c.row for c in rows], dtype=np.int64)
    value = activity[r].copy()
    d = -dual[r]  # HiGHS reports a minimisation's duals; the objective is maximised
    lo, hi = model.row_lo[r].copy(), model.row_hi[r].copy()
    share = np.array([c.scale_col >= 0 for c in rows], dtype=bool)
    if share.any():
        h = np.array([x[c.scale_col] for c in rows if c.scale_col >= 0])
        v = np.array([x[c.value_col] for c in rows if c.scale_col >= 0])
        d[share] *= h  # moving s by ds moves the row's right-hand side by ds H_p
        value[share] = np.divide(v, h, out=np.zeros_like(v), where=h > 0)
        # the share itself, from the row V - s H_p
        s_ = np.array([-model.matrix[c.row, c.scale_col] for c in rows if c.scale_col >= 0])
        lo[share] = np.where(np.isfinite(lo[share]), s_, -np.inf)
        hi[share] = np.where(np.isfinite(hi[share]), s_, np.inf)
    return pd.DataFrame(
        {
            "kind": [c.kind for c in rows],
            "name": [c.name for c in rows],
            "unit": [c.unit for c in rows],
            "period": np.array([c.period for c in rows], dtype=np.int64),
            "rhs_unit": [c.rhs_unit for c in rows],
            # + 0.0: a solver's -0.0 (an empty row, a zero dual) written as 0
            "activity": value + 0.0,
            "lower": np.where(np.isfinite(lo), lo, np.nan),
            "upper": np.where(np.isfinite(hi), hi, np.nan),
            "dual": d + 0.0,
        }
    )


def reserved_cover(
    area: NDArray,
    age0: NDArray,
    p: int,
    L: float,
    off: float,
    dist: float,
    delay: NDArray,
    rule: CoverRule,
) -> float:
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
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    dist: float = 0.0,
    weight: NDArray | None = None,
) -> float:
    """Volume at the horizon's end on the area outside the harvestable land base (of the
    stands with ``weight`` 1, where given)."""
    if stands.harvestable_ha is None:
        return 0.0
    area = stands.area_ha - stands.harvestable_ha
    area = area if weight is None else area * weight
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
    partitions: tuple[str, ...] = (),
) -> str:
    """Which constraint families can make the harvest LP infeasible, and what to relax."""
    hints = [f"flow.ending_stock = {ending_stock:g} (try a lower share)"]
    if partitions:
        named = ", ".join(repr(p) for p in partitions)
        hints.insert(0, f"the [[partitions]] {named} (a limit the stands cannot keep)")
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
