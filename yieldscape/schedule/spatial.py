"""Green-up and opening-size rules over the stand adjacency graph.

A stand cut at time t is *open* until t + ``greenup_years``. An opening is a connected group
of open stands over the adjacency graph; its area is the area cut in its stands inside the
window. Area restriction model (ARM; Murray 1999, Forest Science 45:45-52): no opening may
exceed ``max_opening_ha``. Unit restriction model (URM, ``max_opening_ha = 0``): no two
neighbours may be open at once. Candidates are taken in priority order; a stand that would break
a rule is skipped and the next one taken. A stand whose harvestable area alone exceeds the
maximum opening is never cut (yieldscape does not split stands into several cut blocks).

The pick is sequential by definition (each cut changes what its neighbours may do):
:class:`SpatialRules` gives the scalar test of one candidate (``allows``/``commit``) used by
:func:`~yieldscape.schedule.picker.sequential_pick`, the reference. :class:`OpeningsBlock` holds
the same state in arrays for :func:`~yieldscape.schedule.picker.block_pick`, which decides
candidates in blocks: ``screen`` refuses, at the block start, a candidate with an open neighbour
(URM; a per-period flag of the stands next to an open one) or whose opening would exceed the
maximum (ARM: its area plus the openings it touches, found through the union-find for the whole
block at once); ``unsure`` names the candidates an earlier one of the block could affect (a
neighbour; for ARM also the same stand or an opening touched by both); the others are cut
together (``accept``: one new label per cut, its openings' labels pointed at it), and the few
unsure ones are settled in order with the scalar test on the arrays. Openings at the start of a
period come from one vectorised connected-components call and grow through the union-find
(parents and areas in numpy arrays) as stands are cut.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from yieldscape.adjacency import Adjacency
from yieldscape.projection import StandArrays
from yieldscape.schedule.eligibility import larger_than_opening

_REL = 1e-9
_MIN_PART_HA = 1e-9


@dataclass
class SpatialRules:
    name = "the spatial rules (green-up and openings)"  # in messages

    adjacency: Adjacency
    greenup_years: float
    max_opening_ha: float = 0.0  # 0: unit restriction
    last_cut: NDArray = field(default_factory=lambda: np.zeros(0))
    open_area: NDArray = field(default_factory=lambda: np.zeros(0))

    def fresh(self) -> SpatialRules:
        """A copy with no stand cut yet (one per simulated horizon)."""
        n = self.adjacency.n
        return SpatialRules(
            self.adjacency,
            self.greenup_years,
            self.max_opening_ha,
            np.full(n, -np.inf),
            np.zeros(n),
        )

    def never_cut(self, harvestable_ha: NDArray) -> NDArray[np.bool_]:
        """Stands the opening rule never lets be cut: their harvestable area alone is larger
        than the maximum opening (none under the unit restriction)."""
        return larger_than_opening(harvestable_ha, self.max_opening_ha)

    def is_open(self, t: float) -> NDArray[np.bool_]:
        return (t - self.last_cut) < self.greenup_years - 1e-9

    def begin(self, t: float) -> None:
        """Openings at the start of a period's pick (one connected-components call)."""
        self._t = t
        open_now = self.is_open(t)
        self.open_area[~open_now] = 0.0
        labels = self.adjacency.components(open_now)
        n_labels = int(labels.max()) + 1 if (labels >= 0).any() else 0
        self._comp_area = (
            list(np.bincount(labels[open_now], self.open_area[open_now], minlength=n_labels))
            if n_labels
            else []
        )
        self._parent = list(range(n_labels))
        self._label = labels.tolist()
        self._open = open_now.tolist()
        self._cut_s: list[int] = []  # stands cut and the areas, in order
        self._cut_a: list[float] = []
        self._pending: tuple[set[int], float] = (set(), 0.0)

    def _find(self, x: int) -> int:
        parent = self._parent
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    def allows(self, k: int, s: int, full_area: float, a: float) -> bool:
        """May stand s have area a cut now? (Remembers the openings it would join.)"""
        nb = self.adjacency.indices[self.adjacency.indptr[s] : self.adjacency.indptr[s + 1]]
        if self.max_opening_ha <= 0:
            if any(self._open[j] for j in nb.tolist() if j != s):
                return False
            self._pending = (set(), a)
            return True
        if full_area > self.max_opening_ha * (1 + _REL):
            return False  # larger than an opening: never cut
        roots = {self._find(self._label[j]) for j in nb.tolist() if self._open[j]}
        if self._open[s]:
            roots.add(self._find(self._label[s]))
        total = a + sum(self._comp_area[r] for r in roots)
        if total > self.max_opening_ha * (1 + _REL):
            return False
        self._pending = (roots, total)
        return True

    def commit(self, k: int, s: int, a: float) -> None:
        """Cut stand s (after :meth:`allows`): it opens, or grows, one opening."""
        roots, total = self._pending
        new = len(self._parent)
        self._parent.append(new)
        self._comp_area.append(total)
        for r in roots:
            self._parent[r] = new
        self._label[s] = new
        self._open[s] = True
        self._cut_s.append(s)
        self._cut_a.append(a)

    def end(self) -> None:
        self._close(self._t, np.asarray(self._cut_s, dtype=np.intp), self._cut_a)

    def _close(self, t: float, cut: NDArray, cut_area: NDArray | list) -> None:
        # the area cut per stand, summed in the order cut (np.bincount adds in input order)
        if len(cut):
            total = np.bincount(cut, np.asarray(cut_area, dtype=float), self.adjacency.n)
            cut = _unique(cut)
            self.last_cut[cut] = t
            self.open_area[cut] += total[cut]

    def block(self, t: float, stands: NDArray, area: NDArray) -> OpeningsBlock:
        """The state of one period's block pick (:func:`~yieldscape.schedule.picker.block_pick`)
        over these candidates (their stands and areas [ha], in priority order)."""
        return OpeningsBlock(self, t, stands, area)


