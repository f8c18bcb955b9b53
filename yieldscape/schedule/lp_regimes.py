"""The harvest LP's side of management regimes (:mod:`yieldscape.regimes`): regeneration groups
keyed by the code a cut part regrows into, the choices among codes that the LP makes, and the
thinnings of a column while it stands.

A regeneration group is a code at a site class, minimum harvest age and zone. The area cut from
a source (a stratum, or a group cut again) regrows as its code's transitions say: into the
group of each target code at the source's site class and zone, the code's minimum harvest age
at the source's representative stand (``StandArrays.min_age_by_code``), in the transition's
shares; chains (A -> B -> B) add the groups their targets regrow into, until none is new. Where
a code's regeneration is a choice, the source's cut goes to a split row of its own instead, and
choice columns take it on to the option groups (:func:`yieldscape.schedule.lp.build_lp`).

Without transitions every source regrows into its own group, the groups of before: code,
site class, minimum harvest age and zone of a stratum, each group's site, age rule and delay
those of its first stratum.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.regimes import Regimes

KEY = ["sp", "si", "min", "zone"]  # a group: code, site class, minimum harvest age, zone
_EDGE = ["src", "from", "option", "share"]  # of a source-to-group row, besides the group


@dataclass(frozen=True)
class Regrowth:
    """Where the area cut from each source regrows. Sources are the strata (0 .. S-1), then
    the regeneration groups (S .. S+G-1). Source k's area goes to ``target[start[k]:start[k +
    1]]`` in the ``share`` beside each: a target below G is a group, G + n the split row of
    choice n (share 1). Choice n splits a cut of code ``choice_code[n]`` among the groups
    ``option_group[option_start[n]:option_start[n + 1]]`` (codes ``option_code``)."""

    start: NDArray[np.int64]
    target: NDArray[np.int64]
    share: NDArray[np.float64]
    choice_code: NDArray[np.int64]
    option_start: NDArray[np.int64]
    option_group: NDArray[np.int64]
    option_code: NDArray[np.int64]

    @property
    def choices(self) -> int:
        return len(self.choice_code)

    def of(self, sources: NDArray) -> tuple[NDArray, NDArray, NDArray]:
        """The targets of each of ``sources``: per target, the position in ``sources``, the
        target and the share."""
        count = self.start[sources + 1] - self.start[sources]
        pos = np.repeat(np.arange(len(sources)), count)
        within = np.arange(len(pos)) - np.repeat(np.cumsum(count) - count, count)
        at = self.start[sources][pos] + within
        return pos, self.target[at], self.share[at]


@dataclass(frozen=True)
class Groups:
    """The regeneration groups (sorted by :data:`KEY`): code, site class, minimum harvest age,
    zone, representative stand, site index and regeneration delay of each (a frame), each
    stratum's own group (-1 where no cut regrows into it and nothing is disturbed), and the
    :class:`Regrowth` of every source."""

    frame: pd.DataFrame
    own: NDArray[np.int64]
    regrowth: Regrowth


def regeneration_groups(
    stands: StandArrays,
    strata: pd.DataFrame,
    disturbed: bool,
) -> Groups:
    """The groups the strata regrow into, closed under the transitions of their codes.

    ``strata``: per stratum its code ``sp``, site class ``si``, zone, representative stand
    ``rep`` and (mean) site index ``site``. With ``disturbed`` every stratum's own group is
    kept too: disturbed area regrows as its own code.
    """
    found = _targets(strata, stands)
    seen = found.drop(columns=_EDGE)
    if disturbed:
        own = strata.assign(min=stands.min_harvest_age[strata["rep"].to_numpy()])
        own["delay"] = stands.regen_delay_years[strata["rep"].to_numpy()]
        seen = pd.concat([seen, own[seen.columns]])
    seen = seen.drop_duplicates(KEY)
    frontier = seen
    while len(frontier):  # a chain adds a link per pass
        nxt = _targets(frontier.reset_index(drop=True), stands).drop_duplicates(KEY)
        known = nxt[KEY].merge(seen[KEY], how="left", on=KEY, indicator=True)["_merge"]
        frontier = nxt[(known == "left_only").to_numpy()].drop(columns=_EDGE)
        seen = pd.concat([seen, frontier])
    frame = seen.sort_values(KEY, kind="stable").reset_index(drop=True)
    gid = frame[KEY].reset_index().rename(columns={"index": "gid"})
    own_key = strata.assign(min=stands.min_harvest_age[strata["rep"].to_numpy()])
    own = own_key[KEY].merge(gid, how="left", on=KEY)["gid"].fillna(-1).to_numpy(np.int64)
    from_groups = _targets(frame, stands)
    from_groups["src"] += len(strata)
    edges = pd.concat([found, from_groups], ignore_index=True).merge(gid, how="left", on=KEY)
    regrowth = _regrowth(edges, len(strata) + len(frame), len(frame))
    return Groups(frame, own, regrowth)


def _targets(src: pd.DataFrame, stands: StandArrays) -> pd.DataFrame:
    """One row per source (row of ``src``) and code it regrows into: the group key there (the
    code, the source's site class and zone, the code's minimum harvest age at the source's
    representative stand), the representative stand, site and the code's delay, the source's
    row ``src``, the option's place among the code's targets and the share (NaN: an option of
    a choice). Rows in source order, as the groups take their first source's site."""
    reg = stands.regimes
    sp = src["sp"].to_numpy()
    rep = src["rep"].to_numpy()
    parts = []
    for c in np.unique(sp):  # per code
        mine = np.flatnonzero(sp == c)
        to, share = _codes_after(reg, int(c))
        for k, (j, q) in enumerate(zip(to, share, strict=True)):
            min_age, delay = _rules_of(stands, int(j), rep[mine])
            part = src.iloc[mine][["si", "zone", "rep", "site"]].assign(
                sp=int(j), min=min_age, delay=delay, src=mine, option=k, share=q, **{"from": c}
            )
            parts.append(part)
    if not parts:
        cols = [*KEY, "rep", "site", "delay", "src", "from", "option", "share"]
        return pd.DataFrame({c: np.zeros(0) for c in cols})
    out = pd.concat(parts, ignore_index=True).sort_values(["src", "option"], kind="stable")
    return out.reset_index(drop=True)


