"""The compiled picker against the sequential one, its definition (schedule/picker.py).

The reference is ``sequential_pick`` with the scalar rules (``SpatialRules.allows/commit``,
``PeriodBudgets.allows/commit``): one candidate at a time, as the rules are written in Python.
The compiled picker (its own code, on arrays) must return the same stands, the same partial
cut and the same refusal counts per rule, and leave the rules in the same state, on random
small forests: grid adjacency with some edges dropped and some diagonals added (planar-ish),
parts of one stand among the candidates, areas, volumes, targets, caps and budgets in eighths
so that every sum is exact in binary.
"""

import copy
import importlib

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from yieldscape.adjacency import Adjacency
from yieldscape.growth import ChapmanRichards
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import HarvestRules, find_even_flow
from yieldscape.schedule.cover import CoverRule, CoverRules, PeriodBudgets
from yieldscape.schedule.picker import compiled_pick, sequential_pick
from yieldscape.schedule.spatial import SpatialRules

simulate_module = importlib.import_module("yieldscape.schedule.simulate")

T = 30.0  # the period's harvest time [years since the start]


def grid_graph(rng, w, h, diagonals):
    idx = np.arange(w * h).reshape(h, w)
    i = [idx[:, :-1].ravel(), idx[:-1].ravel()]
    j = [idx[:, 1:].ravel(), idx[1:].ravel()]
    if diagonals:
        i.append(idx[:-1, :-1].ravel())
        j.append(idx[1:, 1:].ravel())
    i, j = np.concatenate(i), np.concatenate(j)
    keep = rng.random(len(i)) < 0.85
    return Adjacency.from_pairs(w * h, i[keep], j[keep])


@st.composite
def picks(draw, both=False):
    """A period's pick: the rules' state at its start, the candidates in order, target, cap
    (``both``: spatial rules and cover budgets together, the budgets often short)."""
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    w, h = draw(st.integers(1, 12)), draw(st.integers(1, 12))
    n = w * h
    rules = []
    if both or draw(st.sampled_from([True, True, True, False])):
        adj = grid_graph(rng, w, h, draw(st.booleans()))
        greenup = draw(st.sampled_from([10.0, 20.0, 30.0]))
        max_opening = draw(st.sampled_from([0.0, 0.0, 1.0, 2.5, 4.0, 7.5]))  # 0: unit rule
        spatial = SpatialRules(adj, greenup, max_opening).fresh()
        was = rng.random(n) < draw(st.sampled_from([0.0, 0.2, 0.5]))
        spatial.last_cut[was] = T - rng.integers(0, 4, was.sum()) * 10.0  # some still open
        spatial.open_area[was] = rng.integers(1, 40, was.sum()) / 8
        rules.append(spatial)
    m = draw(st.integers(1, 3 * n))
    if draw(st.booleans()):  # some stands twice (two parts), in any order
        stands = rng.integers(0, n, m)
    else:
        stands = rng.permutation(n)[:m]
    m = len(stands)
    area = rng.integers(1, 40, m) / 8
    vol = rng.integers(1, 400, m) / 8
    if both or draw(st.booleans()) or not rules:
        k = draw(st.integers(1, 3))
        cover = CoverRules(
            tuple(
                CoverRule(
                    int(rng.integers(-1, 3)),
                    "z",
                    str(rng.choice(["old", "young"])),
                    float(rng.integers(1, 10) * 10),
                    0.5,
                )
                for _ in range(k)
            ),
            rng.integers(8, 800, 3) / 8,
        )
        budget = rng.integers(-40, draw(st.sampled_from([40, 400] if not both else [8, 40])), k) / 8
        rules.append(
            PeriodBudgets(cover, budget, rng.integers(0, 3, m), rng.integers(0, 100, m) * 1.0)
        )
    share_v = draw(st.sampled_from([None, 0.0, 0.1, 0.5, 0.9]))
    target = np.inf if share_v is None else np.floor(share_v * vol.sum() * 8) / 8
    share_a = draw(st.sampled_from([None, 0.05, 0.3, 1.0]))
    cap = np.inf if share_a is None else np.floor(share_a * area.sum() * 8) / 8
    shown = draw(st.integers(1, m))  # the first of the queue, given alone (see below)
    return rules, stands, vol, area, float(target), float(cap), shown


