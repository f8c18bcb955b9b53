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

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from yieldscape.policies import PRIORITIES, PerUnit, TargetRule, cut_order
from yieldscape.projection import (
    CurveSet,
    Periods,
    SiteTerms,
    StandArrays,
    area_sum,
)
from yieldscape.regimes import Regimes
from yieldscape.schedule.cover import CoverRules, PeriodBudgets
from yieldscape.schedule.partitions import PartitionRules, within_maximum
from yieldscape.schedule.picker import compiled_pick
from yieldscape.schedule.spatial import SpatialRules

_REL = 1e-9  # relative tolerance on volume targets
_MIN_PART_HA = 1e-9  # a smaller partial cut (<= ~1e-6 m3) is not worth a split
_QUEUE_MIN = 1024  # the fewest parts the aspatial pick ranks at first (see _queue)


@dataclass(frozen=True)
class Plan:
    """An LP's plan mapped onto stands (:mod:`yieldscape.schedule.lp_plan`): per stand the
    period of its first cut (periods + 1: none), which ranks the queue of each period: the
    stands planned for it or earlier first, then those planned for the next period, the one
    after, and so on, the stands it never cuts last (the priority rule ordering each group), and
    per period the shares in which each code's cut area regrows as each code (periods x codes
    x codes: the LP's regeneration choices; None: the regimes' own transitions).

    From period index ``ending_from`` on (None: never), each rank is ordered by the ending
    growing stock a cut gives up per m3 it yields, least first, instead of by the priority
    rule (see :class:`EndingCost`)."""

    period: NDArray[np.int64]
    regen_shares: NDArray | None = None
    ending_from: int | None = None


@dataclass(frozen=True)
class HarvestRules:
    """The rules every simulated horizon of a run shares, travelling as one value: the
    priority rule, the area cap [ha per period], the green-up and opening rules, the cover
    targets, the stand-replacing disturbance rate [1/year], and the period boundaries at which
    a recorded run keeps the stand parts (0 .. periods), and an LP's plan to follow (its
    cutting order and regeneration choices)."""

    priority: str = "oldest"
    max_area_ha: float | None = None
    spatial: SpatialRules | None = None
    cover: CoverRules | None = None
    disturbance: float = 0.0
    snapshots: tuple[int, ...] = ()
    plan: Plan | None = field(default=None, compare=False)
    # the management unit of each stand (codes 0 .. U-1; None: one flow for the region),
    # whose flows a :class:`~yieldscape.policies.PerUnit` target rule sets
    units: NDArray | None = field(default=None, compare=False)
    partitions: PartitionRules | None = field(default=None, compare=False)


NO_RULES = HarvestRules()  # oldest first, no cap, no spatial or cover rules, no disturbance


@dataclass
class Simulation:
    """Outcome of one simulated horizon under a target rule."""

    feasible: bool = True
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
    event_code: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    event_treatment: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int8))
    # of the harvest above: what thinnings took each period (their volume and area)
    thinning_m3: NDArray = field(default_factory=lambda: np.zeros(0))
    thinning_ha: NDArray = field(default_factory=lambda: np.zeros(0))
    # regeneration after clearcuts (record=True only): period, from code, to code, area
    regen_period: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    regen_from: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    regen_to: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    regen_area_ha: NDArray = field(default_factory=lambda: np.zeros(0))
    # management units (HarvestRules.units): per period and unit the harvest, target and
    # floor [m3]; per unit the first period whose floor it missed (0: none) or the reason it
    # failed at the end, and its initial and ending growing stock [m3]
    unit_harvest_m3: NDArray = field(default_factory=lambda: np.zeros((0, 0)))
    unit_target_m3: NDArray = field(default_factory=lambda: np.zeros((0, 0)))
    unit_floor_m3: NDArray = field(default_factory=lambda: np.zeros((0, 0)))
    unit_fail_period: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    unit_fail_reason: list[str] = field(default_factory=list)
    unit_initial_stock_m3: NDArray = field(default_factory=lambda: np.zeros(0))
    unit_ending_stock_m3: NDArray = field(default_factory=lambda: np.zeros(0))
    unit_initial_hlb_stock_m3: NDArray = field(default_factory=lambda: np.zeros(0))
    # recorded: per period and unit the growing stock at the period's end [m3], all of it and
    # on the harvestable land base
    unit_stock_end_m3: NDArray = field(default_factory=lambda: np.zeros((0, 0)))
    unit_hlb_stock_end_m3: NDArray = field(default_factory=lambda: np.zeros((0, 0)))
    # harvest partitions (HarvestRules.partitions): per period and partition the volume [m3]
    # (record=True only)
    partition_m3: NDArray = field(default_factory=lambda: np.zeros((0, 0)))
    # where the horizon failed first on a partition limit (record=False too): the period
    # (1-based), the partition, its volume and the limit [m3] (None: it did not); the
    # searches interpolate on how far beyond the limit a trial went (flow._Bracket)
    partition_break: tuple[int, int, float, float] | None = None

    @property
    def unit_feasible(self) -> NDArray[np.bool_]:
        """Per management unit, whether its flow held (every floor and its ending stock)."""
        return np.array([not r for r in self.unit_fail_reason], dtype=bool)


@dataclass(frozen=True)
class PartsSnapshot:
    """The stand parts at one period boundary: each part's stand (row of the stand table), age
    [years] (negative while regeneration is delayed), area [ha] and whether it lies on the
    harvestable land base."""

    stand: NDArray[np.int64]
    age_years: NDArray[np.float64]
    area_ha: NDArray[np.float64]
    in_hlb: NDArray[np.bool_]
    code: NDArray[np.int64] | None = None  # the code (CurveSet index) each part grows as


