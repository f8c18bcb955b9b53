"""Build and solve the harvest LP (Model II) at a few sizes x 20 periods, plain and with
management regimes (spruce regrowing as a thinned planted code, pine a choice between itself
and that code), for the max-even-flow and max-level objectives; beside it, a bare HiGHS solve
of the same matrix (passModel of the CSC matrix built once, then run), with dual simplex and
with interior point.

Printed per case: our build + solve and the bare solve for each solver (interior point the
fastest of --repeat alternating runs), the ratios ours/bare, the ratio simplex/ipm (above 1:
interior point faster) and the solver lp_solver picks.

With ``--units``: three management units (the stands in three groups by index, each its own
even flow) and two partitions (the spruce code at least 30% of each period's harvest, the
stands older than 100 years at the start at most 60%), as ``bench_units.py`` has them.

python benchmarks/bench_lp.py [--strata 300 1000 3000 10000] [--regimes] [--disturbance 0.005]
    [--objectives max-even-flow max-level] [--simplex-max 3000] [--repeat 3] [--units]
"""

from __future__ import annotations

import argparse
import time
from dataclasses import replace

import highspy
import numpy as np
from numpy.typing import NDArray

from yieldscape.growth import ChapmanRichards, SiteScaling
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.regimes import Regimes
from yieldscape.schedule.lp import (
    INF,
    LPModel,
    build_lp,
    lp_solver,
    make_strata,
    solve_highs,
)
from yieldscape.schedule.lp_units import Partition, UnitFlow, make_cells

SOLVERS = ("simplex", "ipm")


def with_regimes(st: StandArrays) -> StandArrays:
    """Spruce (0) regrows as planted spruce (2), thinned at 30 and 45 years; pine (1) is a
    choice between pine and planted spruce; minimum harvest ages 70, 70 and 55."""
    reg = Regimes(
        np.array([[0.0, 0.0, 1.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]]),
        (None, (1, 2), None),
        np.array([[np.inf, np.inf], [np.inf, np.inf], [30.0, 45.0]]),
        np.array([[np.nan, np.nan], [np.nan, np.nan], [0.25, 0.2]]),
        {},
        np.array([2.0, 2.0, 1.0]),
    )
    by_code = np.repeat(np.array([[70.0], [70.0], [55.0]]), st.n, axis=1)
    return replace(st, regimes=reg, min_age_by_code=by_code)


def bare_highs(model: LPModel, solver: str) -> tuple[float, float]:
    """The floor: a bare HiGHS solve of the model's matrix (arrays prepared before the clock);
    seconds for passModel + run, and the objective."""
    A = model.matrix
    lp = highspy.HighsLp()
    lp.num_col_, lp.num_row_ = A.shape[1], A.shape[0]
    lp.col_cost_ = model.cost
    lp.col_lower_ = np.zeros(A.shape[1])
    lp.col_upper_ = np.full(A.shape[1], INF)
    lp.row_lower_, lp.row_upper_ = model.row_lo, model.row_hi
    lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
    lp.a_matrix_.start_ = A.indptr.astype(np.int32)
    lp.a_matrix_.index_ = A.indices.astype(np.int32)
    lp.a_matrix_.value_ = A.data
    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    h.setOptionValue("solver", solver)
    t0 = time.perf_counter()
    h.passModel(lp)
    h.run()
    seconds = time.perf_counter() - t0
    assert h.getModelStatus() == highspy.HighsModelStatus.kOptimal
    return seconds, h.getInfo().objective_function_value


def stands(n: int, regimes: bool) -> tuple[StandArrays, NDArray]:
    """n stands (one stratum each: ages differ) and their regeneration groups."""
    rng = np.random.default_rng(2)
    old = rng.random(n) < 0.57
    ages = np.where(old, rng.uniform(91, 220, n), rng.uniform(1, 40, n))
    st = StandArrays(
        rng.integers(0, 2, n).astype(np.int32),
        rng.uniform(14, 26, n),
        ages,
        rng.uniform(1, 80, n),
        np.full(n, 70.0),
        np.full(n, 2.0),
        np.arange(n),
    )
    # regeneration groups by code x 1-m site class
    return (with_regimes(st) if regimes else st), rng.integers(0, 3, n)