def state(rules):
    out = []
    for r in rules:
        if isinstance(r, SpatialRules):
            out += [r.last_cut.copy(), r.open_area.copy()]
        else:
            out.append(r.budget.copy())
    return out


@settings(max_examples=300, deadline=None)
@given(picks())
def test_compiled_pick_is_the_sequential_pick(pick):
    same_pick(*pick)


@settings(max_examples=300, deadline=None)
@given(picks(both=True))
def test_compiled_pick_counts_refusals_as_the_sequential_pick_with_both_rules(pick):
    # a candidate over a cover budget may also have a neighbour cut earlier: the refusal
    # counts against the spatial rules, which come first
    same_pick(*pick)


def same_pick(rules, stands, vol, area, target, cap, shown):
    ref_rules = copy.deepcopy(rules)
    want = sequential_pick(T, stands, vol, area, target, cap, ref_rules)
    blk_rules = copy.deepcopy(rules)
    got = compiled_pick(T, stands, vol, area, target, cap, blk_rules)
    same(got, blk_rules, want, ref_rules)
    # given only the first of the queue, the compiled pick answers (the whole queue's pick) only
    # when the rest could not change it, and otherwise leaves the rules as they were
    s = slice(0, shown)
    blk_rules = [
        PeriodBudgets(r.rules, r.budget.copy(), r.cand_zone[s], r.cand_age[s])
        if isinstance(r, PeriodBudgets)
        else copy.deepcopy(r)
        for r in rules
    ]
    got = compiled_pick(T, stands[s], vol[s], area[s], target, cap, blk_rules, whole=False)
    if got is None:
        for a, b in zip(state(blk_rules), state(rules), strict=True):
            np.testing.assert_array_equal(a, b)
    else:
        same(got, blk_rules, want, ref_rules)


def same(got, got_rules, want, want_rules):
    np.testing.assert_array_equal(got[0], want[0])
    assert got[1:] == want[1:]  # the partial cut, its fraction, the refusals per rule
    for a, b in zip(state(got_rules), state(want_rules), strict=True):
        np.testing.assert_array_equal(a, b)


def test_compiled_pick_refuses_what_the_sequential_pick_refuses_on_a_known_case():
    # A 1 x 3 row, unit restriction, stands 0 and 2 open: stand 1 is refused, the others cut;
    # then stand 1 again (a second part): refused again, and counted twice.
    adj = Adjacency.from_pairs(3, np.array([0, 1]), np.array([1, 2]))
    rules = SpatialRules(adj, 20.0, 0.0).fresh()
    stands = np.array([0, 1, 2, 1])
    one = np.ones(4)
    full, part, frac, refused = compiled_pick(T, stands, one, one, np.inf, np.inf, [rules])
    np.testing.assert_array_equal(full, [0, 2])
    assert (part, refused) == (-1, [2])
    np.testing.assert_array_equal(rules.last_cut, [T, -np.inf, T])


def test_a_refusal_counts_against_the_first_rule_that_refuses_in_order():
    # A row 0-1-2-3, unit restriction, candidates in stand order, each 1 ha; only stand 2 is
    # old and the old-forest budget is spent, so the cover target refuses it. In order: 0 is
    # cut, 1 is refused by the spatial rules (0 is open), 2 passes the spatial rules (1 and 3
    # are not open) and is refused by the cover target, 3 is cut. A picker that tested the
    # cover budgets first would count 2 against the cover target.
    adj = Adjacency.from_pairs(4, np.array([0, 1, 2]), np.array([1, 2, 3]))
    old = CoverRules((CoverRule(-1, "*", "old", 50.0, 0.5),), np.array([8.0]))
    budget = PeriodBudgets(old, np.zeros(1), np.zeros(4, int), np.array([10.0, 10, 100, 10]))
    stands, one = np.arange(4), np.ones(4)
    for pick in (sequential_pick, compiled_pick):
        rules = [SpatialRules(adj, 20.0, 0.0).fresh(), copy.deepcopy(budget)]
        full, part, _, refused = pick(T, stands, one, one, np.inf, np.inf, rules)
        np.testing.assert_array_equal(full, [0, 3])
        assert (part, refused) == (-1, [1, 1])


