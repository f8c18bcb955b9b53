"""Management units and harvest partitions in the harvest LP: against separate solves, another
solver (CBC through PuLP), the monotonicity that LP theory gives, and finite differences of the
duals (LP sensitivity analysis: the dual of a row is the derivative of the optimal value with
respect to its right-hand side where that is differentiable, and lies between the one-sided
derivatives where it is not; Bazaraa, Jarvis & Sherali, *Linear Programming and Network Flows*,
ch. 6, from memory)."""

import numpy as np
import pytest

from yieldscape.growth import ChapmanRichards
from yieldscape.projection import CurveSet, Periods
from yieldscape.schedule.lp import build_lp, make_strata, solve_highs
from yieldscape.schedule.lp_units import Cells, Partition, UnitFlow, make_cells

from helpers import cbc_solve, stands_of
from helpers import unit_forest as forest

CURVES = CurveSet(["pine"], [ChapmanRichards(450.0, 0.035, 3.0)])
PERIODS = Periods(2030, 10, 8, "midpoint")


def solve(st, cells, objective="max-even-flow", units=None, partitions=(), **kw):
    strata = make_strata(st, np.zeros(st.n, int), 1e-6, 1e-6, cells=cells)
    model = build_lp(
        st, CURVES, PERIODS, strata, objective, units=units, partitions=partitions, **kw
    )
    return model, solve_highs(model)


def two_units(units, partitions=(), member=None, objective="max-even-flow", old=0.6, **kw):
    """Forest A (40 stands, unit 0) and forest B (30 stands, unit 1), solved jointly."""
    a, b = forest(40, 1, old), forest(30, 2, 1 - old)
    st = stands_of(a, b)
    unit = np.r_[np.zeros(40, np.int64), np.ones(30, np.int64)]
    member = np.zeros((st.n, 1, 0), bool) if member is None else member
    return st, solve(st, make_cells(unit, member), objective, units, partitions, **kw)


UNITS = [UnitFlow("north", "even", 0.0, 1.0), UnitFlow("south", "even", 0.1, 0.9)]


@pytest.mark.parametrize("objective", ["max-even-flow", "max-level"])
def test_units_without_shared_rules_solve_as_separate_runs(objective):
    # No cover target or area cap: the joint LP separates into the units' LPs, so each unit's
    # level is the level of its own LP solved alone (to the solver's tolerance).
    st, (_, joint) = two_units(UNITS, objective=objective)
    for k, (part, unit) in enumerate(zip((forest(40, 1), forest(30, 2, 0.4)), UNITS, strict=True)):
        alone = stands_of(part)
        _, own = solve(
            alone,
            None,
            objective,
            policy=unit.policy,
            band=unit.band,
            ending_stock=unit.ending_stock,
        )
        assert joint.unit_level_m3[k] == pytest.approx(own.objective, rel=1e-6)
    assert joint.objective == pytest.approx(joint.unit_level_m3.sum(), rel=1e-12)
    assert joint.units == ("north", "south")
    # each unit's harvest holds its own level, and the units add up to the region
    assert (joint.unit_harvest_m3 >= joint.unit_level_m3[:, None] * (1 - 1e-6)).all()
    assert joint.unit_harvest_m3.sum(axis=0) == pytest.approx(joint.harvest_m3, rel=1e-9)


def test_units_with_a_shared_area_cap_match_cbc():
    # Independent solver on the same matrix: CBC through PuLP, with a regional area cap that
    # couples the units.
    st, (model, ours) = two_units(UNITS, max_area_ha=120.0)
    cost, x = cbc(model)
    assert -cost == pytest.approx(ours.objective + 1e-7 * ours.harvest_m3.sum(), rel=1e-6)
    assert sum(x[c] for c in model.level_cols) == pytest.approx(ours.objective, rel=1e-5)


def test_pooling_units_never_lowers_the_total():
    # One flow over the union: H_p = H_(A,p) + H_(B,p) >= M_A + M_B in every period and the
    # regional ending stock is the sum of the units', so the pooled level is at least the
    # sum of the units' levels (a relaxation; LP theory).
    units = [UnitFlow("a", "even", 0.0, 1.0), UnitFlow("b", "even", 0.0, 1.0)]
    # an old unit and a young one: alone each holds a lower level than together
    st, (_, joint) = two_units(units, max_area_ha=150.0, old=0.9)
    _, pooled = solve(st, None, max_area_ha=150.0, ending_stock=1.0)
    assert pooled.objective >= joint.objective * (1 - 1e-7)
    assert pooled.objective > joint.objective * 1.001  # here pooling gains: the check can fail


def partition_member(st, every=2):
    """Every other stand (by position) counts in the partition, whatever its code."""
    return (np.arange(st.n) % every == 0)[:, None, None]