def one_case(curves: CurveSet, n: int, objective: str, args: argparse.Namespace) -> None:
    """Time ours (build_lp + solve_highs) and the bare solve, per solver; print one line."""
    st, groups = stands(n, args.regimes)
    build = dict(objective=objective, policy="even", band=0.1, ending_stock=1.0)
    build["disturbance"] = args.disturbance
    cells = None
    if args.units:
        C = 3  # the codes of with_regimes (two without: member of a code never grown is moot)
        member = np.zeros((n, C, 2), dtype=bool)
        member[:, [0, 2], 0] = True  # spruce and planted spruce
        member[:, :, 1] = (st.age_years > 100)[:, None]
        cells = make_cells(np.arange(n) * 3 // n, member)
        build["units"] = [UnitFlow(f"u{u}", "even", 0.1, 1.0) for u in range(3)]
        build["partitions"] = [Partition("spruce", min_share=0.3), Partition("old", max_share=0.6)]
    strata = make_strata(st, groups, 1.0, 1e-9, args.disturbance > 0, cells=cells)
    model = build_lp(st, curves, Periods(2027, 10, 20), strata, **build)
    ours: dict[str, float] = {}
    bare: dict[str, float] = {}
    level: dict[str, float] = {}
    for solver in SOLVERS if n <= args.simplex_max else ("ipm",):
        # the fastest of a few alternating runs each (interior point; simplex once: 5-15x)
        ours[solver] = bare[solver] = np.inf
        for _ in range(args.repeat if solver == "ipm" else 1):
            t0 = time.perf_counter()
            m = build_lp(st, curves, Periods(2027, 10, 20), strata, **build)
            lp = solve_highs(m, t0, solver)
            ours[solver] = min(ours[solver], time.perf_counter() - t0)
            bare[solver] = min(bare[solver], bare_highs(model, solver)[0])
        level[solver] = lp.objective
    ratios = " ".join(f"{s} {ours[s]:.2f}/{bare[s]:.2f} s = {ours[s] / bare[s]:.2f}x" for s in ours)
    versus = f"simplex/ipm {bare['simplex'] / bare['ipm']:.1f}x, " if "simplex" in bare else ""
    agree = max(abs(v - level["ipm"]) / abs(level["ipm"]) for v in level.values())
    print(
        f"{n:,} strata{' regimes' if args.regimes else ''}{' units' if args.units else ''}"
        f"{f' disturbance {args.disturbance}' if args.disturbance else ''} {objective}: "
        f"{model.matrix.shape[1]:,} cols {model.matrix.shape[0]:,} rows; ours/bare {ratios}; "
        f"{versus}picks {lp_solver(model)}; level {level['ipm'] / 10:,.0f} m3/year "
        f"(solvers agree to {agree:.1e})",
        flush=True,
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--strata", type=int, nargs="+", default=[300, 1000, 3000, 10_000])
    ap.add_argument("--regimes", action="store_true", help="with transitions, thinnings, a choice")
    ap.add_argument("--disturbance", type=float, default=0.0, help="share lost a year")
    ap.add_argument("--objectives", nargs="+", default=["max-even-flow", "max-level"])
    ap.add_argument("--repeat", type=int, default=3, help="interior-point runs, fastest kept")
    ap.add_argument("--simplex-max", type=int, default=3000, help="no simplex above this size")
    ap.add_argument("--units", action="store_true", help="three units and two partitions")
    args = ap.parse_args()
    curves = CurveSet(
        ["spruce", "pine", "spruce_planted"],
        [
            ChapmanRichards(620.0, 0.028, 3.0, SiteScaling(21.0, 1.0, 0.3)),
            ChapmanRichards(480.0, 0.024, 2.8, SiteScaling(17.0, 1.0, 0.0)),
            ChapmanRichards(720.0, 0.032, 3.0, SiteScaling(21.0, 1.0, 0.3)),
        ],
    )
    for n in args.strata:
        for objective in args.objectives:
            one_case(curves, n, objective, args)


if __name__ == "__main__":
    main()
