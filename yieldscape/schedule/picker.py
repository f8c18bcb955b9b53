"""The pick under rules that change as stands are cut (green-up and openings, cover budgets):
candidates in priority order, each checked against the rules; a stand that would break a rule
is skipped and the next one taken. Used only when such rules are set (the aspatial pick is one
vectorised prefix).

:func:`sequential_pick` is the definition: one candidate at a time, each rule's ``allows`` and
``commit`` in Python (about 9 us a candidate). :func:`compiled_pick` is the same loop compiled
with numba over the rules' state in arrays (tens of nanoseconds a candidate), with the same
picks: the same stands, the same partial cut, the same refusals per rule, and the rules left in
the same state.

- Green-up under the unit restriction: a candidate is refused when a neighbour is open.
- Openings: the open stands' openings are a union-find over labels (parents and areas in
  arrays), set up at the start of each pick from the open stands and their open neighbours,
  each opening's area summed in stand order as :meth:`SpatialRules.begin` sums it. A cut joins
  the openings it touches under a new label whose area is the joined total.
- Cover budgets: which budgets each candidate draws on is worked out in numpy beforehand; the
  loop spends them in candidate order, as the sequential pick does.

The sums (cut volume and area, budgets) are added in candidate order, as in the loop, so they
match it bit for bit. The one sum in another order: a cut that joins two or more openings adds
their areas in label order where the sequential pick adds them in the order of a Python set (a
difference of an ulp at most, which could flip a test only on an opening within an ulp of the
maximum; none on areas exact in binary, as in the tests).

Given only the first of the period's queue (``whole=False``), the pick answers when the rest
of the queue could not change it (it stopped before the last candidate, on a target within
their volume) and otherwise returns None with the rules untouched, so that the caller ranks
more of the queue, as for the aspatial pick.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from yieldscape.schedule._jit import jit
from yieldscape.schedule.cover import PeriodBudgets
from yieldscape.schedule.spatial import SpatialRules

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


def compiled_pick(
    t: float,
    stands: NDArray,
    vol: NDArray,
    area: NDArray,
    target: float,
    cap: float,
    rules: list,
    whole: bool = True,
) -> tuple[NDArray, int, float, list[int]] | None:
    """The result of :func:`sequential_pick`, by the compiled loop (see the module docstring).
    ``rules``: at most one :class:`~yieldscape.schedule.spatial.SpatialRules` and one
    :class:`~yieldscape.schedule.cover.PeriodBudgets`, in the order their refusals count.

    Unless the candidates are ``whole`` (the first of the period's queue only), None when
    more candidates could change the pick: it ran through them all, or stopped at the last,
    or the target exceeds their volume. The rules' state is then left as it was."""
    m = len(stands)
    stands = np.asarray(stands, dtype=np.int64)
    vol = np.asarray(vol, dtype=np.float64)
    area = np.asarray(area, dtype=np.float64)
    goal = min(target, float(vol.sum()))
    spatial = next((r for r in rules if isinstance(r, SpatialRules)), None)
    budgets = next((r for r in rules if isinstance(r, PeriodBudgets)), None)
    if len(rules) != (spatial is not None) + (budgets is not None):
        raise TypeError(
            f"compiled_pick takes one SpatialRules and one PeriodBudgets at most: {rules}"
        )
    slot = {id(r): i for i, r in enumerate(rules)}
    if spatial is not None:
        indptr, indices = spatial.adjacency.csr32
        mode = 1 if spatial.max_opening_ha <= 0 else 2
        limit = spatial.max_opening_ha * (1 + _REL)
        open_now = spatial.is_open(t)
        open_area = spatial.open_area
    else:
        indptr = indices = np.zeros(1, dtype=np.int32)
        mode, limit = 0, 0.0
        open_now, open_area = np.zeros(0, dtype=np.bool_), np.zeros(0)
    if budgets is not None:
        draws, budget, tol = budgets.draws(), budgets.budget.copy(), budgets.tolerance()
    else:
        draws, budget, tol = np.zeros((m, 0), dtype=np.bool_), np.zeros(0), np.zeros(0)
    full, part, frac, skipped, stop = _pick_loop(
        stands,
        vol,
        area,
        goal,
        float(cap),
        mode,
        limit,
        indptr,
        indices,
        open_now,
        np.flatnonzero(open_now),
        open_area,
        draws,
        budget,
        tol,
        slot.get(id(spatial), 0),
        slot.get(id(budgets), 0),
    )
    # the pick is the whole queue's when it stopped short of the end on the target itself (a
    # stop at the last candidate would read "all taken" where the queue has more)
    if not whole and not (0 <= stop < m - 1 and goal == target):
        return None
    if spatial is not None:
        cut = full if part < 0 else np.r_[full, part]
        cut_area = area[cut]
        if part >= 0:
            cut_area[-1] = frac * area[part]
        spatial.open_area[~open_now] = 0.0  # as SpatialRules.begin
        spatial._close(t, stands[cut], cut_area)
    if budgets is not None:
        budgets.budget[:] = budget
    return full, int(part), float(frac), [int(x) for x in skipped[: len(rules)]]


@jit
def _find(parent: NDArray, x: int) -> int:
    """Root of label x in the union-find (path halving)."""
    while parent[x] != x:
        parent[x] = parent[parent[x]]
        x = parent[x]
    return x


@jit
def _openings(
    indptr: NDArray,
    indices: NDArray,
    open_now: NDArray,
    open_idx: NDArray,
    open_area: NDArray,
    m: int,
) -> tuple[NDArray, NDArray, NDArray]:
    """The openings at the start of the pick in a union-find: a label per open stand (its
    place among them), the labels of open neighbours joined, each opening's area summed in
    stand order (as SpatialRules.begin sums it); room for a new label per candidate."""
    n_open = len(open_idx)
    label = np.empty(len(open_now), dtype=np.int64)  # read only where open
    parent = np.arange(n_open + m + 1)
    comp = np.zeros(n_open + m + 1)
    for i in range(n_open):
        label[open_idx[i]] = i
    for i in range(n_open):
        s = open_idx[i]
        for p in range(indptr[s], indptr[s + 1]):
            j = indices[p]
            if j > s and open_now[j]:
                ri, rj = _find(parent, i), _find(parent, label[j])
                if ri != rj:
                    parent[max(ri, rj)] = min(ri, rj)
    for i in range(n_open):
        r = _find(parent, i)
        comp[r] += open_area[open_idx[i]]
    return label, parent, comp


@jit
def _pick_loop(
    stands: NDArray,
    vol: NDArray,
    area: NDArray,
    goal: float,
    cap: float,
    mode: int,
    limit: float,
    indptr: NDArray,
    indices: NDArray,
    open_now: NDArray,
    open_idx: NDArray,
    open_area: NDArray,
    draws: NDArray,
    budget: NDArray,
    tol: NDArray,
    spatial_slot: int,
    cover_slot: int,
) -> tuple[NDArray, int, float, NDArray, int]:
    """sequential_pick with the rules' scalar tests inlined: mode 0 no spatial rules, 1 the
    unit restriction, 2 openings of at most ``limit``; cover budgets as ``draws`` (candidates
    x budgets), ``budget`` (spent in place) and ``tol``."""
    m = len(stands)
    opened = open_now.copy()
    near = np.zeros(len(open_now), dtype=np.bool_)  # an open neighbour (the stand aside)
    for s in open_idx:
        _mark_near(s, near, indptr, indices)
    if mode == 2:
        label, parent, comp = _openings(indptr, indices, open_now, open_idx, open_area, m)
    else:
        label, parent, comp = open_idx, open_idx, np.zeros(0)
    nxt = len(open_idx)
    roots = np.empty(16, dtype=np.int64)  # the openings a cut joins (grows if need be)
    full = np.empty(m, dtype=np.int64)
    n_full, part, frac, stop = 0, -1, 0.0, -1
    skipped = np.zeros(2, dtype=np.int64)
    got_v = got_a = 0.0
    for k in range(m):
        if got_v >= goal * (1 - _REL) or got_a >= cap * (1 - _REL):
            stop = k
            break
        s = stands[k]
        f = _fraction(goal - got_v, vol[k], cap - got_a, area[k])
        a = f * area[k]
        if f < 1.0 and a <= _MIN_PART_HA:
            stop = k
            break
        # the spatial rules (SpatialRules.allows), then the cover budgets (PeriodBudgets.allows)
        n_roots, total = 0, 0.0
        if mode == 1:
            ok = not near[s]
        elif mode == 2:
            ok = not area[k] > limit
            if ok and (near[s] or opened[s]):  # else it joins no opening
                roots, n_roots = _joined(s, opened, label, parent, indptr, indices, roots)
                for i in range(n_roots):
                    total += comp[roots[i]]
            total = a + total  # as a + sum(...) in Python
            ok = ok and not total > limit
        else:
            ok = True
        if not ok:
            skipped[spatial_slot] += 1
            continue
        if not _within_budgets(draws[k], a, budget, tol):
            skipped[cover_slot] += 1
            continue
        for i in range(len(budget)):  # PeriodBudgets.commit
            if draws[k, i]:
                budget[i] -= a
        if mode == 2:  # one opening: the new label over those it joins
            for i in range(n_roots):
                parent[roots[i]] = nxt
            comp[nxt] = total
            label[s] = nxt
            nxt += 1
        if mode > 0:
            opened[s] = True
            _mark_near(s, near, indptr, indices)
        got_v += f * vol[k]
        got_a += a
        if f < 1.0:
            part, frac, stop = k, f, k
            break
        full[n_full] = k
        n_full += 1
    return full[:n_full], part, frac, skipped, stop


@jit
def _fraction(goal_left: float, vol: float, cap_left: float, area: float) -> float:
    """min(1.0, goal_left / vol, cap_left / area), as Python's min takes it (the first of
    equals; a division by zero gives inf, as numpy's)."""
    f = 1.0
    x = goal_left / vol
    if x < f:
        f = x
    x = cap_left / area
    if x < f:
        f = x
    return f


@jit
def _mark_near(s: int, near: NDArray, indptr: NDArray, indices: NDArray) -> None:
    """Stand s is open: its neighbours (not s itself) have an open neighbour."""
    for p in range(indptr[s], indptr[s + 1]):
        j = indices[p]
        if j != s:
            near[j] = True


@jit
def _joined(
    s: int,
    opened: NDArray,
    label: NDArray,
    parent: NDArray,
    indptr: NDArray,
    indices: NDArray,
    roots: NDArray,
) -> tuple[NDArray, int]:
    """The openings a cut of stand s would join (its open neighbours' and its own), as root
    labels in increasing order, each once, in ``roots`` (grown if too short); how many."""
    n_roots = 0
    for p in range(indptr[s], indptr[s + 1] + 1):
        j = indices[p] if p < indptr[s + 1] else s
        if not opened[j]:
            continue
        r = _find(parent, label[j])
        at = n_roots  # insertion in order (the roots are few)
        while at > 0 and roots[at - 1] > r:
            at -= 1
        if at > 0 and roots[at - 1] == r:
            continue
        if n_roots == len(roots):
            more = np.empty(2 * len(roots), dtype=np.int64)
            more[:n_roots] = roots[:n_roots]
            roots = more
        for i in range(n_roots, at, -1):
            roots[i] = roots[i - 1]
        roots[at] = r
        n_roots += 1
    return roots, n_roots


@jit
def _within_budgets(draws: NDArray, a: float, budget: NDArray, tol: NDArray) -> bool:
    """Whether a cut of area a stays within every budget it draws on (PeriodBudgets.allows)."""
    for i in range(len(budget)):
        if draws[i] and a > budget[i] + tol[i]:
            return False
    return True