def _pick_prefix(
    vol: NDArray, area: NDArray, target: float, cap: float
) -> tuple[NDArray, int, float, bool]:
    """Aspatial pick: candidates in order until the target or the cap; the last one partly.

    Returns the positions cut whole, the position cut partly (-1: none), its fraction, and
    whether the pick is decided within these candidates: the target is within their volume
    and the pick stops short of the last two, so that more candidates after them would
    change nothing (the queue may be only the first part of the period's queue).
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
    decided = goal == target and n < len(vol) - 1
    got_v = cum_v[n - 1] if n else 0.0
    got_a = cum_a[n - 1] if n else 0.0
    if n < len(vol) and goal - got_v > _REL * goal:
        frac = min((goal - got_v) / vol[n], (cap - got_a) / area[n], 1.0)
        if frac * area[n] > _MIN_PART_HA:
            return np.arange(n), n, frac, decided
    return np.arange(n), -1, 0.0, decided


# the per-part columns of _Parts (and of its site terms), grown together by _Parts.extend
_COLUMNS = (
    "stand",
    "area",
    "min_age",
    "sp",
    "age",
    "delay",
    "rank",
    "zone",
    "in_hlb",
    "thin_r",
    "thinned_to",
    "thin_taken",
    "thin_next",
)
_TERMS = ("row", "scale_v", "scale_t", "blend")


@dataclass
class _Parts:
    """The stand parts of one horizon, one element each: the stand (row of the stand table),
    area [ha], minimum harvest age (inf outside the harvestable land base), species, site
    terms, age [years], regeneration delay, tie-breaking rank, zone, and whether on the
    harvestable land base. Cuts and disturbance append parts; nothing is removed.

    Thinning state: ``thin_r`` each part's removal [m3/ha] at each of its code's thinnings,
    ``thinned_to`` the age up to which they count as taken (-inf off the land base),
    ``thin_taken`` what they add up to (the removals up to ``thinned_to``, kept so that the
    standing volume needs no thinnings x parts pass) and ``thin_next`` a lower bound of the age
    of the next thinning not taken (inf: none), which keeps the per-period test for thinnings
    due to the few parts that reach one."""

    stand: NDArray[np.int64]
    area: NDArray[np.float64]
    min_age: NDArray[np.float64]
    sp: NDArray
    si: SiteTerms
    age: NDArray[np.float64]
    delay: NDArray[np.float64]
    rank: NDArray[np.int64]
    zone: NDArray[np.int64]
    in_hlb: NDArray[np.bool_]
    reg: Regimes | None
    thin_r: NDArray[np.float64]  # parts x thinnings (zero width without thinnings)
    thinned_to: NDArray[np.float64]
    thin_taken: NDArray[np.float64]
    thin_next: NDArray[np.float64]
    _buf: dict[str, NDArray] = field(default_factory=dict, repr=False)  # see _reserve

    @classmethod
    def of(cls, stands: StandArrays, curves: CurveSet) -> _Parts:
        """One part per stand; area outside the harvestable land base is a part of its own
        that grows and is never cut."""
        stand = np.arange(stands.n, dtype=np.int64)
        area = stands.area_ha.copy()
        min_age = stands.min_harvest_age.copy()
        in_hlb = np.ones(stands.n, dtype=bool)
        if stands.harvestable_ha is not None:
            reserved = np.flatnonzero(stands.area_ha - stands.harvestable_ha > 1e-9)
            area = np.minimum(stands.harvestable_ha, stands.area_ha)
            stand = np.r_[stand, reserved]
            area = np.r_[area, stands.area_ha[reserved] - area[reserved]]
            min_age = np.r_[min_age, np.full(len(reserved), np.inf)]
            in_hlb = np.r_[in_hlb, np.zeros(len(reserved), dtype=bool)]
        sp = stands.species_idx[stand]
        zone = (
            stands.zone_idx[stand]
            if stands.zone_idx is not None
            else np.zeros(len(stand), dtype=np.int64)
        )
        si = curves.site_terms(sp, stands.site_index[stand])  # site terms, worked out once
        age = stands.age_years[stand]
        reg = stands.regimes
        thin_r = np.zeros((len(stand), 0))
        if reg is not None and reg.thins:
            thin_r = reg.removals(curves, sp, si)
        n = len(stand)
        parts = cls(
            stand,
            area,
            min_age,
            sp,
            si,
            age,
            stands.regen_delay_years[stand],
            stands.id_rank[stand],
            zone,
            in_hlb,
            reg,
            thin_r,
            np.full(n, -np.inf),
            np.zeros(n),
            np.full(n, np.inf),
        )
        # an existing stand has had the thinnings of its age; land off the base is never thinned
        parts.thin_to(np.flatnonzero(in_hlb), age[in_hlb])
        return parts

    def copy(self) -> _Parts:
        """A copy to run a horizon on (the columns copied, the regimes shared)."""
        cols = {name: getattr(self, name).copy() for name in _COLUMNS}
        si = SiteTerms(*(getattr(self.si, name).copy() for name in _TERMS))
        return _Parts(**cols, si=si, reg=self.reg)

    def thin_to(self, idx: NDArray, to: NDArray | float) -> None:
        """The thinnings of parts ``idx`` (on the land base) count as taken up to age ``to``."""
        if self.reg is None or not self.reg.thins or not len(idx):
            return
        to = np.broadcast_to(np.asarray(to, dtype=np.float64), idx.shape)
        thinned = np.isfinite(self.reg.first_thin[self.sp[idx]])  # codes that are thinned
        idx, to = idx[thinned], to[thinned]
        sp, r = self.sp[idx], self.thin_r[idx]
        self.thinned_to[idx] = to
        self.thin_taken[idx] = self.reg.removed(sp, r, to)
        self.thin_next[idx] = self.reg.next_after(sp, to)

    def restart(self, idx: NDArray) -> None:
        """Parts ``idx`` start as new stands of their (current) code: no thinning taken."""
        hlb = self.in_hlb[idx]
        self.thinned_to[idx] = np.where(hlb, 0.0, -np.inf)
        self.thin_taken[idx] = 0.0
        self.thin_next[idx] = np.inf
        if self.reg is not None and self.reg.thins:
            self.thin_next[idx] = np.where(hlb, self.reg.first_thin[self.sp[idx]], np.inf)

    def removed(self, idx: NDArray, age: NDArray) -> NDArray[np.float64]:
        """Removals [m3/ha] of the thinnings of parts ``idx`` taken by ages ``age``."""
        out = self.thin_taken[idx]
        early = np.flatnonzero(age < self.thinned_to[idx])  # an age before the last taken
        if len(early) and self.reg is not None:
            j = idx[early]
            out[early] = self.reg.removed(self.sp[j], self.thin_r[j], age[early])
        return out

    def extend(self, src: NDArray | int, age: NDArray | float, area: NDArray | float) -> None:
        """Append copies of the parts ``src`` with new ages and areas, as new stands (no
        thinning taken)."""
        src = np.atleast_1d(np.asarray(src, dtype=np.intp))
        n, k = len(self.age), len(src)
        self._reserve(n + k)
        for col in self._buf.values():
            col[n : n + k] = col[src]
        self._buf["age"][n : n + k] = age
        self._buf["area"][n : n + k] = area
        self._view(n + k)
        self.restart(np.arange(n, n + k))

    def _reserve(self, m: int) -> None:
        """Room for ``m`` parts. The columns live in buffers that grow by half again when full
        and the attributes are views of their first rows, so appending a few parts a period
        costs what is appended, not a copy of every column."""
        if self._buf and len(self._buf["age"]) >= m:
            return
        n = len(self.age)
        cap = max(m, n * 3 // 2 + 16)
        cols = {name: getattr(self, name) for name in _COLUMNS}
        cols.update({"si." + name: getattr(self.si, name) for name in _TERMS})
        self._buf = {}
        for name, col in cols.items():
            buf = np.empty((cap, *col.shape[1:]), dtype=col.dtype)
            buf[:n] = col
            self._buf[name] = buf
        self._view(n)

    def _view(self, n: int) -> None:
        for name in _COLUMNS:
            setattr(self, name, self._buf[name][:n])
        self.si = SiteTerms(*(self._buf["si." + name][:n] for name in _TERMS))

    def volume(self, curves: CurveSet, idx: NDArray, age: NDArray, reg: Regimes | None) -> NDArray:
        """Standing volume [m3/ha] of parts ``idx`` at ages ``age``: the code's gross yield
        less the thinnings taken (see :mod:`yieldscape.regimes`)."""
        v = curves.volume_m3_ha(self.sp[idx], age, terms=self.si.take(idx))
        if reg is not None and reg.thins:
            v -= self.removed(idx, age)
        return v

    def stocks(self, curves: CurveSet, reg: Regimes | None) -> tuple[float, float]:
        """Growing stock [m3] of all parts and of those on the harvestable land base, from
        one reading of the curves."""
        total, hlb, _ = self.stocks_and_parts(curves, reg, False)
        return total, hlb

    def stocks_and_parts(
        self, curves: CurveSet, reg: Regimes | None, per_part: bool = True
    ) -> tuple[float, float, NDArray | None]:
        """:meth:`stocks` and, with ``per_part``, each part's growing stock [m3] (the values
        of :meth:`unit_stocks`), from the same reading of the curves."""
        gross_ha = curves.volume_m3_ha(self.sp, self.age, terms=self.si)
        total = area_sum(gross_ha, self.area)
        idx = np.flatnonzero(self.in_hlb)
        v = gross_ha[idx]
        standing = gross_ha
        if reg is not None and reg.thins:
            if (self.age < self.thinned_to).any():
                taken = self.removed(np.arange(len(self.age)), self.age)
            else:  # the usual case: no part is younger than its last thinning
                taken = self.thin_taken
            total -= area_sum(taken, self.area)
            v -= taken[idx]
            standing = gross_ha - taken if per_part else gross_ha
        parts_m3 = standing * self.area if per_part else None
        return total, area_sum(v, self.area[idx]), parts_m3

    def unit_stocks(self, curves: CurveSet, reg: Regimes | None) -> NDArray:
        """Growing stock [m3] of each part (management units sum it by unit)."""
        return self.volume(curves, np.arange(len(self.age)), self.age, reg) * self.area

    def snapshot(self) -> PartsSnapshot:
        return PartsSnapshot(
            self.stand.copy(),
            self.age.copy(),
            self.area.copy(),
            self.in_hlb.copy(),
            self.sp.astype(np.int64),
        )


@dataclass(frozen=True)
class Start:
    """The stand parts at the start of a horizon and their growing stock [m3], all and on the
    harvestable land base: the same for
    every trial horizon of a flow search, so worked out once (``simulate(start=...)``)."""

    parts: _Parts
    stock_m3: float
    hlb_stock_m3: float  # on the harvestable land base
    # each part's growing stock [m3] (management units sum it), worked out at first need
    _part_stocks: list[NDArray] = field(default_factory=list, compare=False, repr=False)

    @classmethod
    def of(cls, stands: StandArrays, curves: CurveSet) -> Start:
        parts = _Parts.of(stands, curves)
        return cls(parts, *parts.stocks(curves, stands.regimes))

    def part_stocks(self, curves: CurveSet, reg: Regimes | None) -> NDArray:
        """Each starting part's growing stock [m3] (the same curves every call)."""
        if not self._part_stocks:
            self._part_stocks.append(self.parts.unit_stocks(curves, reg))
        return self._part_stocks[0]


