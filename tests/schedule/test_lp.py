"""The harvest LP (Model II, HiGHS) against an independent solver and known optima."""

import json
from dataclasses import replace
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

import yieldscape
from yieldscape.errors import InputError
from yieldscape.growth import (
    ChapmanRichards,
    SiteScaling,
    TableYield,
    chapman_richards_culmination_age,
)
from yieldscape.policies import EvenFlow, Targets
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.regimes import Regimes
from yieldscape.schedule import HarvestRules, find_even_flow, simulate
from yieldscape.schedule.lp import (
    INF,
    build_lp,
    choice_columns,
    lp_columns,
    make_strata,
    solve_highs,
    solve_lp,
)
from yieldscape.schedule.lp_plan import guided, lp_schedule

from helpers import (
    cbc_solve,
    gap_forest,
    scenario_dict,
    squares,
    stand_attrs,
    write_layer,
    write_scenario,
)

CURVE = ChapmanRichards(450.0, 0.035, 3.0)
CURVES = CurveSet(["pine"], [CURVE])
PERIODS = Periods(2030, 10, 10, "midpoint")


def forest(n=60, seed=4):
    return gap_forest(n, seed)


def stand_strata(st):
    # one stratum per stand: no aggregation, so every stand schedule is an LP solution
    return make_strata(st, np.zeros(st.n, int), 1e-6, 1e-6)


@pytest.mark.parametrize(
    ("objective", "band", "cap"), [("max-even-flow", 0.0, None), ("max-volume", 0.1, 400.0)]
)
def test_highs_matches_cbc_on_the_same_model(objective, band, cap):
    # Independent solver: the same matrix model solved by CBC through PuLP.
    st = forest()
    model = build_lp(st, CURVES, PERIODS, stand_strata(st), objective, "even", band, 0.8, cap)
    ours = solve_lp(st, CURVES, PERIODS, stand_strata(st), objective, "even", band, 0.8, cap)
    assert cbc_objective(model) == pytest.approx(ours.objective, rel=1e-6)


@pytest.mark.parametrize("objective", ["max-even-flow", "max-level", "max-volume"])
def test_interior_point_and_simplex_agree(objective):
    # Two algorithms on the same model: HiGHS dual simplex against interior point with
    # crossover (the one lp_solver picks for all but the smallest models).
    st = forest()
    model = build_lp(st, CURVES, PERIODS, stand_strata(st), objective, "even", 0.1, 0.8)
    simplex, ipm = (solve_highs(model, solver=s) for s in ("simplex", "ipm"))
    assert ipm.objective == pytest.approx(simplex.objective, rel=1e-6)
    assert ipm.harvest_m3 == pytest.approx(simplex.harvest_m3, rel=1e-6)


def cbc_objective(model):
    """The optimum of the same matrix model solved by CBC through PuLP (maximised): for the
    objectives on a level column, the level at CBC's optimum (the tie-break on the volume
    aside)."""
    cost, x = cbc_solve(model)
    if model.level_col >= 0:
        return x[model.level_col].value()
    return -cost


def test_lp_optimum_bounds_the_rule_based_forecast():
    # Same aspatial constraints (strict even flow, ending stock): the LP's level is at least
    # the rule-based scheduler's, since the rule-based schedule is one of the LP's solutions.
    st = forest()
    capped = HarvestRules(max_area_ha=300.0)
    rules = find_even_flow(st, CURVES, PERIODS, capped, band=0.0, ending_stock=1.0)
    lp = solve_lp(st, CURVES, PERIODS, stand_strata(st), "max-even-flow", "even", 0.0, 1.0, 300.0)
    assert lp.objective >= rules.level_m3_per_period * (1 - 1e-6)
    np.testing.assert_allclose(lp.harvest_m3, lp.objective, rtol=1e-6)


def test_regulated_forest_lp_gives_area_control_yield():
    # (A/R) V(R) per year (Davis & Johnson; Bettinger et al. 2009, Ch. 11)
    R, L = 60, 10
    ages = np.arange(6, dtype=float) * 10 + 5
    st = StandArrays(
        np.zeros(6, np.int32),
        np.full(6, 20.0),
        ages,
        np.full(6, 25.0),
        np.full(6, float(R)),
        np.zeros(6),
        np.arange(6),
    )
    lp = solve_lp(st, CURVES, Periods(2030, L, 12), stand_strata(st), ending_stock=1.0)
    assert lp.objective == pytest.approx(
        150.0 / R * float(CURVE.volume_m3_ha(R, 20.0)) * L, rel=1e-6
    )


def test_long_horizon_max_volume_approaches_area_times_max_mai():
    # Undiscounted maximum volume over a long horizon (Model II steady state, standard result):
    # the mean harvest approaches area x maximum MAI, at rotations near the MAI culmination.
    area, L, P = 100.0, 5, 80  # 400 years
    st = StandArrays(
        np.zeros(1, np.int32),
        np.full(1, 20.0),
        np.zeros(1),
        np.full(1, area),
        np.zeros(1),
        np.zeros(1),
        np.zeros(1, int),
    )
    periods = Periods(2030, L, P, "start")
    lp = solve_lp(st, CURVES, periods, stand_strata(st), "max-volume", "none", 0.0, 0.0)
    t_star = chapman_richards_culmination_age(CURVE.k, CURVE.c)
    best = area * float(CURVE.volume_m3_ha(t_star, 20.0)) / t_star
    mean = lp.harvest_m3.sum() / (P * L)
    assert best * 0.97 <= mean <= best * (1 + float(CURVE.a) / (P * L * best / area))


def test_infeasible_lp_names_the_constraint_families():
    st = forest(n=10)
    with pytest.raises(InputError, match=r"harvest LP is infeasible.*flow.ending_stock = 50"):
        solve_lp(st, CURVES, PERIODS, stand_strata(st), ending_stock=50.0)