def _unique(a: NDArray) -> NDArray:
    """np.unique of integers by a sort (numpy 2.4's hashing np.unique is about 10x slower on
    the few thousand values of a block)."""
    a = np.sort(a)
    keep = np.ones(len(a), dtype=bool)
    keep[1:] = a[1:] != a[:-1]
    return a[keep]


_NONE = np.iinfo(np.int64).max  # no writer yet (see OpeningsBlock.unsure)


class OpeningsBlock:
    """The green-up and opening rules of one period's pick, in arrays for the block picker.

    The open stands, and for openings (ARM) each open stand's opening as a label in a
    union-find over numpy arrays with the opening's area per label. Candidates are positions in
    the period's priority order; blocks are position ranges ``lo:hi``.
    """

    def __init__(self, rules: SpatialRules, t: float, stands: NDArray, area: NDArray):
        adj = rules.adjacency
        self.rules, self.t = rules, t
        self.indptr, self.indices = adj.indptr, adj.indices
        self.stands = np.asarray(stands, dtype=np.int64)
        self.area = np.asarray(area, dtype=float)
        open_now = rules.is_open(t)
        self.open_now, self.open = open_now, open_now.copy()
        self.urm = rules.max_opening_ha <= 0
        self.limit = rules.max_opening_ha * (1 + _REL)
        n_keys = adj.n
        if not self.urm:
            n_keys += self._openings(open_now, rules.open_area, len(stands))
        self.writer = np.full(n_keys, _NONE, dtype=np.int64)  # scratch of unsure()
        if self.urm:  # the stands with an open neighbour: refused for the rest of the period
            self.near = np.zeros(adj.n, dtype=bool)
            self._opened(np.flatnonzero(open_now))
        self._pending: tuple[set[int], float] = (set(), 0.0)

    def _openings(self, open_now: NDArray, open_area: NDArray, n_cand: int) -> int:
        """The openings at the start of the pick in the union-find: a label per open stand
        (its place among them), the labels of neighbours hooked together, each opening's area
        summed in stand order (as SpatialRules.begin sums it); the number of labels there is
        room for (a cut makes one new label)."""
        idx = np.flatnonzero(open_now)
        size = len(idx) + n_cand + 1
        self.label = np.full(len(open_now), -1, dtype=np.int64)
        self.label[idx] = np.arange(len(idx))
        self.parent = parent = np.arange(size)
        owner, nb = self._neighbour_pairs(idx)
        keep = open_now[nb]
        u, v = owner[keep], self.label[nb[keep]]
        keep = u < v  # each pair once
        u, v = u[keep], v[keep]
        while len(u):  # hook the larger root under the smaller until no pair spans two roots
            ru, rv = self._find(u), self._find(v)
            apart = ru != rv
            u, v, ru, rv = u[apart], v[apart], ru[apart], rv[apart]
            np.minimum.at(parent, np.maximum(ru, rv), np.minimum(ru, rv))
        roots = self._find(np.arange(len(idx)))
        self.comp = np.zeros(size)
        self.comp[: len(idx)] = np.bincount(roots, open_area[idx], len(idx))
        self.next = len(idx)
        return size

    def _find(self, labels: NDArray) -> NDArray:
        """Root label of each label (pointer jumping; the paths are compressed)."""
        r = self.parent[labels]
        while True:
            up = self.parent[r]
            if np.array_equal(up, r):
                break
            r = up
        self.parent[labels] = r
        return r

    def _neighbour_pairs(self, s: NDArray) -> tuple[NDArray, NDArray]:
        """(candidate in the block, neighbour stand) pairs of the block's stands."""
        start = self.indptr[s]
        deg = self.indptr[s + 1] - start
        owner = np.repeat(np.arange(len(s)), deg)
        shift = np.repeat(start - (np.cumsum(deg) - deg), deg)  # row start less owner's offset
        return owner, self.indices[np.arange(len(owner)) + shift]

    def _opened(self, stands: NDArray) -> None:
        """URM: these stands are open now; their neighbours may not be cut this period."""
        owner, nb = self._neighbour_pairs(stands)
        self.near[nb[nb != stands[owner]]] = True

    def screen(self, lo: int, hi: int) -> NDArray[np.bool_]:
        """Refused at the block start at full area (final for the period: open neighbours
        stay open and openings only grow)."""
        s = self.stands[lo:hi]
        m = len(s)
        if self.urm:  # the neighbours of the candidates still allowed (see unsure)
            refused = self.near[s]
            ok = np.flatnonzero(~refused)
            owner, nb = self._neighbour_pairs(s[ok])
            owner = ok[owner]
        else:
            owner, nb = self._neighbour_pairs(s)
        keep = nb != s[owner]
        owner, nb = owner[keep], nb[keep]
        self._lo, self._s, self._owner, self._nb = lo, s, owner, nb
        if self.urm:
            return refused
        area = self.area[lo:hi]
        # the openings each candidate would join: its open neighbours' and its own
        who, st = np.concatenate((owner, np.arange(m))), np.concatenate((nb, s))
        o = self.open[st]
        who, roots = who[o], self._find(self.label[st[o]])
        size = len(self.parent)
        key = _unique(who * size + roots)
        self._who, self._roots = key // size, key % size
        self._total = area + np.bincount(self._who, self.comp[self._roots], minlength=m)
        return (area > self.limit) | (self._total > self.limit)

    def _keys(self, active: NDArray[np.bool_]) -> tuple[NDArray, ...]:
        """What a cut of each ``active`` candidate changes (keys, positions) and what each
        candidate's answer reads: stands (URM: the neighbours; ARM: and its own) and, for
        ARM, the openings at the block start (keys after the stands)."""
        m = len(active)
        act = np.flatnonzero(active)
        s = self._s
        w_key, w_pos = s[act], act
        r_key, r_pos = self._nb, self._owner
        if not self.urm:
            n = len(self.open)
            mine = (self._who < m) & active[np.minimum(self._who, m - 1)]
            w_key = np.concatenate((w_key, n + self._roots[mine]))
            w_pos = np.concatenate((w_pos, self._who[mine]))
            r_key = np.concatenate((r_key, s, n + self._roots))
            r_pos = np.concatenate((r_pos, np.arange(len(s)), self._who))
        return w_key, w_pos, r_key, r_pos

    def unsure(self, active: NDArray[np.bool_]) -> NDArray[np.bool_]:
        """Candidates of the screened block (its first ``len(active)``) whose answer a cut of
        an earlier ``active`` one could change: a neighbour (URM, ARM), the same stand or an
        opening touched by both (ARM)."""
        w_key, w_pos, r_key, r_pos = self._keys(active)
        writer = self.writer
        np.minimum.at(writer, w_key, w_pos)
        hit = writer[r_key] < r_pos
        writer[w_key] = _NONE
        return (np.bincount(r_pos[hit], minlength=len(self._s)) > 0)[: len(active)]

    def ahead(self, active: NDArray[np.bool_], held: NDArray[np.bool_]) -> NDArray[np.bool_]:
        """The ``active`` candidates whose cut would change the answer of an earlier ``held``
        one (settled one at a time, after the sure cuts are made: see :meth:`accept`)."""
        m = len(active)
        w_key, w_pos, r_key, r_pos = self._keys(active)
        inside = r_pos < m
        r_key, r_pos = r_key[inside], r_pos[inside]
        keep = held[r_pos]
        reader = self.writer  # the same scratch, for the first held reader of each key
        np.minimum.at(reader, r_key[keep], r_pos[keep])
        hit = reader[w_key] < w_pos
        reader[r_key[keep]] = _NONE
        return np.bincount(w_pos[hit], minlength=m) > 0

    def accept(self, idx: NDArray) -> None:
        """Cut these candidates of the block, decided at its start (no two interact)."""
        s = self._s[idx]
        self.open[s] = True
        if self.urm:  # their neighbours, from the screen's pairs
            cut = np.zeros(len(self._s), dtype=bool)
            cut[idx] = True
            self.near[self._nb[cut[self._owner]]] = True
            return
        if not len(idx):
            return
        new = self.next + np.arange(len(idx))
        at = np.full(len(self._s), -1)
        at[idx] = np.arange(len(idx))
        joins = at[self._who]
        j = joins >= 0
        self.parent[self._roots[j]] = new[joins[j]]
        self.comp[new] = self._total[idx]
        self.label[s] = new
        self.next += len(idx)

    def allows(self, k: int, full_area: float, a: float) -> bool:
        """The scalar test of :meth:`SpatialRules.allows` on the arrays."""
        s = int(self.stands[k])
        if self.urm:
            return not self.near[s]
        if full_area > self.limit:
            return False
        nb = self.indices[self.indptr[s] : self.indptr[s + 1]]
        find = self._root
        roots = {find(x) for x in self.label[nb[self.open[nb]]].tolist()}
        if self.open[s]:
            roots.add(find(int(self.label[s])))
        comp = self.comp
        total = a + sum(float(comp[r]) for r in roots)
        if total > self.limit:
            return False
        self._pending = (roots, total)
        return True

    def _root(self, x: int) -> int:
        parent = self.parent
        r = x
        while (up := int(parent[r])) != r:
            r = up
        parent[x] = r
        return r

    def commit(self, k: int, a: float) -> None:
        s = int(self.stands[k])
        self.open[s] = True
        if self.urm:
            nb = self.indices[self.indptr[s] : self.indptr[s + 1]]
            self.near[nb[nb != s]] = True
            return
        roots, total = self._pending
        new = self.next
        for r in roots:
            self.parent[r] = new
        self.comp[new] = total
        self.label[s] = new
        self.next += 1

    def flush(self) -> None:
        pass

    def finish(self, cut: NDArray, cut_area: NDArray) -> None:
        """The period's cuts (positions in order, areas cut [ha]) into the rules' state."""
        self.rules.open_area[~self.open_now] = 0.0  # as SpatialRules.begin
        self.rules._close(self.t, self.stands[cut], cut_area)


