"""Green-up and opening-size rules over the stand adjacency graph.

A stand cut at time t is *open* until t + ``greenup_years``. An opening is a connected group
of open stands over the adjacency graph; its area is the area cut in its stands inside the
window. Area restriction model (ARM; Murray 1999, Forest Science 45:45-52): no opening may
exceed ``max_opening_ha``. Unit restriction model (URM, ``max_opening_ha = 0``): no two
neighbours may be open at once. Candidates are taken in priority order; a stand that would break
a rule is skipped and the next one taken. A stand whose harvestable area alone exceeds the
maximum opening is never cut (foresight does not split stands into several cut blocks).

The pick is sequential by nature (each cut changes what its neighbours may do), so it runs as a
Python loop over the candidates of a period until its target is met; openings at the start of a
period come from one vectorised connected-components call.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from foresight.adjacency import Adjacency

_REL = 1e-9
_MIN_PART_HA = 1e-9


@dataclass
class SpatialRules:
    adjacency: Adjacency
    greenup_years: float
    max_opening_ha: float = 0.0  # 0: unit restriction
    last_cut: NDArray = field(default_factory=lambda: np.zeros(0))
    open_area: NDArray = field(default_factory=lambda: np.zeros(0))

    def fresh(self) -> SpatialRules:
        """A copy with no stand cut yet (one per simulated horizon)."""
        n = self.adjacency.n
        return SpatialRules(self.adjacency, self.greenup_years, self.max_opening_ha,
                            np.full(n, -np.inf), np.zeros(n))

    def is_open(self, t: float) -> NDArray[np.bool_]:
        return (t - self.last_cut) < self.greenup_years - 1e-9

    def pick(self, t: float, stands: NDArray, vol: NDArray, area: NDArray, target: float,
             cap: float) -> tuple[NDArray, int, float, int]:
        """Positions cut whole, position cut partly (-1), its fraction, candidates skipped."""
        open_now = self.is_open(t)
        self.open_area[~open_now] = 0.0
        urm = self.max_opening_ha <= 0
        labels = self.adjacency.components(open_now)
        n_labels = int(labels.max()) + 1 if (labels >= 0).any() else 0
        comp_area = list(np.bincount(labels[open_now], self.open_area[open_now],
                                     minlength=n_labels)) if n_labels else []
        parent = list(range(n_labels))

        def find(x: int) -> int:
            while parent[x] != x:
                parent[x] = parent[parent[x]]
                x = parent[x]
            return x

        indptr, indices = self.adjacency.indptr, self.adjacency.indices
        label_list = labels.tolist()
        is_open = open_now.tolist()
        full: list[int] = []
        part, frac, skipped = -1, 0.0, 0
        got_v = got_a = 0.0
        goal = min(target, float(vol.sum()))
        cut_area: dict[int, float] = {}
        for k in range(len(stands)):  # sequential: each cut changes its neighbours' options
            if got_v >= goal * (1 - _REL) or got_a >= cap * (1 - _REL):
                break
            s = int(stands[k])
            f = min(1.0, (goal - got_v) / vol[k], (cap - got_a) / area[k])
            a = f * area[k]
            if a <= _MIN_PART_HA:
                break
            nb = indices[indptr[s]:indptr[s + 1]]
            if urm:
                if any(is_open[j] for j in nb.tolist() if j != s):
                    skipped += 1
                    continue
                roots: set[int] = set()
                total = a
            else:
                if area[k] > self.max_opening_ha * (1 + _REL):
                    skipped += 1  # larger than an opening: never cut
                    continue
                roots = {find(label_list[j]) for j in nb.tolist() if is_open[j]}
                if is_open[s]:
                    roots.add(find(label_list[s]))
                total = a + sum(comp_area[r] for r in roots)
                if total > self.max_opening_ha * (1 + _REL):
                    skipped += 1
                    continue
            # cut it: it opens (or grows) one opening that absorbs its open neighbours'
            new = len(parent)
            parent.append(new)
            comp_area.append(total)
            for r in roots:
                parent[r] = new
            label_list[s] = new
            is_open[s] = True
            cut_area[s] = cut_area.get(s, 0.0) + a
            got_v += f * vol[k]
            got_a += a
            if f < 1.0:
                part, frac = k, f
                break
            full.append(k)
        for s, a in cut_area.items():
            self.last_cut[s] = t
            self.open_area[s] += a
        return np.asarray(full, dtype=np.intp), part, frac, skipped