def test_max_npv_on_bare_land_is_the_faustmann_value():
    # Faustmann (1849): bare land cut every T years, regeneration cost c after each cut,
    # continuous discounting at r: NPV = (p V(T) - c) / (e^(rT) - 1) (the land expectation
    # value plus the first regeneration, which the LP does not charge). Over a long horizon the
    # LP's optimum is that value at the best T on its 10-year grid.
    from yieldscape.schedule.lp import Economics

    p, c, r, L, P = 25.0, 600.0, 0.03, 10, 40
    st = StandArrays(
        np.zeros(1, np.int32),
        np.full(1, 20.0),
        np.zeros(1),
        np.ones(1),
        np.zeros(1),
        np.zeros(1),
        np.zeros(1, int),
    )
    econ = Economics(np.array([p]), np.array([c]), r, "continuous", "none")
    lp = solve_lp(
        st,
        CURVES,
        Periods(2030, L, P, "start"),
        stand_strata(st),
        "max-npv",
        "none",
        0.0,
        0.0,
        None,
        econ,
    )
    T = np.arange(1, 30) * L
    faustmann = ((p * CURVE.volume_m3_ha(T, 20.0) - c) / np.expm1(r * T)).max()
    assert lp.objective == pytest.approx(faustmann, rel=1e-4)


def test_lp_keeps_cover_targets_and_still_bounds_the_rules():
    # With an old-forest target on both sides, the LP (stand-level strata) is still at least
    # the rule-based level; an impossible target makes the LP infeasible, and says which rows.
    from yieldscape.schedule.cover import CoverRule, CoverRules

    st = forest()
    zones = np.zeros(st.n, dtype=np.int64)
    cover = CoverRules((CoverRule(-1, "*", "old", 120.0, 0.25),), np.array([st.area_ha.sum()]))
    rules = find_even_flow(st, CURVES, PERIODS, HarvestRules(cover=cover), ending_stock=0.5)
    lp = solve_lp(
        st,
        CURVES,
        PERIODS,
        stand_strata(st),
        "max-even-flow",
        "even",
        0.0,
        0.5,
        None,
        None,
        cover,
        zones,
    )
    assert lp.objective >= rules.level_m3_per_period * (1 - 1e-6)
    free = solve_lp(st, CURVES, PERIODS, stand_strata(st), "max-even-flow", "even", 0.0, 0.5)
    assert free.objective >= lp.objective * (1 - 1e-9)  # a target never helps
    strict = CoverRules((CoverRule(-1, "*", "old", 120.0, 0.95),), np.array([st.area_ha.sum()]))
    with pytest.raises(InputError, match=r"infeasible.*\[\[cover\]\] targets"):
        solve_lp(
            st,
            CURVES,
            PERIODS,
            stand_strata(st),
            "max-even-flow",
            "even",
            0.0,
            0.5,
            None,
            None,
            strict,
            zones,
        )


def test_lp_with_expected_disturbance_bounds_the_rule_based_schedule():
    # Same expected disturbance (0.5% a year at each period's midpoint) and the same area
    # outside the harvestable land base on both sides: the LP (stand-level strata) is still
    # at least the rule-based level, and disturbance never raises it.
    base = forest()
    harvestable = base.area_ha * np.where(np.arange(base.n) % 3 == 0, 0.5, 1.0)
    st = StandArrays(
        base.species_idx,
        base.site_index,
        base.age_years,
        base.area_ha,
        base.min_harvest_age,
        base.regen_delay_years,
        base.id_rank,
        harvestable,
    )
    burning = HarvestRules(disturbance=0.005)
    rules = find_even_flow(st, CURVES, PERIODS, burning, ending_stock=0.6)
    lp = solve_lp(
        st,
        CURVES,
        PERIODS,
        stand_strata(st),
        "max-even-flow",
        "even",
        0.0,
        0.6,
        None,
        None,
        None,
        None,
        0.005,
    )
    assert lp.objective >= rules.level_m3_per_period * (1 - 1e-6)
    calm = solve_lp(st, CURVES, PERIODS, stand_strata(st), "max-even-flow", "even", 0.0, 0.6)
    assert calm.objective >= lp.objective * (1 - 1e-9)


def test_lp_disturbance_accounting_matches_the_simulation():
    # With monotone yield curves no harvest keeps the most standing volume, so the largest
    # ending-stock requirement the LP can meet must equal the simulation's expected ending
    # stock without harvest (the two disturbance bookkeepings agree, reserved area included).

    base = forest(n=30)
    harvestable = base.area_ha * np.where(np.arange(base.n) % 2 == 0, 0.4, 1.0)
    st = StandArrays(
        base.species_idx,
        base.site_index,
        base.age_years,
        base.area_ha,
        base.min_harvest_age,
        base.regen_delay_years,
        base.id_rank,
        harvestable,
    )
    calm = simulate(st, CURVES, PERIODS, EvenFlow(0.0), HarvestRules(disturbance=0.01), record=True)
    ratio = calm.ending_stock_m3 / calm.initial_stock_m3
    ok = solve_lp(
        st,
        CURVES,
        PERIODS,
        stand_strata(st),
        "max-volume",
        "none",
        0.0,
        ratio * (1 - 1e-6),
        None,
        None,
        None,
        None,
        0.01,
    )
    assert ok.status == "Optimal"
    with pytest.raises(InputError, match="infeasible"):
        solve_lp(
            st,
            CURVES,
            PERIODS,
            stand_strata(st),
            "max-volume",
            "none",
            0.0,
            ratio * (1 + 1e-4),
            None,
            None,
            None,
            None,
            0.01,
        )


# The builder at its own level: three strata over four periods, every row by hand.
#
# Model II (Johnson & Scheurman 1977, Forest Science Monograph 18; the form in docs/methods.md):
# x[s, p] is the area of existing stratum s first cut in period p (x[s, 0]: never), y[g, i, j]
# the area of regeneration group g established in period i and cut again in j (y[g, i, 0]:
# never). Its rows: sum_p x[s, p] + x[s, 0] = A_s for every stratum; for every group g and
# period p, sum_j y[g, p, j] + y[g, p, 0] = sum_(s in g) x[s, p] + sum_i y[g, i, p] (what is cut
# in p is established in p); H_p = sum v x + sum v y over the cuts of period p; the ending
# inventory sum v_end x[s, 0] + sum v_end y[g, i, 0] >= the target.
#
# Stands (one species, min harvest age 20, harvest at each 10-year period's midpoint):
#   A: 20 ha aged 5 on site 20; B: 10 ha aged 55 on site 20; C: 5 ha aged 32 on site 24 with
#   a regeneration delay of 2 years. Groups: site 20 (A, B) and site 24 (C).
# Ages at the harvest moments 5, 15, 25, 35 years in: A 10 20 30 40 (first cut from period 2),
# B 60 70 80 90, C 37 47 57 67; regrowth of group 0 is 10 (j - i) years old when cut in j
# (>= 20: y[0,1,3], y[0,1,4], y[0,2,4]), of group 1 10 (j - i) - 2 (>= 20: y[1,1,4]). At the
# horizon's end (40 years in) the never-cut area is 45, 95 and 72 years old, and regrowth
# established in period i is 10 (4 - i) + 5 years old (less 2 in group 1).