def never_cut_area_ha(arrays: StandArrays, spatial: SpatialRules) -> float:
    """The harvestable area of the stands the opening rule never lets be cut [ha]."""
    area = arrays.cuttable_ha
    return float(area[spatial.never_cut(area)].sum())


def without_never_cut(arrays: StandArrays, spatial: SpatialRules | None) -> StandArrays:
    """The stands with those the opening rule never lets be cut (:meth:`SpatialRules.never_cut`)
    given an infinite minimum harvest age: still grown, thinned and counted in every stock, never
    clearcut. The LP bound and the aspatial comparison take these, so that neither counts on a
    cut no schedule under the rules can make."""
    if spatial is None:
        return arrays
    area = arrays.cuttable_ha
    never = spatial.never_cut(area)
    if not never.any():
        return arrays
    return replace(arrays, min_harvest_age=np.where(never, np.inf, arrays.min_harvest_age))


def openings_table(
    event_stand: NDArray,
    event_time_years: NDArray,
    event_area_ha: NDArray,
    harvest_times_years: NDArray,
    adjacency: Adjacency,
    greenup_years: float,
) -> pd.DataFrame:
    """Openings at each period's harvest, rebuilt from the harvest events (their stand, time
    since the start [years] and area): stands cut within the green-up window, grouped by
    adjacency; an opening's area is the area cut in the window."""
    rows = []
    for p, t in enumerate(harvest_times_years):  # per period, a handful of vectorised calls
        window = (event_time_years <= t + 1e-9) & (t - event_time_years < greenup_years - 1e-9)
        area = np.bincount(event_stand[window], event_area_ha[window], adjacency.n)
        labels = adjacency.components(area > 0)
        if (labels >= 0).any():
            lab = labels[labels >= 0]
            sizes = np.bincount(lab, area[labels >= 0])
            counts = np.bincount(lab)
            rows.append(
                pd.DataFrame(
                    {
                        "period": p + 1,
                        "opening_id": np.arange(1, len(sizes) + 1),
                        "area_ha": sizes,
                        "n_stands": counts,
                    }
                )
            )
    cols = ["period", "opening_id", "area_ha", "n_stands"]
    return pd.concat(rows, ignore_index=True) if rows else pd.DataFrame(columns=cols)


def check_openings(openings: pd.DataFrame, max_opening_ha: float | None) -> None:
    """The rules hold in the output: a breach here is a bug, never a user's error."""
    if max_opening_ha:
        bad = openings[openings["area_ha"] > max_opening_ha * (1 + 1e-9)]
    else:
        bad = openings[openings["n_stands"] > 1]
    if len(bad):
        raise RuntimeError(f"spatial rules broken in the schedule: {bad.head().to_dict('records')}")
