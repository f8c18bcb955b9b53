"""Management regimes for the projection: what a clearcut part of each code regrows as, and how
each code's stands are thinned.

Codes are the scenario's ``[species.<CODE>]`` tables (species or analysis units), indexed as in
:class:`~yieldscape.projection.CurveSet` (which is passed in: the projection builds on this
module). Every curve there is the code's *gross* yield G(t):
standing volume plus all removals so far. A thinned stand stands at S(t) = G(t) - R(t), R the
removals taken up to t (Assmann 1970, *The Principles of Forest Yield Study*: total growth is
standing plus removals). Removals are

- from a yield table of a managed stand, the table's ``thinning_m3_ha`` at its ages (site
  classes blended as the volumes are);
- from ``[[thinnings]]``, a share q_k of the standing volume at age t_k:
  r_k = q_k (G(t_k) - R(t_k-)); the stand keeps the gross increment of its curve after the
  thinning (the constant-increment assumption of Langsaeter's plateau, Langsaeter 1941, from
  memory, discussed in Assmann 1970). It is an approximation: heavy thinnings below the
  plateau lose increment, which the curve then overstates.

So final felling plus removals always equals G at the clearcut age (mass balance). Area outside
the harvestable land base is never thinned and stands at G.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np
from numpy.typing import NDArray

from yieldscape.config import Scenario
from yieldscape.growth.rules import min_harvest_ages

# CurveSet and SiteTerms (yieldscape.projection, which builds on this module) are passed in
CurveSet = Any
SiteTerms = Any


@dataclass(frozen=True)
class Regimes:
    """Transitions and thinning schedules of every code (rows and columns: CurveSet codes).

    ``transitions[i, j]`` is the share of a clearcut of code i that regrows as code j (the
    rule-based scheduler's: a choice takes its first option); ``choices[i]`` lists the option
    codes where i's regeneration is a choice for the LP. ``thin_ages[i, k]`` is the age of
    thinning k of code i (inf where none), ``thin_share[i, k]`` its share of the standing volume
    (NaN for a table's removals, in ``thin_table[i]``: classes x thinnings, m3/ha).
    ``delay[i]`` is code i's regeneration delay [years].
    """

    transitions: NDArray[np.float64]
    choices: tuple[tuple[int, ...] | None, ...]
    thin_ages: NDArray[np.float64]
    thin_share: NDArray[np.float64]
    thin_table: dict[int, NDArray[np.float64]]
    delay: NDArray[np.float64]

    @classmethod
    def from_scenario(cls, scenario: Scenario, curves: CurveSet) -> Regimes:
        n = len(curves.codes)
        index = {c: i for i, c in enumerate(curves.codes)}
        trans = np.eye(n)
        choices: list[tuple[int, ...] | None] = [None] * n
        schedules: list[tuple[tuple[float, ...], tuple[float, ...]]] = []
        table: dict[int, NDArray] = {}
        for i, code in enumerate(curves.codes):
            sp = scenario.species[code]
            if sp.regenerate_as is not None:
                trans[i] = 0.0
                for to, share in sp.regenerate_as.default_shares():
                    trans[i, index[to]] += share
                if sp.regenerate_as.kind == "choice":
                    choices[i] = tuple(index[c] for c in sp.regenerate_as.codes)
            if sp.thinning_m3_ha is not None:
                removals = np.asarray(sp.thinning_m3_ha, dtype=np.float64)
                at = np.flatnonzero(removals.max(axis=0) > 0)  # ages with a removal
                ages = tuple(float(sp.ages[k]) for k in at)  # type: ignore[index]
                table[i] = removals[:, at]
                schedules.append((ages, (np.nan,) * len(ages)))
            else:
                t = sp.thinnings
                schedules.append((tuple(x.age_years for x in t), tuple(x.removal_share for x in t)))
        k = max((len(a) for a, _ in schedules), default=0)
        ages = np.full((n, k), np.inf)
        shares = np.full((n, k), np.nan)
        for i, (a, q) in enumerate(schedules):
            ages[i, : len(a)], shares[i, : len(q)] = a, q
        delay = np.array([scenario.species[c].regen_delay_years for c in curves.codes], float)
        return cls(trans, tuple(choices), ages, shares, table, delay)

    @property
    def thins(self) -> bool:
        """Whether any code is thinned."""
        return self.thin_ages.shape[1] > 0

    @property
    def changes(self) -> bool:
        """Whether any code regrows as another (or several)."""
        return not np.array_equal(self.transitions, np.eye(len(self.transitions)))

    def removals(self, curves: CurveSet, sp: NDArray, terms: SiteTerms) -> NDArray[np.float64]:
        """Each element's removal [m3/ha] at each thinning of its code (elements x thinnings;
        0 past the code's last thinning)."""
        n, k = len(sp), self.thin_ages.shape[1]
        out = np.zeros((n, k))
        for i in np.unique(sp):  # per code
            mine = np.flatnonzero(sp == i)
            if i in self.thin_table:
                out[mine] = self._table_removals(curves, int(i), terms.take(mine))
                continue
            done = np.zeros(len(mine))
            for j in range(k):  # a handful of thinnings
                if not np.isfinite(self.thin_ages[i, j]):
                    break
                ages = np.full(len(mine), self.thin_ages[i, j])
                gross = curves.volume_m3_ha(sp[mine], ages, terms=terms.take(mine))
                out[mine, j] = self.thin_share[i, j] * (gross - done)
                done += out[mine, j]
        return out

    def _table_removals(self, curves: CurveSet, i: int, terms: SiteTerms) -> NDArray:
        """A table's removals at each of its thinning ages, site classes blended linearly."""
        table = self.thin_table[i]
        cls = terms.row - curves.first_row(i)
        lo = table[cls]
        hi = table[np.minimum(cls + 1, len(table) - 1)]
        out = np.zeros((len(cls), self.thin_ages.shape[1]))
        out[:, : table.shape[1]] = lo + terms.blend[:, None] * (hi - lo)
        return out

    @cached_property
    def first_thin(self) -> NDArray[np.float64]:
        """Each code's first thinning age [years] (inf: never thinned)."""
        if not self.thins:
            return np.full(len(self.delay), np.inf)
        return self.thin_ages.min(axis=1)

    def removed(self, sp: NDArray, amounts: NDArray, upto: NDArray) -> NDArray[np.float64]:
        """Removals [m3/ha] of each element's thinnings at ages up to ``upto``."""
        out = np.zeros(len(sp))
        if not self.thins:
            return out
        # the thinnings x elements test only where the first thinning is reached
        m = np.flatnonzero(upto >= self.first_thin[sp] - 1e-9)
        if len(m):
            hit = self.thin_ages[sp[m]] <= upto[m, None] + 1e-9
            out[m] = (amounts[m] * hit).sum(axis=1)
        return out

    def next_after(self, sp: NDArray, after: NDArray) -> NDArray[np.float64]:
        """The age [years] of each element's first thinning after ``after`` (inf: none)."""
        if not self.thins:
            return np.full(len(sp), np.inf)
        t = self.thin_ages[sp]
        return np.where(t > after[:, None] + 1e-9, t, np.inf).min(axis=1)

    def due(
        self, sp: NDArray, amounts: NDArray, after: NDArray, upto: NDArray
    ) -> tuple[NDArray, NDArray, NDArray]:
        """Removals [m3/ha] of each element's thinnings in (after, upto], the age of the last
        of them (NaN where none is due) and the age of the next thinning after ``upto`` (inf:
        none). Right for any elements; the simulation calls it on the few parts whose next
        thinning age is reached."""
        t = self.thin_ages[sp]
        later = t > upto[:, None] + 1e-9
        hit = (t > after[:, None] + 1e-9) & ~later
        vol = (amounts * hit).sum(axis=1)
        last = np.where(hit, t, -np.inf).max(axis=1)
        nxt = np.where(later, t, np.inf).min(axis=1)
        return vol, np.where(np.isfinite(last), last, np.nan), nxt

    def targets(self) -> NDArray[np.intp]:
        """The codes that cut land may regrow as (by the rules or as an LP option)."""
        targets = np.flatnonzero(self.transitions.sum(axis=0) > 0)
        options = [c for opts in self.choices if opts for c in opts]
        return np.union1d(targets, options).astype(np.intp)

    def min_age_by_code(
        self, scenario: Scenario, curves: CurveSet, site_index: NDArray
    ) -> NDArray[np.float64]:
        """Each code's minimum harvest age at each stand's site (codes x stands): what a part
        of the stand takes when it regrows as that code. Only codes that are regrown into are
        worked out (per distinct site); the others are NaN."""
        n = len(curves.codes)
        out = np.full((n, len(site_index)), np.nan)
        for j in self.targets():  # per code
            sp = scenario.species[curves.codes[j]]
            out[j] = min_harvest_ages(
                curves.curves[j],
                site_index,
                sp.age_rules(),
                sp.money(scenario.economics),
                scenario.growth.search(),
            )
        return out

    def long_run(self) -> NDArray[np.float64]:
        """Where a hectare of each code ends after many rotations (codes x codes): the limit
        of the transition matrix's powers (A -> B -> B ends in B; a split keeps its shares)."""
        m = self.transitions.copy()
        for _ in range(256):  # a chain settles in as many steps as it has links
            nxt = m @ self.transitions
            if np.allclose(nxt, m, atol=1e-12):
                return nxt
            m = nxt
        return 0.5 * (m + m @ self.transitions)  # a cycle (A -> B -> A): its mean