@dataclass
class _Cut:
    """One period's cut: parts clearcut whole, the parts clearcut partly (at most one per
    pick) and their shares, the totals (``volume_m3`` is clearcuts plus thinnings), the rules
    that refused candidates, whether every eligible part was taken, and the events when
    recorded."""

    full: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.intp))
    part: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.intp))
    frac: NDArray = field(default_factory=lambda: np.zeros(0))
    volume_m3: float = 0.0
    thinning_m3: float = 0.0
    thinning_ha: float = 0.0
    area_ha: float = 0.0
    age_area: float = 0.0
    blocked: str = ""
    all_taken: bool = True
    tested: int = 0  # candidates a rule-based pick went through (cut or refused)
    depth: int = 0  # positions of the ranked queue a pick went through (see _pick_queue)
    # management units: each unit's harvest [m3] and why its pick stopped; the cover budgets
    # a pick left (for the next unit's); the thinning volume of each thinned part [m3]
    unit_m3: NDArray | None = None
    unit_reasons: list[str] = field(default_factory=list)
    cover_left: NDArray | None = None
    partition_m3: NDArray | None = None  # the period's volume of each partition
    partition_broken: str = ""  # the first partition limit the period broke
    partition_break: tuple[int, float, float] | None = None  # its partition, volume, limit
    thin_m3_by_part: NDArray = field(default_factory=lambda: np.zeros(0))
    # stand, age, area, volume, code and treatment (0 clearcut, 1 thinning) of each event
    events: tuple[NDArray, ...] | None = None
    # the parts checked for thinnings due and their removals [m3/ha] (0 where none is due)
    # and the harvest-moment age and next thinning age of each (see _thinned)
    checked: tuple[NDArray, ...] = (np.zeros(0, dtype=np.intp), *(np.zeros(0),) * 3)


@dataclass(frozen=True)
class EndingCost:
    """The ending growing stock a clearcut gives up per m3 it yields, for a period whose cuts
    regrow too little to be cut again before the horizon's end: the part's standing volume at
    the end had it stood, less its regrowth's (in the period's regeneration shares, each code
    after its delay, net of the thinnings taken by then), over the volume it yields now.
    Where the ending growing stock is what holds the level down, cutting a period's volume in
    this order, least first, leaves the most of it standing (a fractional knapsack, whose
    greedy solution by ratio is optimal: Dantzig 1957, Oper. Res. 5:266-288). ``years_left``:
    from the period's harvest moment to the horizon's end; ``shares``: codes x codes (None:
    each part regrows as its own code)."""

    forest: StandArrays
    curves: CurveSet
    years_left: float
    shares: NDArray | None = None

    def __call__(
        self, parts: _Parts, idx: NDArray, vol: NDArray, age_h: NDArray, reg: Regimes | None
    ) -> NDArray[np.float64]:
        """Per part ``idx`` (its volume now ``vol`` [m3/ha]): the ending stock given up [m3]
        per m3 cut (inf where it yields nothing)."""
        left = self.years_left
        standing = parts.volume(self.curves, idx, age_h[idx] + left, reg)
        lost = standing - self._regrowth(parts, idx, reg)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(vol > 0, lost / np.where(vol > 0, vol, 1.0), np.inf)

    def _regrowth(self, parts: _Parts, idx: NDArray, reg: Regimes | None) -> NDArray:
        """Standing volume [m3/ha] at the horizon's end of the regrowth of parts ``idx``."""
        out = np.zeros(len(idx))
        if self.shares is None:  # as its own code, after its delay
            age = self.years_left - parts.delay[idx]
            grown = np.flatnonzero(age > 0)
            if len(grown):
                j = idx[grown]
                v = self.curves.volume_m3_ha(parts.sp[j], age[grown], terms=parts.si.take(j))
                if reg is not None and reg.thins:
                    v -= reg.removed(parts.sp[j], parts.thin_r[j], age[grown])
                out[grown] = v
            return out
        assert reg is not None
        code = parts.sp[idx]
        site = self.forest.site_index[parts.stand[idx]]
        for to in np.flatnonzero(self.shares[np.unique(code)].sum(axis=0) > 0):
            w = self.shares[code, to]
            age = self.years_left - float(reg.delay[to])
            at = np.flatnonzero(w > 0) if age > 0 else np.zeros(0, dtype=np.intp)
            if not len(at):
                continue
            sp = np.full(len(at), to, dtype=parts.sp.dtype)
            terms = self.curves.site_terms(sp, site[at])
            ages = np.full(len(at), age)
            v = self.curves.volume_m3_ha(sp, ages, terms=terms)
            if reg.thins:
                v -= reg.removed(sp, reg.removals(self.curves, sp, terms), ages)
            out[at] += w[at] * v
        return out


def _ending_cost(
    plan: Plan | None,
    p: int,
    stands: StandArrays,
    curves: CurveSet,
    years_left: float,
    shares: NDArray | None,
) -> EndingCost | None:
    """The ending-stock order of period index ``p`` where the plan has one from then on."""
    if plan is None or plan.ending_from is None or p < plan.ending_from:
        return None
    return EndingCost(stands, curves, years_left, None if shares is None else shares[p])


def _thinnings_due(parts: _Parts, age_h: NDArray, reg: Regimes | None) -> tuple[NDArray, ...]:
    """The parts that may have a thinning due by the harvest moment (their next thinning
    age is reached): their positions, removals [m3/ha] due (0: none after all), the age of
    the (last) thinning, the harvest-moment age and the age of the thinning after it."""
    if reg is None or not reg.thins:
        return np.zeros(0, dtype=np.intp), *(np.zeros(0),) * 4
    live = np.flatnonzero(parts.thin_next - 1e-9 <= age_h)
    live = live[parts.area[live] > 0]
    upto = age_h[live]
    vol, age, nxt = reg.due(parts.sp[live], parts.thin_r[live], parts.thinned_to[live], upto)
    return live, vol, age, upto, nxt


def _thinned(parts: _Parts, cut: _Cut, age_h: NDArray) -> None:
    """After the period's cut: the thinnings of the parts checked for them count as taken
    up to the harvest moment (a clearcut part restarts afterwards anyway)."""
    live, vol, upto, nxt = cut.checked
    parts.thin_taken[live] += vol
    parts.thinned_to[live] = upto
    parts.thin_next[live] = nxt


def _cut_period(
    parts: _Parts,
    curves: CurveSet,
    reg: Regimes | None,
    rules: HarvestRules,
    spatial: SpatialRules | None,
    t: float,
    age_h: NDArray,
    target: float | NDArray,
    order: tuple[NDArray | None, NDArray | None, EndingCost | None],
    record: bool,
    queue_size: int,
    sizes: dict[tuple[int, ...], int] | None = None,
) -> _Cut:
    """Rank the eligible parts (age at the harvest moment ``age_h``) and clearcut up to the
    target and the area cap, the last part partly; rules of the sequential pick skip parts
    that would break them. Thinnings due this period are taken on the parts not clearcut
    and count toward the target: a clearcut takes its part's standing volume, thinnings
    pending included, so it adds its volume less those thinnings to the period's total.
    The pick ranks only about ``queue_size`` parts first (see :func:`_queue`). ``order``:
    the plan's rank of each stand (None: no plan), the management unit of each part (None:
    one flow; with units ``target`` holds one target per unit, and each unit's parts are
    picked in turn toward its own target, :func:`_pick_units`), and the ending-stock order
    that ranks each of the plan's ranks instead of the priority rule (None: the rule).
    ``sizes``: with units or partitions, the queue size each of their picks ranks first,
    by (partition or -1, unit), as the pick of the period before needed it (updated here)."""
    planned_first, unit_of_part, ending = order
    cut = _Cut()
    live, due_ha, due_age, upto, nxt = _thinnings_due(parts, age_h, reg)
    cut.checked = live, due_ha, upto, nxt
    hit = due_ha > 0
    thin, thin_ha, thin_age = live[hit], due_ha[hit], due_age[hit]
    pending = np.zeros(len(parts.age))
    pending[thin] = thin_ha
    elig = np.flatnonzero((age_h >= parts.min_age - 1e-9) & (parts.area > 0))
    cap = np.inf if rules.max_area_ha is None else float(rules.max_area_ha)
    pick = _Context(
        parts,
        curves,
        reg,
        rules,
        spatial,
        t,
        age_h,
        planned_first,
        pending,
        queue_size,
        ending,
        sizes if sizes is not None else {},
    )
    if unit_of_part is None and rules.partitions is not None:  # one unit
        unit_of_part, target = np.zeros(len(parts.age), dtype=np.int64), np.array([target])
    if unit_of_part is None:
        goal = float(target) - area_sum(thin_ha, parts.area[thin])
        picked = _pick_queue(cut, pick, elig, goal, cap, None)
    else:
        targets = np.asarray(target, dtype=np.float64)
        thin_u = np.bincount(unit_of_part[thin], thin_ha * parts.area[thin], len(targets))
        thinned = (thin, thin_ha * parts.area[thin])
        picked = _pick_units(cut, pick, elig, targets, targets - thin_u, cap, unit_of_part, thinned)
    cand, v_cand, full_pos, part_pos = picked
    _tally(cut, parts, age_h, cand, v_cand, full_pos, part_pos)
    _take_thinnings(cut, parts, thin, thin_ha)
    if unit_of_part is not None:
        cut.unit_m3 = _unit_volumes(cut, parts, unit_of_part, v_cand, full_pos, part_pos, thin)
    if rules.partitions is not None:
        _partition_volumes(cut, parts, rules.partitions, v_cand, full_pos, part_pos, thin)
    if record:
        cut.events = _events(
            cut, parts, age_h, cand, v_cand, full_pos, part_pos, thin, thin_ha, thin_age
        )
    return cut