def _codes_after(reg: Regimes | None, c: int) -> tuple[NDArray, NDArray]:
    """The codes a cut of code c regrows as and their shares (NaN for the options of a
    choice)."""
    if reg is None:
        return np.array([c]), np.ones(1)
    if reg.choices[c]:
        opts = np.asarray(reg.choices[c], dtype=np.int64)
        return opts, np.full(len(opts), np.nan)
    to = np.flatnonzero(reg.transitions[c] > 0)
    return to, reg.transitions[c, to]


def _rules_of(stands: StandArrays, j: int, rep: NDArray) -> tuple[NDArray, NDArray]:
    """Minimum harvest age and delay of code j regrowing at the stands ``rep``: as the
    simulation takes them, the code's own (``min_age_by_code``, the code's delay) where
    transitions are given, else the stands' own."""
    reg, by_code = stands.regimes, stands.min_age_by_code
    if reg is None or not reg.changes or by_code is None:
        return stands.min_harvest_age[rep], stands.regen_delay_years[rep]
    return by_code[j, rep], np.full(len(rep), reg.delay[j])


def _regrowth(edges: pd.DataFrame, sources: int, G: int) -> Regrowth:
    """The :class:`Regrowth` of the source-to-group rows ``edges`` (columns src, from, sp,
    option, share, gid): fixed shares go to their groups; the options of a choice make one
    choice per code cut and set of option groups, and the source's cut goes to it whole."""
    fixed = edges[edges["share"].notna()]
    src = [fixed["src"].to_numpy(np.int64)]
    target = [fixed["gid"].to_numpy(np.int64)]
    share = [fixed["share"].to_numpy(np.float64)]
    choice_code: list[int] = []
    option_group: list[NDArray] = []
    option_code: list[NDArray] = []
    options = edges[edges["share"].isna()].sort_values(["src", "option"], kind="stable")
    for c, rows in options.groupby("from", sort=True):  # per code with a choice
        m = int(rows["option"].max()) + 1  # a code's choice has the same options everywhere
        groups = rows["gid"].to_numpy(np.int64).reshape(-1, m)
        uniq, inv = np.unique(groups, axis=0, return_inverse=True)
        src.append(rows["src"].to_numpy(np.int64)[::m])
        target.append(G + len(choice_code) + np.ravel(inv))
        share.append(np.ones(len(groups)))
        choice_code += [int(c)] * len(uniq)
        option_group += list(uniq)
        option_code += [rows["sp"].to_numpy(np.int64)[:m]] * len(uniq)
    s, t, q = (np.concatenate(a) for a in (src, target, share))
    order = np.lexsort((t, s))
    start = np.r_[0, np.cumsum(np.bincount(s, minlength=sources))].astype(np.int64)
    sizes = [len(g) for g in option_group]
    return Regrowth(
        start,
        t[order],
        q[order],
        np.asarray(choice_code, dtype=np.int64),
        np.r_[0, np.cumsum(sizes)].astype(np.int64),
        np.concatenate([np.zeros(0, np.int64), *option_group]),
        np.concatenate([np.zeros(0, np.int64), *option_code]),
    )