HAND_PERIODS = Periods(2030, 10, 4, "midpoint")


def V(age, site=20.0):
    return float(CURVE.volume_m3_ha(float(age), site))


def three_strata():
    st = StandArrays(
        np.zeros(3, np.int32),
        np.array([20.0, 20.0, 24.0]),
        np.array([5.0, 55.0, 32.0]),
        np.array([20.0, 10.0, 5.0]),
        np.full(3, 20.0),
        np.array([0.0, 0.0, 2.0]),
        np.arange(3),
    )
    strata = make_strata(st, np.zeros(3, int), 1.0, 1e-6)
    # strata sort by site class, then age class (A, B, C: area rows 0, 1, 2); groups by site
    assert list(strata.of_stand) == [0, 1, 2] and list(strata.group) == [0, 0, 1]
    return st, strata


def names_of(model, strata):
    """A label per column: ("x", stand, p), ("y", group, i, j), ("H", p), then the level
    ("M",) and the bound's clearcut volumes ("C", p) where the model has them (stratum k is
    stand k here)."""
    cols = lp_columns(strata, CURVES, HAND_PERIODS)
    names = [
        ("x", "ABC"[a], int(b)) if x else ("y", int(a), int(b), int(c))
        for x, a, b, c in zip(cols.is_x, cols.index, cols.first, cols.again, strict=True)
    ]
    names += [("H", p) for p in range(1, HAND_PERIODS.count + 1)]
    if model.level_col >= 0:
        assert model.level_col == len(names)
        names.append(("M",))
        names += [("C", p) for p in range(1, model.matrix.shape[1] - len(names) + 1)]
    assert len(names) == model.matrix.shape[1]
    return names


def row(model, names, r):
    """Row r as {label: coefficient}, with its bounds."""
    A = model.matrix.tocsr()
    span = slice(A.indptr[r], A.indptr[r + 1])
    coef = {names[c]: v for c, v in zip(A.indices[span], A.data[span], strict=True)}
    return coef, model.row_lo[r], model.row_hi[r]


def column(model, names, label):
    """The column of this label as {row: coefficient}."""
    A, k = model.matrix, names.index(label)
    span = slice(A.indptr[k], A.indptr[k + 1])
    return dict(zip(A.indices[span].tolist(), A.data[span], strict=True))


def assert_row(model, names, r, expected, lo, hi):
    coef, row_lo, row_hi = row(model, names, r)
    assert coef == pytest.approx(expected, rel=1e-12)
    assert (row_lo, row_hi) == pytest.approx((lo, hi))


def hand_model(**kwargs):
    st, strata = three_strata()
    model = build_lp(st, CURVES, HAND_PERIODS, strata, **kwargs)
    return model, names_of(model, strata)


def test_columns_are_the_cuts_a_hand_count_gives():
    st, strata = three_strata()
    model, names = hand_model()
    assert sorted(n for n in names if n[0] == "x") == sorted(
        [("x", "A", p) for p in (0, 2, 3, 4)] + [("x", s, p) for s in "BC" for p in range(5)]
    )
    assert sorted(n for n in names if n[0] == "y") == sorted(
        [("y", 0, 1, 3), ("y", 0, 1, 4), ("y", 0, 2, 4), ("y", 1, 1, 4)]
        + [("y", g, i, 0) for g in (0, 1) for i in range(1, 5)]
    )
    cols = lp_columns(strata, CURVES, HAND_PERIODS)
    volume = dict(zip(names, cols.volume_m3_ha, strict=False))
    end = dict(zip(names, cols.end_volume_m3_ha, strict=False))
    assert volume[("x", "A", 2)] == pytest.approx(V(20))
    assert volume[("x", "B", 1)] == pytest.approx(V(60))
    assert volume[("x", "C", 4)] == pytest.approx(V(67, 24))
    assert volume[("y", 1, 1, 4)] == pytest.approx(V(28, 24))
    assert volume[("x", "B", 0)] == 0.0 and end[("x", "B", 0)] == pytest.approx(V(95))
    assert end[("y", 0, 2, 0)] == pytest.approx(V(25))
    assert end[("y", 1, 3, 0)] == pytest.approx(V(13, 24))
    assert end[("x", "A", 3)] == 0.0


def test_area_rows_hold_each_stratum():
    model, names = hand_model()
    for k, (s, area) in enumerate(zip("ABC", (20.0, 10.0, 5.0), strict=True)):
        first = [p for p in range(5) if ("x", s, p) in names]
        assert_row(model, names, k, {("x", s, p): 1.0 for p in first}, area, area)


def test_regeneration_rows_establish_what_is_cut():
    # rows 3 + g P + p - 1 (after the three area rows), each = 0
    model, names = hand_model()
    balances = {
        (0, 1): {("y", 0, 1, 3): 1, ("y", 0, 1, 4): 1, ("y", 0, 1, 0): 1, ("x", "B", 1): -1},
        (0, 2): {
            ("y", 0, 2, 4): 1,
            ("y", 0, 2, 0): 1,
            ("x", "A", 2): -1,
            ("x", "B", 2): -1,
        },
        (0, 3): {("y", 0, 3, 0): 1, ("y", 0, 1, 3): -1, ("x", "A", 3): -1, ("x", "B", 3): -1},
        (0, 4): {
            ("y", 0, 4, 0): 1,
            ("y", 0, 1, 4): -1,
            ("y", 0, 2, 4): -1,
            ("x", "A", 4): -1,
            ("x", "B", 4): -1,
        },
        (1, 1): {("y", 1, 1, 4): 1, ("y", 1, 1, 0): 1, ("x", "C", 1): -1},
        (1, 2): {("y", 1, 2, 0): 1, ("x", "C", 2): -1},
        (1, 3): {("y", 1, 3, 0): 1, ("x", "C", 3): -1},
        (1, 4): {("y", 1, 4, 0): 1, ("y", 1, 1, 4): -1, ("x", "C", 4): -1},
    }
    for (g, p), expected in balances.items():
        assert_row(model, names, 3 + g * 4 + p - 1, expected, 0.0, 0.0)