@pytest.mark.parametrize(
    "max_opening, cover", [(0.0, False), (4.0, False), (4.0, True), (None, True)]
)
def test_the_schedule_is_the_one_of_the_sequential_pick_on_the_whole_queue(
    monkeypatch, max_opening, cover
):
    # End to end: the even-flow search with the compiled pick on the first of each period's
    # queue (8 parts and more) against the same search with the sequential pick given the
    # whole queue (as before the queue was ranked in part). A 10 x 10 grid, ages from four
    # values (ties broken by stand id, so that neighbours come one after the other), areas in
    # eighths, green-up of two periods.
    rng = np.random.default_rng(4)
    n = 100
    adj = grid_graph(rng, 10, 10, diagonals=False)
    stands = StandArrays(
        np.zeros(n, np.int32),
        np.full(n, 20.0),
        rng.choice([60.0, 80.0, 100.0, 120.0], n),
        rng.integers(4, 24, n) / 8,
        np.full(n, 60.0),
        np.zeros(n),
        np.arange(n),
        zone_idx=np.zeros(n, np.int64),
    )
    rules = HarvestRules(
        spatial=None if max_opening is None else SpatialRules(adj, 20.0, max_opening),
        cover=CoverRules((CoverRule(-1, "*", "old", 90.0, 0.3),), np.array([stands.area_ha.sum()]))
        if cover
        else None,
    )
    curves = CurveSet(["pine"], [ChapmanRichards(450.0, 0.035, 3.0)])
    periods = Periods(2030, 10, 6, "midpoint")
    monkeypatch.setattr(simulate_module, "_QUEUE_MIN", 8)  # queues shorter than the forest
    flow = find_even_flow(stands, curves, periods, rules, 0.1, 0.5)

    def whole_queue_only(t, stands, vol, area, target, cap, rules, whole=True):
        return sequential_pick(t, stands, vol, area, target, cap, rules) if whole else None

    monkeypatch.setattr(simulate_module, "compiled_pick", whole_queue_only)
    ref = find_even_flow(stands, curves, periods, rules, 0.1, 0.5)
    assert flow.level_m3_per_period == ref.level_m3_per_period > 0
    a, b = flow.simulation, ref.simulation
    for got, want in [(a.event_stand, b.event_stand), (a.event_area_ha, b.event_area_ha)]:
        np.testing.assert_array_equal(got, want)


@pytest.mark.parametrize("max_opening, cut", [(21.0, True), (20.5, False)])
def test_a_cut_joining_more_openings_than_its_buffer_holds(max_opening, cut):
    # A star: stand 0 with 20 neighbours, each open alone with 1 ha cut in its window (20
    # openings; the compiled pick's buffer of joined openings starts at 16). Cutting stand 0
    # (1 ha) joins them all into one opening of 21 ha: allowed under a 21 ha maximum, refused
    # under 20.5 ha, as by the sequential pick.
    adj = Adjacency.from_pairs(21, np.zeros(20, int), np.arange(1, 21))
    rules = SpatialRules(adj, 20.0, max_opening).fresh()
    rules.last_cut[1:] = T - 10.0
    rules.open_area[1:] = 1.0
    for pick in (sequential_pick, compiled_pick):
        r = copy.deepcopy(rules)
        full, part, _, refused = pick(T, np.array([0]), np.ones(1), np.ones(1), np.inf, np.inf, [r])
        assert (len(full), part, refused) == (int(cut), -1, [int(not cut)])
        assert r.open_area[0] == (1.0 if cut else 0.0)