@dataclass(frozen=True)
class _Context:
    """What every pick of a period shares: the parts, curves, regimes and rules, the spatial
    state, the harvest moment and the parts' ages then, the plan's ranks, the thinnings
    pending per part [m3/ha], the queue size to rank first and the ending-stock order, and
    the queue size of each pick of units or partitions (by partition or -1, and unit; see
    :func:`_pick_units`)."""

    parts: _Parts
    curves: CurveSet
    reg: Regimes | None
    rules: HarvestRules
    spatial: SpatialRules | None
    t: float
    age_h: NDArray
    planned_first: NDArray | None
    pending: NDArray
    queue_size: int
    ending: EndingCost | None
    sizes: dict[tuple[int, ...], int]


def _pick_queue(
    cut: _Cut,
    pick: _Context,
    elig: NDArray,
    goal: float,
    cap: float,
    budget: NDArray | None,
    limit: tuple[NDArray, NDArray] | None = None,
    size: int | None = None,
    key: tuple[int, ...] = (),
) -> tuple[NDArray, NDArray, NDArray, NDArray]:
    """The pick among the eligible parts ``elig`` toward ``goal`` (clearcut volume) within the
    area ``cap``, ranking more of the queue until the pick is decided within it; with
    ``budget``, the cover budgets left by an earlier pick of the period; with ``limit`` (the
    partitions each part counts in, partitions x parts, and each partition's room left
    [m3]), without the candidates a
    partition's maximum leaves out (:func:`_within_rooms`); ``size``: the queue size to rank
    first (None: the period's); ``key``: the pick's in ``pick.sizes``. Returns the ranked
    candidates, their volumes [m3/ha] and the
    positions cut whole and partly; ``cut.depth`` says how far into the ranked queue the pick
    went."""
    parts, curves, reg, rules, age_h = pick.parts, pick.curves, pick.reg, pick.rules, pick.age_h
    planned_first = pick.planned_first
    queue_size = pick.queue_size if size is None else size
    cand, v_cand = elig[:0], np.zeros(0)
    full_pos = part_pos = np.zeros(0, dtype=np.intp)
    if goal > 0 and len(elig):
        first = None if planned_first is None else planned_first[parts.stand[elig]]
        if limit is not None:
            keep = _within_rooms(pick, elig, first, *limit, key)
            elig, first = elig[keep], None if first is None else first[keep]
        while len(elig):  # rank more of the queue until the pick is decided within it
            cand, v_cand, whole = _queue(
                parts, curves, reg, rules.priority, age_h, elig, first, queue_size, pick.ending
            )
            if len(cand):
                full_pos, part_pos, decided = _pick(
                    cut, pick, cand, v_cand, goal, whole, cap, budget
                )
                if whole or decided:
                    used = max(cut.tested, len(full_pos) and int(full_pos[-1]) + 1)
                    cut.depth = max(used, len(part_pos) and int(part_pos[-1]) + 1)
                    break
            elif whole:
                break
            queue_size *= 4
    else:
        cut.all_taken = not _any_volume(pick, elig)
    return cand, v_cand, full_pos, part_pos


def _any_volume(pick: _Context, elig: NDArray) -> bool:
    """Whether any of the parts ``elig`` stands with volume: the first few read first, as
    one of them nearly always has (a period asking for nothing, as every period of a trial at
    level 0, read the curves for every eligible part: 1.4 s a trial at 1M stands)."""
    parts, age_h = pick.parts, pick.age_h
    for idx in (elig[:_QUEUE_MIN], elig[_QUEUE_MIN:]):
        if len(idx) and (parts.volume(pick.curves, idx, age_h[idx], pick.reg) > 0).any():
            return True
    return False