def test_harvest_rows_define_each_period_volume():
    # rows 3 + G P + p - 1: sum v x + sum v y - H_p = 0
    model, names = hand_model()
    harvest = {
        1: {("x", "B", 1): V(60), ("x", "C", 1): V(37, 24)},
        2: {("x", "A", 2): V(20), ("x", "B", 2): V(70), ("x", "C", 2): V(47, 24)},
        3: {
            ("x", "A", 3): V(30),
            ("x", "B", 3): V(80),
            ("x", "C", 3): V(57, 24),
            ("y", 0, 1, 3): V(20),
        },
        4: {
            ("x", "A", 4): V(40),
            ("x", "B", 4): V(90),
            ("x", "C", 4): V(67, 24),
            ("y", 0, 1, 4): V(30),
            ("y", 0, 2, 4): V(20),
            ("y", 1, 1, 4): V(28, 24),
        },
    }
    for p, expected in harvest.items():
        assert_row(model, names, 3 + 8 + p - 1, {**expected, ("H", p): -1.0}, 0.0, 0.0)
    assert [names[c] for c in model.h_col] == [("H", p) for p in range(1, 5)]


@pytest.mark.parametrize(
    ("policy", "band", "rows"),
    [
        # even: (1 - band) H_(p-1) <= H_p <= (1 + band) H_(p-1); with no band one level
        ("even", 0.0, [(1.0, 0.0, INF), (1.0, -INF, 0.0)]),
        ("even", 0.1, [(0.9, 0.0, INF), (1.1, -INF, 0.0)]),
        # non-declining: H_p >= H_(p-1), whatever the band
        ("nondeclining", 0.1, [(1.0, 0.0, INF)]),
        ("none", 0.1, []),
    ],
)
def test_flow_rows_of_each_policy(policy, band, rows):
    model, names = hand_model(objective="max-volume", policy=policy, band=band)
    assert len(model.flow_rows) == 3 * len(rows)
    flow = iter(model.flow_rows)
    for p in range(2, 5):
        for factor, lo, hi in rows:
            expected = {("H", p): 1.0, ("H", p - 1): -factor}
            assert_row(model, names, next(flow), expected, lo, hi)
    assert model.flow_rows == list(range(3 + 8 + 4, 3 + 8 + 4 + len(model.flow_rows)))


def test_ending_stock_row():
    # the never-cut area at its age 40 years in, the regrowth at 10 (4 - i) + 5 (less 2 in
    # group 1), >= ending_stock x the initial stock 20 V(5) + 10 V(55) + 5 V(32)
    model, names = hand_model(ending_stock=0.7)
    expected = {("x", "A", 0): V(45), ("x", "B", 0): V(95), ("x", "C", 0): V(72, 24)}
    for i in range(1, 5):
        expected[("y", 0, i, 0)] = V(10 * (4 - i) + 5)
        expected[("y", 1, i, 0)] = V(10 * (4 - i) + 3, 24)
    initial = 20 * V(5) + 10 * V(55) + 5 * V(32, 24)
    assert model.ending_row == 3 + 8 + 4 + 6 + 4  # after the flow rows and H_p >= M
    assert_row(model, names, model.ending_row, expected, 0.7 * initial, INF)


def test_area_cap_and_cover_rows():
    # cover (cover.py): old forest (>= 50 years) at least 20% of the 35 ha after each
    # period's cut; young forest (< 20 years, regrowth in its delay included) at most 50%
    from yieldscape.schedule.cover import CoverRule, CoverRules

    cover = CoverRules(
        (CoverRule(-1, "*", "old", 50.0, 0.2), CoverRule(-1, "*", "young", 20.0, 0.5)),
        np.array([35.0]),
    )
    model, names = hand_model(max_area_ha=12.0, cover=cover)
    first = model.ending_row + 1
    # at period 1's harvest (5 years in) only B (60) is old: B not cut in period 1
    old_1 = {("x", "B", p): 1.0 for p in (0, 2, 3, 4)}
    assert_row(model, names, first, old_1, 7.0, INF)
    # at period 3's (25 years in): B (80) and C (57) not cut by then; regrowth is at most 20
    old_3 = {("x", s, p): 1.0 for s in "BC" for p in (0, 4)}
    assert_row(model, names, first + 2, old_3, 7.0, INF)
    # young at period 1: A (10) standing, and all regrowth of period 1 (ages 0 and -2)
    young_1 = {("x", "A", p): 1.0 for p in (0, 2, 3, 4)}
    young_1.update({n: 1.0 for n in names if n[0] == "y" and n[2] == 1})
    assert_row(model, names, first + 4, young_1, -INF, 17.5)
    # the cap: each period's cut area
    for p in range(1, 5):
        cut = {n: 1.0 for n in names if (n[0] == "x" and n[2] == p) or (n[0] == "y" and n[3] == p)}
        assert_row(model, names, first + 8 + p - 1, cut, -INF, 12.0)
    assert model.matrix.shape[0] == first + 8 + 4