def test_a_partition_never_raises_the_optimum_and_holds_in_every_period():
    st = stands_of(forest(50, 3))
    member = partition_member(st)
    cells = make_cells(np.zeros(st.n, np.int64), member)
    _, free = solve(st, cells)
    share = Partition("even-ids", min_share=0.7)
    _, held = solve(st, cells, partitions=[share])
    assert held.objective <= free.objective * (1 + 1e-9)
    assert held.objective < free.objective * 0.999  # the share binds here: the check can fail
    table = held.constraints[held.constraints["kind"] == "partition"]
    assert len(table) == PERIODS.count
    assert (table["activity"] >= 0.7 - 1e-6).all()
    assert (table["lower"] == 0.7).all()


def finite_difference(make, value, step):
    """The optimum's slopes to the left and right of ``value``."""
    lo, mid, hi = (solve_highs(make(value + d)).objective for d in (-step, 0.0, step))
    return (mid - lo) / step, (hi - mid) / step


@pytest.mark.parametrize("key", ["min_share", "max_share", "min_m3"])
def test_a_partition_dual_is_the_slope_of_the_optimum(key):
    st = stands_of(forest(50, 3))
    cells = make_cells(np.zeros(st.n, np.int64), partition_member(st))
    strata = make_strata(st, np.zeros(st.n, int), 1e-6, 1e-6, cells=cells)
    value = {"min_share": 0.7, "max_share": 0.3, "min_m3": 0.0}[key]
    if key == "min_m3":  # an amount that binds in some period: 70% of the free level
        free = solve_highs(build_lp(st, CURVES, PERIODS, strata))
        value = 0.7 * free.objective

    def make(v):
        return build_lp(st, CURVES, PERIODS, strata, partitions=[Partition("p", **{key: v})])

    res = solve_highs(make(value))
    rows = res.constraints[res.constraints["kind"] == "partition"]
    total = rows["dual"].sum()  # the limit moves in every period at once
    assert abs(total) > 1e-3 * res.objective / max(value, 1.0)  # it binds
    step = 1e-4 * value
    left, right = finite_difference(make, value, step)
    assert right - 1e-3 * abs(total) <= total <= left + 1e-3 * abs(total)


def test_a_unit_ending_stock_dual_is_the_slope_of_the_optimum():
    a, b = forest(40, 1), forest(30, 2)
    st = stands_of(a, b)
    unit = np.r_[np.zeros(40, np.int64), np.ones(30, np.int64)]
    cells = make_cells(unit, np.zeros((st.n, 1, 0), bool))
    strata = make_strata(st, np.zeros(st.n, int), 1e-6, 1e-6, cells=cells)

    def make(share):
        units = [UnitFlow("a", "even", 0.0, share), UnitFlow("b", "even", 0.0, 1.0)]
        return build_lp(st, CURVES, PERIODS, strata, units=units)

    res = solve_highs(make(1.0))
    row = res.constraints[(res.constraints["kind"] == "ending_stock")]
    assert list(row["unit"]) == ["a", "b"]
    dual = row["dual"].iloc[0]  # per m3 of unit a's ending stock
    initial = float(
        np.dot(
            CURVES.volume_m3_ha(st.species_idx[:40], st.age_years[:40], st.site_index[:40]),
            st.area_ha[:40],
        )
    )
    assert row["lower"].iloc[0] == pytest.approx(initial, rel=1e-9)  # no reserves here
    step = 1e-4
    left, right = finite_difference(make, 1.0, step)
    # per unit of share, the right-hand side moves by the unit's initial stock
    assert dual < 0
    assert right / initial - 1e-6 <= dual <= left / initial + 1e-6


def test_one_cell_gives_the_model_of_before():
    # make_cells with one unit and no partition gives the same strata and the same LP matrix
    st = stands_of(forest(40, 1))
    one = make_cells(np.zeros(st.n, np.int64), np.zeros((st.n, 1, 0), bool))
    assert one.n == 1
    m1, r1 = solve(st, one)
    m0, r0 = solve(st, None)
    assert (m1.matrix != m0.matrix).nnz == 0
    assert r1.objective == r0.objective
    assert Cells.single(st.n, 1).n == 1


def test_cells_split_units_and_memberships_per_code():
    unit = np.array([0, 0, 1, 1, 0])
    member = np.zeros((5, 2, 1), bool)
    member[[0, 2], 1, 0] = True  # stands 0 and 2 count in the partition once regrown as code 1
    cells = make_cells(unit, member)
    assert cells.n == 4
    assert cells.of_stand[1] == cells.of_stand[4]
    assert cells.unit[cells.of_stand].tolist() == unit.tolist()
    assert cells.member[cells.of_stand[0]].tolist() == [[False], [True]]


def cbc(model):
    cost, x = cbc_solve(model)
    return cost, [v.value() for v in x]
