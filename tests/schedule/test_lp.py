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
from yieldscape.schedule.lp import build_lp, make_strata, solve_lp

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
