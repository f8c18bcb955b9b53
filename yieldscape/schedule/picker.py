"""The pick under rules that change as stands are cut (green-up and openings, cover budgets):
candidates in priority order, each checked against the rules; a stand that would break a rule
is skipped and the next one taken. Used only when such rules are set (the aspatial pick is one
vectorised prefix).

:func:`sequential_pick` is the definition: one candidate at a time, each rule's ``allows`` and
``commit`` in Python (about 9 us a candidate). :func:`block_pick` gives the same picks (same
stands, same partial cut, same refusal counts) in blocks of candidates:

1. Every rule screens the block against its state at the block start, at the candidates' full
   areas. A refusal then is final for the period, since the rules only tighten as stands are
   cut: a neighbour open stays open, an opening only grows, a cover budget only shrinks.
2. The block is cut short before the first candidate at which the target or the area cap could
   be reached, counting every candidate not refused as if cut: up to there every candidate is
   tested at its full area (no partial cut), as the sequential pick tests it.
3. Each rule names the candidates whose answer an earlier candidate of the block could change
   (neighbours, a shared opening or a shared stand, a cover budget that all the earlier ones
   together could overdraw). The others are decided at the block start: they are accepted
   together in arrays. The few left are settled one at a time, in order, with the scalar logic
   on the arrays. A refused candidate is settled too when an earlier rule's answer could change,
   so that the refusal is counted against the same rule; a cut that would change the answer of
   such a candidate is then settled after it rather than made ahead of it (``ahead``).
4. The candidate at which the block stopped is taken alone with the sequential logic (the exact
   stop and the partial fraction), then the next block starts. The block grows while few
   candidates need settling and shrinks when many do.

Given only the first of the period's queue (``whole=False``), the pick answers when the rest
of the queue could not change it (it stopped before the last candidate, on a target within
their volume) and otherwise returns None with the rules untouched, so that the caller ranks
more of the queue, as for the aspatial pick.

The state sums (cut volume and area, cover budgets) are accumulated in candidate order with
``np.cumsum``, which adds in sequence as the loop does, so they match it bit for bit. The one
sum in another order: a cut that joins three or more openings adds their areas in label order
where the loop adds them in the order of a Python set (a difference of an ulp at most, which
could flip a test only on an opening within an ulp of the maximum; none on areas exact in
binary, as in the tests). Rules without the block interface
(``block(t, stands, area)``) are picked with :func:`sequential_pick`.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

_REL = 1e-9
_MIN_PART_HA = 1e-9
_SAFE = 1e-7  # margin of the block's stop bound over float rounding (relative)
_FIRST_BLOCK, _MIN_BLOCK, _MAX_BLOCK = 256, 32, 8192
_BLOCK_US, _SETTLE_US = 100.0, 5.0  # cost model of the block size (see _resize), measured


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


class _Pick:
    """The running pick: what is cut so far, in order, and the refusals per rule."""

    def __init__(self, vol: NDArray, area: NDArray, target: float, cap: float, n_rules: int):
        self.vol, self.area, self.cap = vol, area, cap
        self.goal = min(target, float(vol.sum()))
        self.got_v = self.got_a = 0.0
        self.chunks: list[NDArray] = []
        self.part, self.frac = -1, 0.0
        self.skipped = np.zeros(n_rules, dtype=np.int64)

    def take(self, pos: NDArray) -> None:
        """Cut these positions whole (in order): the sums go on in sequence, as in the loop."""
        if len(pos):
            self.chunks.append(pos)
            self.got_v = _add_in_order(self.got_v, self.vol[pos])
            self.got_a = _add_in_order(self.got_a, self.area[pos])

    def safe_prefix(self, lo: int, hi: int, active: NDArray) -> int:
        """How many candidates from ``lo`` are sure to be tested whole and not to stop the
        pick, even if every one not refused were cut."""
        v, a = self.vol[lo:hi], self.area[lo:hi]
        va = np.where(active, np.maximum(v, 0.0), 0.0)
        aa = np.where(active, a, 0.0)
        before_v = self.got_v + (np.cumsum(va) - va)
        before_a = self.got_a + (np.cumsum(aa) - aa)
        ok = (v >= 0) & (before_v + v < self.goal * (1 - _SAFE))
        ok &= before_a + a < self.cap * (1 - _SAFE)
        return len(ok) if ok.all() else int(np.argmin(ok))

    def step(self, k: int, blocks: list) -> bool:
        """Candidate k with the sequential logic; whether the pick goes on."""
        vol, area, goal, cap = self.vol, self.area, self.goal, self.cap
        if self.got_v >= goal * (1 - _REL) or self.got_a >= cap * (1 - _REL):
            return False
        f = min(1.0, (goal - self.got_v) / vol[k], (cap - self.got_a) / area[k])
        a = f * area[k]
        if f < 1.0 and a <= _MIN_PART_HA:
            return False
        refused = _settle(k, float(area[k]), float(a), blocks)
        if refused >= 0:
            self.skipped[refused] += 1
            return True
        if f < 1.0:
            self.got_v += f * vol[k]
            self.got_a += a
            self.part, self.frac = k, float(f)
            return False
        self.take(np.array([k], dtype=np.intp))
        return True

    def full(self) -> NDArray[np.intp]:
        return np.concatenate(self.chunks) if self.chunks else np.zeros(0, dtype=np.intp)


def _resize(
    size: int, last: tuple[int, float], m: int, settled: int, smallest: int
) -> tuple[int, tuple[int, float]]:
    """The next block size, by hill climbing on a cost model per candidate: a fixed cost per
    block and one per candidate settled alone. Settling grows with the block where candidates
    in priority order are scattered (and smaller blocks pay), but not where each touches the
    one before it (a cluster cut in order, where larger blocks pay)."""
    cost = (_BLOCK_US + _SETTLE_US * settled) / m
    direction, before = last
    if cost > before * 1.05:  # the last move made it worse: turn back
        direction = -direction
    new = min(_MAX_BLOCK, max(smallest, size * 2 if direction > 0 else size // 2))
    return new, (direction, cost)


def _add_in_order(start: float, values: NDArray) -> float:
    """start + v0 + v1 + ... added in sequence (np.cumsum adds in order; np.sum does not)."""
    return float(np.cumsum(np.concatenate(([start], values)))[-1])


def _settle(k: int, full_area: float, a: float, blocks: list) -> int:
    """Candidate k against each rule in turn on its current state; the first rule to refuse
    it (-1: cut, and committed to every rule)."""
    for i, b in enumerate(blocks):
        if not b.allows(k, full_area, a):
            return i
    for b in blocks:
        b.commit(k, a)
    return -1


def block_pick(
    t: float,
    stands: NDArray,
    vol: NDArray,
    area: NDArray,
    target: float,
    cap: float,
    rules: list,
    whole: bool = True,
    first_block: int = _FIRST_BLOCK,
) -> tuple[NDArray, int, float, list[int]] | None:
    """The result of :func:`sequential_pick`, decided in blocks of candidates (see the module
    docstring), the first of ``first_block`` candidates. Each rule's ``block(t, stands, area)``
    returns its state for the pick, with ``screen(lo, hi)``, ``unsure(active)``,
    ``ahead(active, held)``, ``accept(idx)``, ``allows(k, full_area, a)``, ``commit(k, a)``,
    ``flush()`` and ``finish(cut, cut_area)``.

    Unless the candidates are ``whole`` (the first of the period's queue only), None when
    more candidates could change the pick: it ran through them all, or stopped at the last,
    or the target exceeds their volume. The rules' state is then left as it was."""
    if not all(hasattr(r, "block") for r in rules):
        return sequential_pick(t, stands, vol, area, target, cap, rules)
    blocks = [r.block(t, stands, area) for r in rules]
    pick = _Pick(vol, area, target, cap, len(rules))
    n, lo, size, stop = len(stands), 0, first_block, -1
    trend = (1, np.inf)  # the last resize (x2 or /2) and the cost per candidate before it
    smallest = min(_MIN_BLOCK, first_block)
    while lo < n:
        hi = min(n, lo + size)
        refused = np.stack([b.screen(lo, hi) for b in blocks])  # rules x block
        first = np.where(refused.any(axis=0), np.argmax(refused, axis=0), -1)
        m = pick.safe_prefix(lo, hi, first < 0)
        if m == 0:  # the stop may be here: this candidate alone, exactly
            if not pick.step(lo, blocks):
                stop = lo
                break
            lo += 1
            continue
        settled = _block(pick, blocks, lo, first[:m])
        if lo + m == hi:  # a whole block: its size moves toward the cheapest
            size, trend = _resize(size, trend, m, settled, smallest)
        lo += m
    # the pick is the whole queue's when it stopped short of the end on the target itself (a
    # stop at the last candidate would read "all taken" where the queue has more)
    if not whole and not (0 <= stop < n - 1 and pick.goal == target):
        return None
    full = pick.full()
    cut = full if pick.part < 0 else np.r_[full, pick.part]
    cut_area = area[cut].astype(float)
    if pick.part >= 0:
        cut_area[-1] = pick.frac * area[pick.part]
    for b in blocks:
        b.finish(cut, cut_area)
    return full, pick.part, pick.frac, [int(x) for x in pick.skipped]


def _block(pick: _Pick, blocks: list, lo: int, first: NDArray) -> int:
    """Decide candidates lo .. lo + len(first) (none stops the pick; ``first``: the first rule
    refusing each at the block start, -1 none) and cut the accepted ones; the number settled
    one at a time."""
    active = first < 0
    unsure = np.zeros(len(first), dtype=bool)
    for j, b in enumerate(blocks):
        # a rule's answer matters to a candidate it reaches: one no earlier rule refuses
        reached = active | (first > j)
        unsure |= b.unsure(active) & reached
    held = unsure & ~active  # refused, but by which rule is not sure yet
    if held.any():  # a sure cut made ahead of them must not change their answers
        for b in blocks:
            unsure |= b.ahead(active, held)
    sure = ~unsure
    cut = active & sure
    for b in blocks:
        b.accept(np.flatnonzero(cut))
    no = first[sure & ~active]
    pick.skipped += np.bincount(no, minlength=len(blocks))
    todo = np.flatnonzero(unsure)
    areas = pick.area[lo + todo].tolist()
    for q, a in zip(todo.tolist(), areas, strict=True):  # the few that depend on earlier ones
        r = _settle(lo + q, a, a, blocks)
        if r >= 0:
            pick.skipped[r] += 1
        else:
            cut[q] = True
    for b in blocks:
        b.flush()
    pick.take(lo + np.flatnonzero(cut))
    return len(todo)
