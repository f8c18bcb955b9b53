"""The sequential pick: candidates in priority order, each checked against rules that change
as stands are cut (green-up and openings, cover budgets); a stand that would break a rule is
skipped and the next one taken. Used only when such rules are set (the aspatial pick is one
vectorised prefix).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

_REL = 1e-9
_MIN_PART_HA = 1e-9


def sequential_pick(
    t: float, stands: NDArray, vol: NDArray, area: NDArray, target: float, cap: float, rules: list
) -> tuple[NDArray, int, float, list[int]]:
    """Positions cut whole, position cut partly (-1), its fraction, and per rule the
    candidates it refused (the first rule to refuse a candidate counts it).

    ``rules`` hold objects with ``begin(t)``, ``allows(k, s, full_area, a)``,
    ``commit(k, s, a)`` and ``end()``.
    """
    for r in rules:
        r.begin(t)
    full: list[int] = []
    part, frac = -1, 0.0
    skipped = [0] * len(rules)
    got_v = got_a = 0.0
    goal = min(target, float(vol.sum()))
    for k in range(len(stands)):  # sequential: each cut changes what the next may do
        if got_v >= goal * (1 - _REL) or got_a >= cap * (1 - _REL):
            break
        s = int(stands[k])
        f = min(1.0, (goal - got_v) / vol[k], (cap - got_a) / area[k])
        a = f * area[k]
        if f < 1.0 and a <= _MIN_PART_HA:
            break  # what is left of the target or the cap is not worth a split
        # (a whole part, however small, is a candidate like any other: a sliver of a stand
        # must not end the period's pick)
        refused = next(
            (i for i, r in enumerate(rules) if not r.allows(k, s, float(area[k]), a)), -1
        )
        if refused >= 0:
            skipped[refused] += 1
            continue
        for r in rules:
            r.commit(k, s, a)
        got_v += f * vol[k]
        got_a += a
        if f < 1.0:
            part, frac = k, f
            break
        full.append(k)
    for r in rules:
        r.end()
    return np.asarray(full, dtype=np.intp), part, frac, skipped
