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
:func:`~yieldscape.schedule.picker.sequential_pick`, the reference, and holds the state between
periods (when each stand was last cut, the area cut in its window).
:func:`~yieldscape.schedule.picker.compiled_pick` runs the same tests in a compiled loop over
that state.
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


def _unique(a: NDArray) -> NDArray:
    """np.unique of integers by a sort (numpy 2.4's hashing np.unique is about 10x slower on
    a few thousand values)."""
    a = np.sort(a)
    keep = np.ones(len(a), dtype=bool)
    keep[1:] = a[1:] != a[:-1]
    return a[keep]


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