def test_disturbance_regrows_each_hectare_once():
    # Expected disturbance (fire in Model II: Reed & Errico 1986, Can. J. For. Res. 16:266): a
    # share d = 1 - (1 - r)^L of the standing area burns each period after its harvest and
    # regrows in its group's balance of that period (rows 3 + p - 1 for group 0). x[B, 3]
    # stands in periods 1 and 2: d and (1 - d) d burn, (1 - d)^2 is cut in 3 (harvest row 13);
    # x[B, 0] burns in every period and (1 - d)^4 stands at the end. B's area row is row 1.
    r = 0.01
    d = 1 - (1 - r) ** 10
    keep = 1 - d
    model, names = hand_model(disturbance=r)
    b3 = {1: 1.0, 3: -d, 4: -keep * d, 5: -(keep**2), 13: V(80) * keep**2}
    assert column(model, names, ("x", "B", 3)) == pytest.approx(b3, rel=1e-12)
    b0 = {1: 1.0, 3: -d, 4: -keep * d, 5: -(keep**2) * d, 6: -(keep**3) * d}
    b0[model.ending_row] = V(95) * keep**4
    assert column(model, names, ("x", "B", 0)) == pytest.approx(b0, rel=1e-12)
    # d + (1 - d) d + ... + (1 - d)^(p-1): every hectare cut or burnt is established once
    for p in range(1, 5):
        entries = column(model, names, ("x", "B", p)).items()
        assert sum(v for r_, v in entries if 3 <= r_ < 11) == pytest.approx(-1.0, rel=1e-12)
    # regrowth y[0, 1, 4]: established in 1, stands in 2 and 3, cut in 4 (harvest row 14)
    y14 = {3: 1.0, 4: -d, 5: -keep * d, 6: -(keep**2), 14: V(30) * keep**2}
    assert column(model, names, ("y", 0, 1, 4)) == pytest.approx(y14, rel=1e-12)


def test_max_npv_costs_are_discounted_net_revenue():
    # NPV of a hectare cut in period p: (price V - regeneration cost) e^(-r t), t = 10 (p - 1)
    # + 5 years; standing value at the horizon's end, price V_end e^(-40 r) (terminal value)
    from yieldscape.schedule.lp import Economics

    econ = Economics(np.array([25.0]), np.array([600.0]), 0.03, "continuous", "standing")
    model, names = hand_model(objective="max-npv", economics=econ)
    cost = dict(zip(names, model.cost, strict=True))
    assert cost[("x", "B", 2)] == pytest.approx(-(25 * V(70) - 600) * np.exp(-0.03 * 15))
    assert cost[("y", 1, 1, 4)] == pytest.approx(-(25 * V(28, 24) - 600) * np.exp(-0.03 * 35))
    assert cost[("x", "C", 0)] == pytest.approx(-25 * V(72, 24) * np.exp(-0.03 * 40))
    assert cost[("H", 1)] == 0.0


def test_a_new_flow_policy_is_one_registry_entry(monkeypatch):
    # a policy adds its LP rows by one entry in FLOW_ROWS: here each period at most the first
    from yieldscape.schedule import lp

    def at_most_first(m, h_col, band):
        return [m.add_row(h_col[[p, 0]], np.array([1.0, -1.0]), -INF, 0.0) for p in (1, 2, 3)]

    monkeypatch.setitem(lp.FLOW_ROWS, "at-most-first", at_most_first)
    model, names = hand_model(policy="at-most-first", objective="max-volume")
    assert [row(model, names, r)[0] for r in model.flow_rows] == [
        {("H", p): 1.0, ("H", 1): -1.0} for p in (2, 3, 4)
    ]
    st, strata = three_strata()
    res = solve_lp(st, CURVES, HAND_PERIODS, strata, "max-volume", "at-most-first")
    assert (res.harvest_m3[1:] <= res.harvest_m3[0] * (1 + 1e-9)).all()


# ---------------------------------------------------------------- management regimes in the LP
# Three codes: natural stands, and two codes they may regrow as (planted, mixed). Every curve is
# a code's gross yield; thinnings take a share of the standing volume (yieldscape.regimes).

NATURAL = ChapmanRichards(450.0, 0.035, 3.0, SiteScaling(20.0, 1.0, 0.3))
PLANTED = ChapmanRichards(560.0, 0.045, 3.0, SiteScaling(20.0, 1.0, 0.3))
MIXED = ChapmanRichards(700.0, 0.03, 3.0, SiteScaling(20.0, 1.5, 0.2))  # slower, larger
R_CURVES = CurveSet(["natural", "planted", "mixed"], [NATURAL, PLANTED, MIXED])
NAT, PLA, MIX = 0, 1, 2
LONG = Periods(2030, 10, 16, "midpoint")  # long enough for regrowth to be cut again


def regime_forest(
    n=40,
    seed=3,
    transitions=((0, 1, 0), (0, 1, 0), (0, 0, 1)),
    choices=(None, None, None),
    thinnings=((), (), ()),
    delay=(0.0, 2.0, 1.0),
    sites=None,
):
    """Stands of natural forest (a few planted ones) with the regimes given: ``transitions``
    (codes x codes), ``choices`` (per code the options, or None), ``thinnings`` (per code
    (age, share) pairs). Minimum harvest ages 60, 40 and 50 years, 5 years less on sites of
    22 m and more (what StandArrays.from_table gives per code and site, made by hand)."""
    rng = np.random.default_rng(seed)
    sp = np.where(rng.random(n) < 0.85, NAT, PLA).astype(np.int32)
    site = rng.uniform(16.0, 24.0, n) if sites is None else np.resize(sites, n)
    ages = np.where(rng.random(n) < 0.6, rng.uniform(60, 140, n), rng.uniform(0, 40, n))
    by_code = np.array([60.0, 40.0, 50.0])[:, None] - 5.0 * (site >= 22.0)[None, :]
    K = max(len(t) for t in thinnings)
    thin_ages, thin_share = np.full((3, K), np.inf), np.full((3, K), np.nan)
    for i, sched in enumerate(thinnings):
        for k, (age, share) in enumerate(sched):
            thin_ages[i, k], thin_share[i, k] = age, share
    reg = Regimes(
        np.asarray(transitions, dtype=np.float64),
        tuple(choices),
        thin_ages,
        thin_share,
        {},
        np.asarray(delay, dtype=np.float64),
    )
    return StandArrays(
        sp,
        site,
        ages,
        rng.uniform(5, 30, n),
        by_code[sp, np.arange(n)],
        reg.delay[sp],
        np.arange(n),
        regimes=reg,
        min_age_by_code=by_code,
    )


def regime_strata(st, disturbed=False):
    return make_strata(st, np.zeros(st.n, int), 1e-6, 1e-6, disturbed)