def _within_rooms(
    pick: _Context,
    elig: NDArray,
    first: NDArray | None,
    member: NDArray[np.bool_],
    room: NDArray,
    key: tuple[int, ...],
) -> NDArray[np.bool_]:
    """Which of the eligible parts ``elig`` (a plan's ranks ``first``) the partitions' maxima
    leave in a pick (``member``: partitions x parts): of each partition with a finite
    ``room`` [m3], its members in the
    queue's order while their net volume up to and including each is within the room, as
    :func:`~yieldscape.schedule.partitions.within_maximum` over the whole ranked queue; found
    by ranking only the first of the members (twice as many as the pick ``key`` kept the
    period before, more while the room is not passed), so that the pick's own queue need not
    rank the members left out. (A net
    volume is never negative, a thinning taking part of what stands: once past the room, the
    rest of the members are out.)"""
    parts = pick.parts
    keep = np.ones(len(elig), dtype=bool)
    for k in np.flatnonzero(np.isfinite(room)):
        pos = np.flatnonzero(member[k, elig])
        n = max(pick.sizes.get((*key, int(k)), len(pos) // 4), _QUEUE_MIN)
        while len(pos):
            cand, vol, whole = _queue(
                parts,
                pick.curves,
                pick.reg,
                pick.rules.priority,
                pick.age_h,
                elig[pos],
                None if first is None else first[pos],
                n,
                pick.ending,
            )
            net = (vol - pick.pending[cand]) * parts.area[cand]
            inside = within_maximum(net, np.ones((len(cand), 1), dtype=bool), room[k : k + 1])
            if whole or not inside.all():
                keep[pos] &= _mask(len(parts.area), cand[inside])[elig[pos]]
                pick.sizes[(*key, int(k))] = 2 * (int(inside.sum()) + 1)
                break
            n *= 4
    return keep


def _pick_units(
    cut: _Cut,
    pick: _Context,
    elig: NDArray,
    targets: NDArray,
    goals: NDArray,
    cap: float,
    unit_of_part: NDArray,
    thinned: tuple[NDArray, NDArray],
) -> tuple[NDArray, NDArray, NDArray, NDArray]:
    """Each management unit's pick in turn (in unit order), toward its own goal, sharing the
    period's area cap, cover budgets and spatial state (a unit's cuts constrain the next
    unit's as they constrain its own later candidates). With partitions
    (:mod:`yieldscape.schedule.partitions`) each minimum is first cut from that partition's
    candidates, unit after unit (each within its own target) while some is still needed,
    and every pick leaves out what a maximum would not allow. A part cut (wholly or partly)
    by one pick is not a candidate of the next. The picks merged as one: the candidates one
    pick after the other, positions into them."""
    parts, rules, pending = pick.parts, pick.rules, pick.pending
    area = parts.area
    total = float(targets.sum())
    mem = need = room = None
    U = len(goals)
    by_unit = [elig[unit_of_part[elig] == u] for u in range(U)]
    if rules.partitions is not None:
        # the partitions of the parts a pick may cut or thin (partitions x parts; only those
        # are read)
        read = np.r_[elig, thinned[0]].astype(np.intp)
        mem = np.zeros((rules.partitions.n, len(area)), dtype=bool)
        for k, col in enumerate(rules.partitions.of_parts(parts.stand[read], parts.sp[read]).T):
            mem[k, read] = col
        thin_k = thinned[1] @ _rows(mem, thinned[0]) if len(thinned[0]) else np.zeros(len(mem))
        need = rules.partitions.minimum(total) - thin_k
        # each unit's room under a maximum: its share of the room, as its share of the
        # targets (of the unbounded ones alike), so that the first unit cannot use it all
        inf = np.isinf(targets)
        share = targets / total if np.isfinite(total) and total > 0 else inf / max(inf.sum(), 1)
        base = rules.partitions.maximum(total) - thin_k
        room = np.zeros((len(targets), len(base)))
        room[share > 0] = share[share > 0, None] * base[None, :]
    taken = np.zeros(len(area), dtype=bool)
    left = np.asarray(goals, dtype=np.float64).copy()
    pieces, reasons, cover_left, offset = [], [""] * len(goals), None, 0
    # first each minimum, from its partition's candidates, unit after unit while some is
    # still needed; then every unit toward the rest of its target
    steps = (
        [] if need is None else [(int(k), u) for k in np.flatnonzero(need > 0) for u in range(U)]
    )
    for k, u in [*steps, *((-1, u) for u in range(U))]:
        want = left[u] if k < 0 else min(float(need[k]), left[u])
        # a part cut by an earlier pick of its unit is out (the units' parts are apart)
        mine = by_unit[u] if mem is None else by_unit[u][~taken[by_unit[u]]]
        if k >= 0:
            if want <= 0:
                continue
            mine = mine[mem[k, mine]]
        sub = _Cut()
        limit = None if room is None else (mem, room[u])
        # a pick's queue: twice what it went through the period before (at first the
        # period's queue size, in its share of the eligible parts)
        size = pick.sizes.get((k, u), pick.queue_size * len(mine) // max(len(elig), 1))
        cand, v, full, part = _pick_queue(
            sub, pick, mine, want, cap, cover_left, limit, max(size, _QUEUE_MIN), (k, u)
        )
        pick.sizes[(k, u)] = max(2 * (sub.depth + 1), _QUEUE_MIN)
        at = np.concatenate((cand[full], cand[part])).astype(np.intp, copy=False)
        net = (v[np.concatenate((full, part))] - pending[at]) * area[at]
        got = np.concatenate((net[: len(full)], sub.frac * net[len(full) :]))
        left[u] -= float(got.sum())
        if mem is not None:
            used = got @ _rows(mem, at)
            room[u], need = room[u] - used, need - used
        cap -= area[sub.full].sum() + (sub.frac * area[sub.part]).sum()
        cover_left = sub.cover_left if sub.cover_left is not None else cover_left
        if mem is not None:
            taken[at] = True
        pieces.append((sub, cand, v, full + offset, part + offset))
        offset += len(cand)
        if k < 0:
            reasons[u] = _fail_reason(sub)  # the unit's pick toward its whole target
    subs = [p[0] for p in pieces]
    cut.full = np.concatenate([c.full for c in subs]).astype(np.intp)
    cut.part = np.concatenate([c.part for c in subs]).astype(np.intp)
    cut.frac = np.concatenate([c.frac for c in subs])
    cut.tested = sum(c.tested for c in subs)
    cut.blocked = " and ".join(dict.fromkeys(c.blocked for c in subs if c.blocked))
    cut.all_taken = all(c.all_taken for c in subs)
    cut.unit_reasons = reasons
    return tuple(  # type: ignore[return-value]
        np.concatenate([p[k] for p in pieces]) for k in range(1, 5)
    )


def _rows(mem: NDArray[np.bool_], at: NDArray) -> NDArray[np.bool_]:
    """The partitions of parts ``at`` as rows (parts x partitions, C order: a volume times it
    sums in the same order whichever way the table is kept)."""
    return np.ascontiguousarray(mem[:, at].T)


def _partition_volumes(
    cut: _Cut,
    parts: _Parts,
    partitions: PartitionRules,
    v_cand: NDArray,
    full_pos: NDArray,
    part_pos: NDArray,
    thin: NDArray,
) -> None:
    """The period's volume of each partition (its clearcuts and the thinnings taken on its
    parts) and the first limit it breaks."""
    area = parts.area
    vol = np.r_[v_cand[full_pos] * area[cut.full], cut.frac * v_cand[part_pos] * area[cut.part]]
    at = np.r_[cut.full, cut.part].astype(np.intp)
    cut.partition_m3 = vol @ partitions.of_parts(parts.stand[at], parts.sp[at])
    if len(thin):
        cut.partition_m3 += cut.thin_m3_by_part @ partitions.of_parts(
            parts.stand[thin], parts.sp[thin]
        )
    cut.partition_broken = partitions.broken(cut.partition_m3, cut.volume_m3)
    if cut.partition_broken:
        cut.partition_break = partitions.first_broken(cut.partition_m3, cut.volume_m3)


def _unit_volumes(
    cut: _Cut,
    parts: _Parts,
    unit_of_part: NDArray,
    v_cand: NDArray,
    full_pos: NDArray,
    part_pos: NDArray,
    thin: NDArray,
) -> NDArray:
    """Each unit's harvest of the period [m3]: its clearcuts and the thinnings taken on its
    parts not clearcut (the uncut rest of a partly cut part)."""
    U = len(cut.unit_reasons)
    area = parts.area
    out = np.zeros(U)
    out += np.bincount(unit_of_part[cut.full], v_cand[full_pos] * area[cut.full], U)
    out += np.bincount(unit_of_part[cut.part], cut.frac * v_cand[part_pos] * area[cut.part], U)
    if len(thin):
        out += np.bincount(unit_of_part[thin], cut.thin_m3_by_part, U)
    return out


def _queue(
    parts: _Parts,
    curves: CurveSet,
    reg: Regimes | None,
    priority: str,
    age_h: NDArray,
    elig: NDArray,
    first: NDArray | None,
    size: int,
    ending: EndingCost | None = None,
) -> tuple[NDArray, NDArray, bool]:
    """The first of the period's queue: the eligible parts ``elig`` whose priority key is at
    least the ``size``-th highest (ties all in, so they are exactly the queue's first ones;
    with ``first``, a plan's rank per part, lower ranks come before higher ones), with some
    volume standing, in priority order; their volumes [m3/ha]; whether that is the whole
    queue. Ranking a few times what a period cuts instead of every eligible part saves
    most of the sort, and, where the key does not read the volume, most of the volume. With
    ``ending`` the key is the ending growing stock given up per m3 cut, least first."""
    rule = PRIORITIES[priority]
    whole = size >= len(elig)
    vol = key = None
    if rule.by_volume or whole or ending is not None:
        vol = parts.volume(curves, elig, age_h[elig], reg)
    if ending is not None:
        key = -ending(parts, elig, vol, age_h, reg)
    if not whole:
        by = key if key is not None else rule.key(age_h[elig], parts.min_age[elig], vol)
        top = _first_by_key(by, first, size)
        elig = elig[top]
        vol = vol[top] if vol is not None else parts.volume(curves, elig, age_h[elig], reg)
        first = first[top] if first is not None else None
        key = key[top] if key is not None else None
    keep = vol > 0
    elig, vol = elig[keep], vol[keep]
    if first is not None:
        first = first[keep]
    order = cut_order(
        priority,
        age_h[elig],
        parts.min_age[elig],
        vol,
        parts.rank[elig],
        first,
        key[keep] if key is not None else None,
    )
    return elig[order], vol[order], whole


def _first_by_key(key: NDArray, rank: NDArray | None, size: int) -> NDArray[np.bool_]:
    """Which elements are among the first ``size`` (fewer than all) by ``key``, descending,
    ties at the last one included; with ``rank`` (a plan's rank, integers from 0), lower
    ranks come first and the key orders each rank."""
    if rank is None:
        at = len(key) - size
        return key >= np.partition(key, at)[at]
    counts = np.bincount(rank)
    g = int(np.searchsorted(np.cumsum(counts), size))  # the rank in which the size-th falls
    k = size - int(counts[:g].sum())  # how many of rank g
    group = rank == g
    n = int(counts[g])
    chosen = group if k >= n else group & (key >= np.partition(key[group], n - k)[n - k])
    return (rank < g) | chosen


def _pick(
    cut: _Cut,
    pick: _Context,
    cand: NDArray,
    v_ha: NDArray,
    target: float,
    whole: bool,
    cap: float,
    budget: NDArray | None = None,
) -> tuple[NDArray, NDArray, bool]:
    """The candidates cut whole and the one cut partly (positions in ``cand``), by volume net
    of the thinnings a clearcut forgoes, within the area ``cap``, and whether the pick is
    decided within ``cand`` (the first of the period's queue unless ``whole``). ``budget``:
    the cover budgets an earlier pick of the period left (None: the period's own)."""
    parts, rules, age_h, t = pick.parts, pick.rules, pick.age_h, pick.t
    area = parts.area
    vol = (v_ha - pick.pending[cand]) * area[cand]
    checks: list = [pick.spatial] if pick.spatial is not None else []
    if rules.cover is not None:
        if budget is None:
            budgets = rules.cover.budgets(parts.zone[cand], age_h[cand], parts.zone, age_h, area)
        else:
            budgets = PeriodBudgets(rules.cover, budget.copy(), parts.zone[cand], age_h[cand])
        checks.append(budgets)
    decided = True
    if not checks:
        full_pos, part_pos, frac, decided = _pick_prefix(vol, area[cand], target, cap)
    else:
        picked = compiled_pick(t, parts.stand[cand], vol, area[cand], target, cap, checks, whole)
        if picked is None:  # more of the queue could change the pick: rank more
            none = np.zeros(0, dtype=np.intp)
            return none, none, False
        full_pos, part_pos, frac, refused = picked
        cut.tested = len(full_pos) + (part_pos >= 0) + sum(refused)
        if rules.cover is not None:
            cut.cover_left = checks[-1].budget
        names = [r.name for r, n in zip(checks, refused, strict=True) if n]
        cut.blocked = " and ".join(dict.fromkeys(names))
    cut.full = cand[full_pos]
    part = np.array([part_pos]) if part_pos >= 0 else np.zeros(0, dtype=np.intp)
    cut.part = cand[part]
    cut.frac = np.full(len(part), frac)
    cut.all_taken = len(cut.full) + len(cut.part) == len(cand)
    return full_pos, part, decided


def _tally(
    cut: _Cut,
    parts: _Parts,
    age_h: NDArray,
    cand: NDArray,
    v_ha: NDArray,
    full_pos: NDArray,
    part_pos: NDArray,
) -> None:
    """The clearcut volume, area and area-weighted age of the period."""
    area = parts.area
    if not len(cand):
        return
    vol = v_ha * area[cand]
    part, frac = cut.part, cut.frac
    cut.volume_m3 = vol[full_pos].sum() + (frac * vol[part_pos]).sum()
    cut.area_ha = area[cut.full].sum() + (frac * area[part]).sum()
    cut.age_area = (
        area_sum(age_h[cut.full], area[cut.full]) + (frac * area[part] * age_h[part]).sum()
    )


def _mask(n: int, idx: NDArray) -> NDArray[np.bool_]:
    """A boolean mask of length ``n``, true at ``idx`` (cheaper than np.isin per period)."""
    m = np.zeros(n, dtype=bool)
    m[idx] = True
    return m


def _take_thinnings(cut: _Cut, parts: _Parts, thin: NDArray, thin_ha: NDArray) -> None:
    """Thin the due parts not clearcut (the partly cut part on its uncut rest); add the
    removals to the period's volume."""
    if not len(thin):
        return
    share = (~_mask(len(parts.area), cut.full)[thin]).astype(np.float64)
    for part, frac in zip(cut.part, cut.frac, strict=True):
        share[thin == part] = 1.0 - frac
    area = share * parts.area[thin]
    cut.thin_m3_by_part = thin_ha * area
    cut.thinning_m3 = area_sum(thin_ha, area)
    cut.thinning_ha = float(area.sum())
    cut.volume_m3 += cut.thinning_m3


def _events(
    cut: _Cut,
    parts: _Parts,
    age_h: NDArray,
    cand: NDArray,
    v_ha: NDArray,
    full_pos: NDArray,
    part_pos: NDArray,
    thin: NDArray,
    thin_ha: NDArray,
    thin_age: NDArray,
) -> tuple[NDArray, ...]:
    """The period's events: each clearcut part and each thinned part."""
    area = parts.area
    ev_parts = np.r_[cut.full, cut.part].astype(np.intp)
    ev_area = area[ev_parts].copy()
    ev_area[len(cut.full) :] *= cut.frac
    ev_pos = np.r_[full_pos, part_pos].astype(np.intp)
    ev_vol = v_ha[ev_pos] * ev_area if len(ev_pos) else np.zeros(0)
    kept = ~_mask(len(area), cut.full)[thin]
    th, th_area = thin[kept], area[thin[kept]].copy()
    for part, frac in zip(cut.part, cut.frac, strict=True):
        th_area[th == part] *= 1.0 - frac
    return (
        np.r_[parts.stand[ev_parts], parts.stand[th]],
        np.r_[age_h[ev_parts], thin_age[kept]],
        np.r_[ev_area, th_area],
        np.r_[ev_vol, thin_ha[kept] * th_area],
        np.r_[parts.sp[ev_parts], parts.sp[th]].astype(np.int64),
        np.r_[np.zeros(len(ev_parts), np.int8), np.ones(len(th), np.int8)],
    )


def _cover_after(parts: _Parts, cover: CoverRules, age_h: NDArray, cut: _Cut) -> NDArray:
    """Old or young area of each cover rule after the period's cut (cut area restarts)."""
    after_age = age_h.copy()
    after_area = parts.area.copy()
    after_age[cut.full] = 0.0
    zones = parts.zone
    if len(cut.part):  # the cut share of a partly cut part restarts; the rest stays
        after_age = np.r_[after_age, np.zeros(len(cut.part))]
        after_area = np.r_[after_area, cut.frac * parts.area[cut.part]]
        after_area[cut.part] -= cut.frac * parts.area[cut.part]
        zones = np.r_[zones, zones[cut.part]]
    return cover.measure(zones, after_age, after_area)


def _regrow(
    parts: _Parts,
    cut: _Cut,
    L: float,
    off: float,
    forest: StandArrays,
    curves: CurveSet,
    shares: NDArray | None,
) -> tuple[int, tuple[NDArray, NDArray, NDArray]]:
    """Age the parts a period; the partly cut part splits into its uncut rest and a
    regenerating part; every cut part regrows as its code's regeneration says (``shares``:
    codes x codes, the share of a cut of code i regrowing as j; None: as itself) and restarts
    after that code's delay. Returns the part count before and the period's regeneration
    (from code, to code, area of each regenerating part)."""
    n_before = len(parts.age)
    parts.age += L
    cut_parts = cut.full
    if len(cut.part):
        cut_area = cut.frac * parts.area[cut.part]
        parts.area[cut.part] -= cut_area
        parts.extend(cut.part, 0.0, cut_area)
        new = np.arange(len(parts.age) - len(cut.part), len(parts.age))
        cut_parts = np.r_[cut.full, new].astype(np.intp)
    if shares is None:
        parts.age[cut_parts] = L - off - parts.delay[cut_parts]
        parts.restart(cut_parts)
        sp = parts.sp[cut_parts]
        return n_before, (sp, sp, parts.area[cut_parts].copy())
    return n_before, _regenerate(parts, cut_parts, L - off, forest, curves, shares)


def _regenerate(
    parts: _Parts,
    cut_parts: NDArray,
    start: float,
    forest: StandArrays,
    curves: CurveSet,
    shares: NDArray,
) -> tuple[NDArray, NDArray, NDArray]:
    """The cut parts regrow as their codes' regeneration says: the first target code in
    place, the others as new parts with their shares of the area; each takes its new code's
    curve, site terms, minimum harvest age, delay and thinnings, and restarts at ``start``
    less its delay."""
    reg = forest.regimes
    assert reg is not None and forest.min_age_by_code is not None
    src_code = parts.sp[cut_parts]
    if ((shares > 0).sum(axis=1) <= 1).all():  # every code regrows as one: no split
        row, to = np.arange(len(cut_parts)), shares.argmax(axis=1)[src_code]
    else:
        row, to = np.nonzero(shares[src_code])
    first = np.ones(len(row), dtype=bool)
    first[1:] = row[1:] != row[:-1]
    area = parts.area[cut_parts[row]] * shares[src_code[row], to]
    extra = ~first
    n0 = len(parts.age)
    if extra.any():
        parts.extend(cut_parts[row[extra]], 0.0, area[extra])
    changed = np.concatenate([cut_parts, np.arange(n0, len(parts.age))]).astype(np.intp)
    new_code = np.concatenate([to[first], to[extra]])
    parts.area[cut_parts] = area[first]
    # what depends on the code is worked out again only where the code changes
    moved = np.flatnonzero(parts.sp[changed] != new_code)
    if len(moved):
        _recode(parts, changed[moved], new_code[moved], forest, curves)
    parts.age[changed] = start - parts.delay[changed]
    parts.restart(changed)
    from_code = np.concatenate([src_code, src_code[row[extra]]])
    return from_code, new_code, parts.area[changed].copy()


def _recode(
    parts: _Parts, idx: NDArray, code: NDArray, forest: StandArrays, curves: CurveSet
) -> None:
    """Parts ``idx`` grow as ``code`` from now on: its curve and site terms at the stand's
    site index, its minimum harvest age there (inf off the land base), delay and thinnings."""
    reg = forest.regimes
    assert reg is not None and forest.min_age_by_code is not None
    parts.sp[idx] = code
    stand = parts.stand[idx]
    terms = curves.site_terms(code, forest.site_index[stand])
    for name in _TERMS:
        getattr(parts.si, name)[idx] = getattr(terms, name)
    hlb = parts.in_hlb[idx]
    parts.min_age[idx] = np.where(hlb, forest.min_age_by_code[code, stand], np.inf)
    parts.delay[idx] = reg.delay[code]
    if reg.thins:
        parts.thin_r[idx] = reg.removals(curves, code, terms)


def _disturb(
    parts: _Parts,
    curves: CurveSet,
    reg: Regimes | None,
    rate: float,
    L: float,
    n_before: int,
    cut_full: NDArray,
    rng: np.random.Generator | None,
    n_stands: int,
) -> tuple[float, float]:
    """Stand-replacing disturbance at the period's midpoint on area not cut in the period:
    as expected area fractions (the burnt share of each stand regrows as one part), or with
    ``rng`` whole stands drawn at random. Returns the area [ha] and volume [m3] lost."""
    exposed = np.zeros(len(parts.age), dtype=bool)
    exposed[:n_before] = True
    exposed[cut_full] = False
    exposed &= parts.area > 0
    share = 1.0 - (1.0 - rate) ** L
    if rng is None:
        idx = np.flatnonzero(exposed)
        lost = share * parts.area[idx]
        vol = parts.volume(curves, idx, parts.age[idx] - L / 2, reg)
        out = lost.sum(), area_sum(vol, lost)
        key = parts.stand[idx] * 2 + parts.in_hlb[idx]
        _, first, inv = np.unique(key, return_index=True, return_inverse=True)
        rep = idx[first]
        parts.area[idx] -= lost
        parts.extend(rep, L / 2 - parts.delay[rep], np.bincount(inv, lost))
        return out
    burn = rng.random(n_stands) < share
    hit = np.flatnonzero(exposed & burn[parts.stand])
    vol = parts.volume(curves, hit, parts.age[hit] - L / 2, reg)
    out = parts.area[hit].sum(), area_sum(vol, parts.area[hit])
    parts.age[hit] = L / 2 - parts.delay[hit]
    parts.restart(hit)
    return out


def _fail_reason(cut: _Cut) -> str:
    if cut.blocked:
        return f"eligible volume {cut.blocked} allow exhausted"
    if cut.all_taken:
        return "eligible volume exhausted"
    return "area cap reached"


def simulate(
    stands: StandArrays,
    curves: CurveSet,
    periods: Periods,
    rule: TargetRule,
    rules: HarvestRules = NO_RULES,
    *,
    ending_stock: float = 0.0,
    stable_periods: int = 0,
    record: bool = False,
    rng: np.random.Generator | None = None,
    start: Start | None = None,
    stop_early: bool | None = None,
) -> Simulation:
    """Run the horizon under a target ``rule`` (a :mod:`yieldscape.policies` rule: each
    period's target and floor) and the harvest ``rules``.

    With ``record`` every period's totals, growing stock and harvest events are kept and the
    run goes on to the end even where a floor is missed; without it the run stops at the
    first missed floor (the flow search only needs the verdict). The run also fails when the
    ending growing stock is below ``ending_stock`` x the initial, and, with
    ``stable_periods`` = K > 0, unless the growing stock on the harvestable land base at the
    end is at least its value K periods before the end. An LP's plan (``rules.plan``) sets
    the cutting order and the regeneration choices. Disturbance (``rules.disturbance``) is applied
    as expected area fractions, or, with ``rng``, as whole stands drawn at random (Monte
    Carlo). With ``record``, ``rules.snapshots`` names the period boundaries at which the
    stand parts are kept; cover targets need ``stands.zone_idx``. Cut parts regrow as
    ``stands.regimes`` says, or in the shares of the plan's choices; thinnings due are taken
    each period (see :func:`_cut_period`). ``start`` (:meth:`Start.of` the same stands and
    curves) saves working out the starting parts again. ``stop_early``: stop at the first
    missed floor (None: unless recorded; True: recorded too, a trial kept only if it holds).
    """
    spatial = rules.spatial.fresh() if rules.spatial is not None else None
    P, L, off = periods.count, float(periods.period_years), periods.offset_years
    start = start if start is not None else Start.of(stands, curves)
    parts = start.parts.copy()
    reg = stands.regimes
    planned = rules.plan.period if rules.plan is not None else None
    regen_shares = _regen_shares(rules, reg, P)
    sim = Simulation()
    sim.initial_stock_m3 = start.stock_m3
    out = _Totals.empty(P)
    kept_at = set(rules.snapshots) if record else set()
    queue_size = max(len(parts.age) // 4, _QUEUE_MIN)
    sizes: dict[tuple[int, ...], int] = {}  # the picks' of units and partitions
    hlb_stock = start.hlb_stock_m3  # at the start of the period (the end of the last)
    book = _UnitBook.start(rules, rule, ending_stock, start, curves, reg)
    for p in range(P):
        if p in kept_at:
            sim.snapshots[p] = parts.snapshot()
        if record:
            out.gs_start[p] = sim.initial_stock_m3 if p == 0 else out.gs_end[p - 1]
        target, floor = book.bounds(p) if book else rule.bounds(p, out.h[p - 1] if p else 0.0)
        out.target[p], out.floor[p] = np.sum(target), floor
        if record or p == P - stable_periods:
            out.hlb_start[p] = hlb_stock
        age_h = parts.age + off
        # a plan's rank of each stand this period: 0 planned by now, k planned k periods later
        first = None if planned is None else np.maximum(planned - (p + 1), 0)
        t = p * L + off
        order = (
            first,
            None if book is None else book.of_parts(parts.stand),
            _ending_cost(rules.plan, p, stands, curves, P * L - t, regen_shares),
        )
        cut = _cut_period(
            parts, curves, reg, rules, spatial, t, age_h, target, order, record, queue_size, sizes
        )
        # this period's cut (and the candidates the rules refused), twice
        queue_size = max(2 * (len(cut.full) + 1), 2 * cut.tested, _QUEUE_MIN)
        out.add(p, cut)
        if record and rules.cover is not None:
            out.cover.append(_cover_after(parts, rules.cover, age_h, cut))
        if _missed(sim, book, p, cut, floor) and (not record if stop_early is None else stop_early):
            break
        _thinned(parts, cut, age_h)  # the thinnings due are taken (a cut part restarts)
        shares = None if regen_shares is None else regen_shares[p]
        n_before, regen = _regrow(parts, cut, L, off, stands, curves, shares)
        if record:
            out.regen.append((np.full(len(regen[0]), p + 1), *regen))
        if rules.disturbance > 0:
            out.dist_ha[p], out.dist_m3[p] = _disturb(
                parts, curves, reg, rules.disturbance, L, n_before, cut.full, rng, stands.n
            )
        if record or p == P - 1 or p + 1 == P - stable_periods:
            hlb_stock = _period_stocks(sim, out, book, parts, curves, reg, p, record, p == P - 1)
    if book is None:
        _judge_end(sim, ending_stock, stable_periods, out.hlb_start, P)
    else:
        book.judge_end(sim, parts, curves, reg)
    if P in kept_at:
        sim.snapshots[P] = parts.snapshot()
    out.fill(sim, parts if record else None)
    return sim


def _period_stocks(
    sim: Simulation,
    out: _Totals,
    book: _UnitBook | None,
    parts: _Parts,
    curves: CurveSet,
    reg: Regimes | None,
    p: int,
    record: bool,
    last: bool,
) -> float:
    """The growing stock at the end of period p, kept where the run is recorded or the
    period is the ``last``; with units each part's from the same reading of the curves, for
    the book (a recorded period's stocks per unit, the last period's to judge the units'
    ending stocks). Returns the stock on the harvestable land base [m3]."""
    per_part = book is not None and (record or last)
    total, hlb, part_m3 = parts.stocks_and_parts(curves, reg, per_part)
    if book is not None and part_m3 is not None:
        book.stock(parts, part_m3, record, last)
    if record or last:
        out.gs_end[p] = total
    if last:
        sim.ending_stock_m3, sim.ending_hlb_stock_m3 = total, hlb
    return hlb


@dataclass
class _UnitBook:
    """The management units of a horizon: each unit's stands, target rule and ending-stock
    share, and, as the horizon runs, its harvests, targets and floors and its verdict."""

    of_stand: NDArray
    rule: PerUnit
    ending_stock: NDArray
    harvest: NDArray  # periods x units
    target: NDArray
    floor: NDArray
    fail_period: NDArray
    reasons: list[str]
    initial: NDArray
    initial_hlb: NDArray
    # a recorded horizon's growing stock per unit at the end of each period, all of it and on
    # the harvestable land base (periods x units)
    stock_end: list[NDArray] = field(default_factory=list)
    hlb_end: list[NDArray] = field(default_factory=list)
    # the unit of each part so far (parts are only appended and keep their stand)
    _of_parts: NDArray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    # each part's growing stock at the end of the horizon [m3], booked by the last period
    _end_m3: NDArray | None = None

    def of_parts(self, stand: NDArray) -> NDArray:
        """The unit of each part (``stand``: the parts' stands), the new parts' looked up."""
        n = len(self._of_parts)
        if len(stand) > n:
            self._of_parts = np.concatenate((self._of_parts, self.of_stand[stand[n:]]))
        return self._of_parts

    @classmethod
    def start(
        cls,
        rules: HarvestRules,
        rule: TargetRule,
        ending_stock: float | NDArray,
        start: Start,
        curves: CurveSet,
        reg: Regimes | None,
    ) -> _UnitBook | None:
        """The book of a horizon with management units (None without), from its start."""
        if rules.units is None:
            return None
        stocks = start.part_stocks(curves, reg)
        return cls.of(rules.units, rule, ending_stock, start.parts, stocks)

    @classmethod
    def of(
        cls,
        units: NDArray,
        rule: TargetRule,
        ending_stock: float | NDArray,
        start: _Parts,
        stocks: NDArray,
    ) -> _UnitBook:
        """The book of a horizon from its starting parts and their growing stock [m3]."""
        if not isinstance(rule, PerUnit):
            raise TypeError("a run with management units needs a PerUnit target rule")
        U = len(rule.rules)
        share = np.broadcast_to(np.asarray(ending_stock, dtype=np.float64), U).copy()
        of_stand = np.asarray(units, dtype=np.int64)
        initial = np.bincount(of_stand[start.stand], stocks, U)
        hlb = np.bincount(of_stand[start.stand], np.where(start.in_hlb, stocks, 0.0), U)
        empty = np.zeros((0, U))  # a row per period as it is booked
        return cls(
            of_stand,
            rule,
            share,
            empty,
            empty,
            empty,
            np.zeros(U, np.int64),
            [""] * U,
            initial,
            hlb,
        )

    def stock(self, parts: _Parts, v: NDArray, record: bool, last: bool) -> None:
        """Book each unit's growing stock at the end of a ``record``-ed period, and keep
        each part's at the end of the ``last`` (``v``: each part's [m3],
        :meth:`_Parts.unit_stocks`)."""
        if last:
            self._end_m3 = v
        if not record:
            return
        u = self.of_parts(parts.stand)
        self.stock_end.append(np.bincount(u, v, self.n))
        self.hlb_end.append(np.bincount(u, np.where(parts.in_hlb, v, 0.0), self.n))

    @property
    def n(self) -> int:
        return len(self.rule.rules)

    def bounds(self, p: int) -> tuple[NDArray, float]:
        """The units' targets of period p and the region's floor (their sum)."""
        prev = self.harvest[p - 1] if p else np.zeros(self.n)
        target, floor = self.rule.bounds_units(p, prev)
        self.target = np.vstack([self.target, target])
        self.floor = np.vstack([self.floor, floor])
        return target, float(floor.sum())

    def book(self, p: int, cut: _Cut, sim: Simulation) -> bool:
        """Record the units' harvests of period p; a unit below its floor fails (the first
        time). Whether every unit has failed by now."""
        assert cut.unit_m3 is not None
        self.harvest = np.vstack([self.harvest, cut.unit_m3])
        short = cut.unit_m3 < self.floor[p] * (1 - _REL)
        if cut.partition_broken:  # a regional limit: every unit fails with it
            short[:] = True
            cut.unit_reasons = [cut.partition_broken] * self.n
        for u in np.flatnonzero(short):
            if not self.reasons[u]:
                self.fail_period[u] = p + 1
                self.reasons[u] = cut.unit_reasons[u]
                if sim.feasible:
                    sim.feasible, sim.fail_period, sim.fail_reason = False, p + 1, self.reasons[u]
                    _broke(sim, p, cut)
        return all(self.reasons)

    def judge_end(
        self, sim: Simulation, parts: _Parts, curves: CurveSet, reg: Regimes | None
    ) -> None:
        """A unit that met every floor fails if its ending stock is below its share of its
        initial stock (the parts' at the end: booked by the last period, else read, the run
        having stopped before it); the horizon's figures per unit into ``sim``."""
        stocks = self._end_m3 if self._end_m3 is not None else parts.unit_stocks(curves, reg)
        ending = np.bincount(self.of_parts(parts.stand), stocks, self.n)
        low = ending < self.ending_stock * self.initial * (1 - _REL)
        for u in np.flatnonzero(low):
            if not self.reasons[u]:
                self.reasons[u] = "ending growing stock below the requirement"
                if sim.feasible:
                    sim.feasible, sim.fail_reason = False, self.reasons[u]
        sim.unit_harvest_m3, sim.unit_target_m3 = self.harvest, self.target
        sim.unit_floor_m3, sim.unit_fail_period = self.floor, self.fail_period
        sim.unit_fail_reason = list(self.reasons)
        sim.unit_initial_stock_m3, sim.unit_ending_stock_m3 = self.initial, ending
        sim.unit_initial_hlb_stock_m3 = self.initial_hlb
        if self.stock_end:
            sim.unit_stock_end_m3 = np.vstack(self.stock_end)
            sim.unit_hlb_stock_end_m3 = np.vstack(self.hlb_end)


def _missed(sim: Simulation, book: _UnitBook | None, p: int, cut: _Cut, floor: float) -> bool:
    """Whether period p's harvest missed its floor (with units: whether every unit has missed
    one by now), failing the horizon at the first miss."""
    if book is not None:
        return book.book(p, cut, sim)
    short = cut.volume_m3 < floor * (1 - _REL)
    if (short or cut.partition_broken) and sim.feasible:
        why = _fail_reason(cut) if short else cut.partition_broken
        sim.feasible, sim.fail_period, sim.fail_reason = False, p + 1, why
        _broke(sim, p, cut)
        return True
    return False


def _broke(sim: Simulation, p: int, cut: _Cut) -> None:
    """Where a horizon failing in period index p fails on a partition: its limit, in ``sim``."""
    if cut.partition_break is not None and sim.fail_reason == cut.partition_broken:
        sim.partition_break = (p + 1, *cut.partition_break)


def _regen_shares(rules: HarvestRules, reg: Regimes | None, P: int) -> NDArray | None:
    """Per period the shares in which each code's cut regrows as each: the plan's choices,
    or the regimes' transitions (None: every cut regrows as itself)."""
    shares = rules.plan.regen_shares if rules.plan is not None else None
    if shares is None and reg is not None and reg.changes:
        shares = np.broadcast_to(reg.transitions, (P, *reg.transitions.shape))
    return shares


def _judge_end(
    sim: Simulation, ending_stock: float, stable_periods: int, hlb_start: NDArray, P: int
) -> None:
    """Fail a horizon that met every floor on the ending-stock or the stability rule."""
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


@dataclass
class _Totals:
    """Per-period figures of a horizon while it runs."""

    h: NDArray
    ha: NDArray
    age_area: NDArray
    gs_start: NDArray
    gs_end: NDArray
    hlb_start: NDArray
    target: NDArray
    floor: NDArray
    dist_ha: NDArray
    dist_m3: NDArray
    thin_m3: NDArray
    thin_ha: NDArray
    events: list[tuple[NDArray, ...]] = field(default_factory=list)
    cover: list[NDArray] = field(default_factory=list)
    regen: list[tuple[NDArray, ...]] = field(default_factory=list)
    partitions: list[NDArray] = field(default_factory=list)

    @classmethod
    def empty(cls, P: int) -> _Totals:
        nan = np.full(P, np.nan)
        return cls(
            np.zeros(P),
            np.zeros(P),
            np.zeros(P),
            nan.copy(),
            nan.copy(),
            nan.copy(),
            np.zeros(P),
            np.zeros(P),
            np.zeros(P),
            np.zeros(P),
            np.zeros(P),
            np.zeros(P),
        )

    def add(self, p: int, cut: _Cut) -> None:
        """Period p's cut: its volume, area, age and thinnings, and its events if recorded."""
        self.h[p], self.ha[p], self.age_area[p] = cut.volume_m3, cut.area_ha, cut.age_area
        self.thin_m3[p], self.thin_ha[p] = cut.thinning_m3, cut.thinning_ha
        if cut.events is not None:
            period = np.full(len(cut.events[0]), p + 1)
            self.events.append(cut.events[:1] + (period,) + cut.events[1:])
        if cut.partition_m3 is not None:
            self.partitions.append(cut.partition_m3)

    def fill(self, sim: Simulation, parts: _Parts | None) -> None:
        """Move the figures into the simulation (with the parts at the end when recorded)."""
        sim.hlb_stock_start_m3 = self.hlb_start
        sim.target_m3, sim.floor_m3 = self.target, self.floor
        sim.disturbed_ha, sim.disturbed_m3 = self.dist_ha, self.dist_m3
        if parts is not None:
            sim.final_age_years, sim.final_area_ha = parts.age, parts.area
        if self.cover:
            sim.cover_area_ha = np.vstack(self.cover)
        if self.partitions:
            sim.partition_m3 = np.vstack(self.partitions)
        sim.harvest_m3, sim.harvest_ha, sim.harvest_age_area = self.h, self.ha, self.age_area
        sim.growing_stock_start_m3, sim.growing_stock_end_m3 = self.gs_start, self.gs_end
        sim.thinning_m3, sim.thinning_ha = self.thin_m3, self.thin_ha
        if self.events:
            cols = [np.concatenate(c) for c in zip(*self.events, strict=True)]
            (
                sim.event_stand,
                sim.event_period,
                sim.event_age_years,
                sim.event_area_ha,
                sim.event_volume_m3,
                sim.event_code,
                sim.event_treatment,
            ) = cols
        if self.regen:
            cols = [np.concatenate(c) for c in zip(*self.regen, strict=True)]
            sim.regen_period, sim.regen_from, sim.regen_to, sim.regen_area_ha = cols
