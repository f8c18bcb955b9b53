"""The harvest LP (Model II, HiGHS) against an independent solver and known optima."""

import warnings

import numpy as np
import pulp
import pytest

from yieldscape.errors import InputError
from yieldscape.growth import ChapmanRichards, chapman_richards_culmination_age
from yieldscape.policies import EvenFlow
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule import HarvestRules, find_even_flow, simulate
from yieldscape.schedule.lp import INF, build_lp, lp_columns, make_strata, solve_lp

from helpers import gap_forest

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
    A = model.matrix.tocsr()
    prob = pulp.LpProblem("harvest", pulp.LpMinimize)
    x = [prob.add_variable(f"x{i}", lowBound=0) for i in range(A.shape[1])]
    prob += pulp.lpSum(float(c) * x[i] for i, c in enumerate(model.cost) if c)
    for r in range(A.shape[0]):
        cols = A.indices[A.indptr[r] : A.indptr[r + 1]]
        vals = A.data[A.indptr[r] : A.indptr[r + 1]]
        expr = pulp.lpSum(float(v) * x[c] for c, v in zip(cols, vals, strict=True))
        lo, hi = model.row_lo[r], model.row_hi[r]
        if lo == hi:
            prob += expr == float(lo)
        else:
            if np.isfinite(lo) and lo > -1e29:
                prob += expr >= float(lo)
            if np.isfinite(hi) and hi < 1e29:
                prob += expr <= float(hi)
    with warnings.catch_warnings():
        # PuLP 3 still ships CBC but announces its move to a separate package in PuLP 4
        warnings.simplefilter("ignore", DeprecationWarning)
        prob.solve(pulp.PULP_CBC_CMD(msg=False))
    assert pulp.LpStatus[prob.status] == "Optimal"
    assert -pulp.value(prob.objective) == pytest.approx(ours.objective, rel=1e-6)


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
    """A label per column: ("x", stand, p), ("y", group, i, j), ("H", p) (stratum k is stand
    k here)."""
    cols = lp_columns(strata, CURVES, HAND_PERIODS)
    names = [
        ("x", "ABC"[a], int(b)) if x else ("y", int(a), int(b), int(c))
        for x, a, b, c in zip(cols.is_x, cols.index, cols.first, cols.again, strict=True)
    ]
    names += [("H", p) for p in range(1, HAND_PERIODS.count + 1)]
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
    model, names = hand_model(policy=policy, band=band)
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
    assert model.ending_row == 3 + 8 + 4 + 6
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