@dataclass(frozen=True)
class Removals:
    """The thinnings of the strata and groups ("units": the strata, then the groups): each
    unit's code and its removal [m3/ha] at each of its code's thinnings (units x thinnings;
    see :meth:`Regimes.removals`)."""

    reg: Regimes
    code: NDArray
    amounts: NDArray

    @classmethod
    def of(cls, reg: Regimes, curves: CurveSet, code: NDArray, site: NDArray) -> Removals:
        """The removals of units of codes ``code`` at site indices ``site``."""
        terms = curves.site_terms(code, site)
        return cls(reg, code, reg.removals(curves, code, terms))

    def taken(self, unit: NDArray, upto: NDArray) -> NDArray:
        """Removals [m3/ha] of the thinnings of ``unit`` at ages up to ``upto``."""
        return self.reg.removed(self.code[unit], self.amounts[unit], upto)

    def due(self, unit: NDArray, after: NDArray, upto: NDArray) -> NDArray:
        """Removals [m3/ha] of the thinnings of ``unit`` at ages in (after, upto] (arrays of
        units x periods)."""
        n, P = after.shape
        flat = np.repeat(unit, P)
        vol, _, _ = self.reg.due(self.code[flat], self.amounts[flat], after.ravel(), upto.ravel())
        return vol.reshape(n, P)


def thinnings_by_period(
    rem: Removals, age0: NDArray, delay: NDArray, periods: Periods
) -> tuple[NDArray, NDArray]:
    """Removals [m3/ha] due in each period (as the simulation takes them: those whose age falls
    in (age at the previous harvest moment, age at this one], an existing stand's window
    opening at its present age), for each stratum (strata x periods, ``age0`` their ages) and
    for regrowth of each group established d periods before (groups x d = 1 .. P, ``delay``
    the groups' delays)."""
    P, L, off = periods.count, float(periods.period_years), periods.offset_years
    S = len(age0)
    h = age0[:, None] + np.arange(P)[None, :] * L + off  # strata: ages at the harvest moments
    x = rem.due(np.arange(S), np.c_[age0, h[:, :-1]], h)
    upto = np.arange(1, P + 1)[None, :] * L - delay[:, None]  # regrowth, d periods on
    y = rem.due(S + np.arange(len(delay)), upto - L, upto)
    return x, y