def test_model_without_regimes_is_unchanged_by_them():
    # identity transitions and no thinnings: the same matrix as without regimes at all
    st = regime_forest(transitions=np.eye(3))
    plain = replace(st, regimes=None, min_age_by_code=None)
    a = build_lp(st, R_CURVES, PERIODS, regime_strata(st), "max-volume", "even", 0.1, 0.8)
    b = build_lp(plain, R_CURVES, PERIODS, regime_strata(plain), "max-volume", "even", 0.1, 0.8)
    assert (a.matrix != b.matrix).nnz == 0
    np.testing.assert_array_equal(a.cost, b.cost)
    np.testing.assert_array_equal(a.row_lo, b.row_lo)


def schedule_as_solution(st, strata, model, sim, periods):
    """The LP solution of a simulated schedule, on strata of one stand each whose regrowth,
    whatever its generation, stays in one group per stand (A -> B -> B): the area of each
    stand first cut in p (told by the age at the cut), of its regrowth established in i and
    cut again in j (i from the age and the delay), and what is never cut. The H_p are left at
    0, so A x gives each period's harvest in the harvest rows."""
    P, L, off = periods.count, float(periods.period_years), periods.offset_years
    cols = lp_columns(strata, R_CURVES, periods)
    at = {
        (bool(a), int(b), int(c), int(d)): k
        for k, (a, b, c, d) in enumerate(
            zip(cols.is_x, cols.index, cols.first, cols.again, strict=True)
        )
    }
    stratum = strata.of_stand
    _, group, share = strata.regrowth.of(stratum)
    assert len(group) == st.n and (share == 1).all()  # one target per stand
    _, again, _ = strata.regrowth.of(strata.n + group)
    assert (again == group).all()  # B -> B: regrowth stays in its group
    x = np.zeros(model.matrix.shape[1])
    cut_in = np.zeros((st.n, P + 1))
    clear = sim.event_treatment == 0
    events = zip(
        sim.event_stand[clear],
        sim.event_period[clear],
        sim.event_age_years[clear],
        sim.event_area_ha[clear],
        sim.event_code[clear],
        strict=True,
    )
    for s, p, age, area, code in events:
        cut_in[s, p] += area
        if np.isclose(age, st.age_years[s] + (p - 1) * L + off):
            x[at[(True, stratum[s], p, 0)]] += area
        else:
            i = p - round((age + st.regimes.delay[code]) / L)
            x[at[(False, group[s], i, p)]] += area
    for s in range(st.n):
        first = [
            at[(True, stratum[s], p, 0)] for p in range(1, P + 1) if (True, stratum[s], p, 0) in at
        ]
        x[at[(True, stratum[s], 0, 0)]] = st.area_ha[s] - x[first].sum()
        for i in range(1, P + 1):
            later = [
                at[(False, group[s], i, j)]
                for j in range(i + 1, P + 1)
                if (False, group[s], i, j) in at
            ]
            x[at[(False, group[s], i, 0)]] = cut_in[s, i] - x[later].sum()
    return x, cols


@pytest.mark.parametrize("timing", ["start", "midpoint", "end"])
def test_lp_harvest_of_a_schedule_with_thinnings_is_the_simulation_harvest(timing):
    # The LP's bookkeeping against the rule-based simulation (yieldscape.regimes: a thinning is
    # taken in the period in which the stand reaches its age, unless the stand is clearcut
    # then; a clearcut takes the gross yield less the thinnings taken before): on strata of
    # one stand each, a simulated schedule (natural -> planted -> planted, thinnings on both,
    # partial cuts) put into the LP's columns meets every area and regeneration row and gives
    # the simulation's harvest, thinnings and ending stock in every period.
    st = regime_forest(thinnings=(((70, 0.2),), ((25, 0.3), (35, 0.2)), ()))
    strata = regime_strata(st)
    periods = replace(LONG, timing=timing)
    model = build_lp(st, R_CURVES, periods, strata, "max-volume", "none", 0.0, 1.0)
    sim = simulate(st, R_CURVES, periods, Targets((30000.0,) * 16), record=True)
    assert sim.thinning_m3.sum() > 0.1 * sim.harvest_m3.sum()
    x, cols = schedule_as_solution(st, strata, model, sim, periods)
    assert (x >= -1e-9).all()
    assert x[: cols.n][cols.is_y & (cols.again > 0)].sum() > 100.0  # regrowth cut again
    assert len(np.unique(sim.event_area_ha)) > 10  # partial cuts
    ax = model.matrix @ x
    h_rows = [int(model.matrix[:, h].indices[0]) for h in model.h_col]
    np.testing.assert_allclose(ax[h_rows], sim.harvest_m3, rtol=1e-9)
    thin = np.bincount(cols.thin_period - 1, cols.thin_m3_ha * x[cols.thin_col], 16)
    np.testing.assert_allclose(thin, sim.thinning_m3, rtol=1e-9)
    assert ax[model.ending_row] == pytest.approx(sim.ending_stock_m3, rel=1e-9)
    assert model.row_lo[model.ending_row] == pytest.approx(sim.initial_stock_m3, rel=1e-12)
    x[model.h_col] = sim.harvest_m3
    ax = model.matrix @ x
    rows = np.r_[0 : model.ending_row]
    rows = rows[~np.isin(rows, model.flow_rows)]
    assert (ax[rows] >= model.row_lo[rows] - 1e-6).all()
    assert (ax[rows] <= model.row_hi[rows] + 1e-6).all()


CHOICE = ((0, 1, 0), (0, 1, 0), (0, 0, 1))  # natural: a choice (the rules take planted first)


@pytest.mark.parametrize("objective", ["max-even-flow", "max-npv"])
def test_lp_with_a_choice_matches_cbc_on_the_same_model(objective):
    # Independent solver: the LP with a regime choice (natural -> planted or mixed), thinnings
    # and a chain, solved by CBC through PuLP on the same matrix; with max-npv each option
    # pays its own regeneration cost and thinnings earn their price.
    from yieldscape.schedule.lp import Economics

    st = regime_forest(
        n=25, choices=((PLA, MIX), None, None), thinnings=((), ((25, 0.3),), ((30, 0.2),))
    )
    strata = make_strata(st, np.zeros(st.n, int), 2.0, 20.0)
    econ = Economics(
        np.array([20.0, 25.0, 22.0]), np.array([500.0, 1500.0, 800.0]), 0.03, "continuous"
    )
    # strict even flow holding the stock: the choice beats either option alone (both objectives)
    args = (st, R_CURVES, PERIODS, strata, objective, "even", 0.0, 1.0, None, econ)
    model = build_lp(*args)
    ours = solve_lp(*args)
    assert strata.regrowth.choices > 0
    assert set(ours.regeneration()["to_species"]) == {"planted", "mixed"}
    assert cbc_objective(model) == pytest.approx(ours.objective, rel=1e-6)
    if objective == "max-npv":  # a choice column pays its option's cost, e^(-r t) at its cut
        z = choice_columns(strata, 10)
        t = (z.period - 1) * 10.0 + 5.0
        cost = econ.regen_cost[z.code] * np.exp(-0.03 * t)
        np.testing.assert_allclose(model.cost[len(model.cost) - z.n :], cost, rtol=1e-12)


def test_adding_an_option_never_lowers_the_lp_objective():
    # A larger choice only adds columns (Model II with Model I-style choices, Johnson &
    # Scheurman 1977, For. Sci. Monogr. 18): on random forests the optimum of max-even-flow and
    # of max-volume cannot fall, and a choice of one option is the plain transition.
    gains = []
    for seed in range(1, 6):
        rng = np.random.default_rng(seed)
        thin = ((), ((float(rng.uniform(20, 35)), 0.25),), ((float(rng.uniform(20, 35)), 0.2),))
        kw = {"n": 30, "seed": seed, "thinnings": thin}
        forests = [
            regime_forest(**kw),
            regime_forest(**kw, choices=((PLA,), None, None)),
            regime_forest(**kw, choices=((PLA, MIX), None, None)),
            regime_forest(**kw, choices=((PLA, MIX, NAT), None, None)),
        ]
        for objective, policy in (("max-even-flow", "even"), ("max-volume", "nondeclining")):
            got = [
                solve_lp(
                    st,
                    R_CURVES,
                    PERIODS,
                    make_strata(st, np.zeros(30, int), 2.0, 10.0),
                    objective,
                    policy,
                    0.05,
                    0.7,
                ).objective
                for st in forests
            ]
            assert got[1] == pytest.approx(got[0], rel=1e-7)
            assert got[2] >= got[1] * (1 - 1e-7) and got[3] >= got[2] * (1 - 1e-7)
            gains.append(got[3] / got[1] - 1)
    assert max(gains) > 0.01  # the choice matters somewhere


def test_lp_choice_mapped_onto_stands_follows_the_lp():
    # The rule-based run with the LP's choice mapped onto stands (lp_schedule passes the LP's
    # shares per period and code to simulate): on strata of one stand each, all on one site so
    # that a share per code is all the LP chose, the mapped schedule regrows each period's
    # natural area in the LP's shares.
    thin = ((), ((25, 0.3),), ((30, 0.2),))
    st = regime_forest(choices=((PLA, MIX), None, None), thinnings=thin, sites=[20.0])
    strata = regime_strata(st)
    # holding the ending stock, the choice beats either option alone: the LP needs both
    lp = solve_lp(st, R_CURVES, PERIODS, strata, "max-even-flow", "even", 0.0, 1.0)
    chosen = lp.regeneration()
    natural = chosen[chosen["from_species"] == "natural"]
    assert set(natural["to_species"]) == {"planted", "mixed"}
    # lp_schedule reads the objective and the ending stock of the scenario's flow section
    flow_keys = SimpleNamespace(objective="max-even-flow", ending_stock=1.0)
    rules = guided(lp, strata, st, PERIODS, HarvestRules())
    flow = lp_schedule(lp, st, R_CURVES, PERIODS, SimpleNamespace(flow=flow_keys), rules)
    sim = flow.simulation
    # every period holds one share of the LP's harvest, and the ending stock holds (the
    # mapped plan is lowered until it does: the LP's regrowth cut again is not mapped)
    held = 1.0 - flow.details["disaggregation_gap"]
    assert 0.9 < held <= 1.0
    np.testing.assert_allclose(sim.harvest_m3, held * lp.harvest_m3, rtol=1e-6)
    assert sim.ending_stock_m3 >= sim.initial_stock_m3 * (1 - 1e-6)
    for p in range(1, 11):
        cut = (sim.regen_period == p) & (sim.regen_from == NAT)
        lp_p = lp.regen_area_ha[p - 1, NAT]
        if cut.any() and lp_p.sum() > 1e-6:
            to = np.bincount(sim.regen_to[cut], sim.regen_area_ha[cut], 3)
            np.testing.assert_allclose(to / to.sum(), lp_p / lp_p.sum(), atol=1e-9)


def conversion_forest(R=60.0, L=10.0, a=5.0, choice=False, thin=()):
    """A fully regulated forest on curve N (one age class of ``a`` ha per period of the
    rotation R, each reaching R at its period's midpoint harvest) converted to curve M: both
    tables flat past R, minimum harvest age R, no delay."""
    n = int(R / L)
    ages = R - np.arange(n) * L - L / 2
    by_code = np.full((2, n), R)
    reg = Regimes(
        np.array([[0.0, 1.0], [0.0, 1.0]]),
        ((0, 1) if choice else None, None),
        np.array([[np.inf] * len(thin), [t for t, _ in thin]]).reshape(2, len(thin)),
        np.array([[np.nan] * len(thin), [q for _, q in thin]]).reshape(2, len(thin)),
        {},
        np.zeros(2),
    )
    return StandArrays(
        np.zeros(n, np.int32),
        np.full(n, 20.0),
        ages,
        np.full(n, a),
        np.full(n, R),
        np.zeros(n),
        np.arange(n),
        regimes=reg,
        min_age_by_code=by_code,
    )


N_TABLE = TableYield.single((20.0, 40.0, 60.0), (80.0, 220.0, 330.0))
M_TABLE = TableYield.single((20.0, 40.0, 60.0), (120.0, 300.0, 420.0))
NM = CurveSet(["natural", "planted"], [N_TABLE, M_TABLE])


@pytest.mark.parametrize(("choice", "thinned"), [(False, False), (True, False), (True, True)])
def test_conversion_of_a_regulated_forest_follows_area_control(choice, thinned):
    # A fully regulated forest on curve N converted to curve M at rotation R: (A/R) N(R) a year
    # for the first rotation, then (A/R) M(R) (the area-control identity: Davis & Johnson,
    # Forest Management, from memory; Bettinger et al. 2009, Ch. 11). With the area cut a
    # period held to A L / R and curves flat past R, no period can yield more, so the
    # max-volume LP (non-declining or free flow) gives exactly that; a choice between N and M
    # chooses M. Thinned at 30 years (a quarter of M(30)), the steady state is still (A/R) M(R),
    # clearcut plus the removals up to R (M is the gross yield), and the first rotation gains
    # the removals of the regrowth that reaches 30. Under strict even flow the first rotation
    # sets the level of every period.
    st = conversion_forest(choice=choice, thin=((30.0, 0.25),) if thinned else ())
    strata = make_strata(st, np.zeros(st.n, int), 1.0, 1e-6)
    periods = Periods(2030, 10, 12, "midpoint")
    a, nr, mr = 5.0, 330.0, 420.0  # ha a period (A L / R), N(R), M(R)
    removal = 0.25 * float(M_TABLE.volume_m3_ha(30.0, 20.0)) if thinned else 0.0
    expected = np.r_[np.full(6, a * nr), np.full(6, a * mr)]
    expected[3:6] += a * removal  # regrowth of periods 1-3 thinned in periods 4-6
    for policy in ("nondeclining", "none"):
        lp = solve_lp(st, NM, periods, strata, "max-volume", policy, 0.0, 0.0, a)
        np.testing.assert_allclose(lp.harvest_m3, expected, rtol=1e-7)
    to = lp.regeneration().groupby("to_species")["area_ha"].sum()
    assert to.to_dict() == pytest.approx({"planted": 12 * a})
    even = solve_lp(st, NM, periods, strata, "max-even-flow", "even", 0.0, 0.0, a)
    assert even.objective == pytest.approx(a * nr, rel=1e-7)


def test_lp_stock_with_regimes_and_disturbance_matches_the_simulation():
    # As test_lp_disturbance_accounting_matches_the_simulation, with transitions and thinnings:
    # uncut stands are still thinned, disturbed area regrows as its own code (planted stands
    # in their own group, which no cut regrows into and make_strata keeps when disturbed),
    # and, as a clearcut only lowers the stock (planted stands regrow as natural, a lower
    # curve), the largest ending stock the LP can require is the simulation's expected stock
    # without clearcuts.
    to_natural = ((1, 0, 0), (1, 0, 0), (0, 0, 1))
    base = regime_forest(n=30, transitions=to_natural, thinnings=(((70, 0.2),), ((25, 0.3),), ()))
    st = replace(base, harvestable_ha=base.area_ha * np.where(np.arange(30) % 2, 1.0, 0.4))
    rules = HarvestRules(disturbance=0.01)
    calm = simulate(st, R_CURVES, PERIODS, Targets((0.0,) * 10), rules, record=True)
    assert calm.thinning_m3.sum() > 0
    ratio = calm.ending_stock_m3 / calm.initial_stock_m3
    strata = regime_strata(st, disturbed=True)
    args = (st, R_CURVES, PERIODS, strata, "max-volume", "none", 0.0)
    kw = {"disturbance": 0.01}
    assert solve_lp(*args, ratio * (1 - 1e-6), **kw).status == "Optimal"
    with pytest.raises(InputError, match="infeasible"):
        solve_lp(*args, ratio * (1 + 1e-4), **kw)
    with pytest.raises(ValueError, match="disturbed=True"):
        solve_lp(st, R_CURVES, PERIODS, regime_strata(st), disturbance=0.01)


def test_optimised_run_reports_and_follows_the_lp_choice(tmp_path):
    # Through the scenario, the pipeline and the writer: natural stands whose regeneration is
    # a choice (planted, thinned at 25, or mixed); flow.method = "optimize" maps the LP's
    # choice onto stands. run.json lp.regeneration holds the LP's areas from code to code,
    # regeneration.csv the written schedule's, which regrows each code's cut in the LP's
    # shares of its period (a code with no cut in the LP's period takes the first option).
    n = 30
    ages = np.r_[np.arange(20) * 6.0 + 1.0, np.arange(10) * 4.0 + 80.0]
    layer = write_layer(
        tmp_path / "stands.gpkg", squares(n), stand_attrs(n, ages, "natural", site=20.0)
    )

    def code(a, k, min_age, **rest):
        return {
            "curve": "chapman-richards",
            "a": a,
            "k": k,
            "c": 3.0,
            "min_harvest_age": min_age,
            "regen_delay_years": 1,
            **rest,
        }

    raw = scenario_dict(
        layer,
        species={
            "natural": code(400.0, 0.03, 60, regenerate_as=["planted", "mixed"]),
            "planted": code(520.0, 0.045, 40, thinnings=[{"age_years": 25, "removal_share": 0.25}]),
            "mixed": code(700.0, 0.03, 50),
        },
        # strict even flow holding the stock: the choice beats either option alone (1,662
        # m3 a period against 1,572 planted and 1,510 mixed), so the LP uses both
        flow={"method": "optimize", "policy": "even", "band": 0.0, "ending_stock": 1.0},
    )
    out = tmp_path / "out"
    yieldscape.run(yieldscape.load_scenario(write_scenario(tmp_path / "s.toml", raw)), out)
    lp = json.loads((out / "run.json").read_text())["lp"]
    chosen = pd.DataFrame(lp["regeneration"])
    assert list(chosen.columns) == ["period", "from_species", "to_species", "area_ha"]
    natural = chosen[chosen["from_species"] == "natural"]
    assert set(natural["to_species"]) == {"planted", "mixed"}
    written = pd.read_csv(out / "regeneration.csv")
    for p, lp_rows in natural.groupby("period"):
        sim = written[(written["period"] == p) & (written["from_species"] == "natural")]
        if len(sim):
            want = lp_rows.set_index("to_species")["area_ha"]
            got = sim.groupby("to_species")["area_ha"].sum()
            pd.testing.assert_series_equal(
                (got / got.sum()).sort_index(),
                (want / want.sum()).sort_index(),
                check_names=False,
                atol=1e-9,
            )
