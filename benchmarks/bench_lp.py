"""Build and solve the harvest LP (Model II) with 1k and 10k strata x 20 periods, plain and with
management regimes (spruce regrowing as a thinned planted code, pine a choice between itself
and that code).

python benchmarks/bench_lp.py [--strata 1000 10000] [--regimes]
"""

from __future__ import annotations

import argparse
import time
from dataclasses import replace

import numpy as np

from yieldscape.growth import ChapmanRichards, SiteScaling
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.regimes import Regimes
from yieldscape.schedule.lp import make_strata, solve_lp


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


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--strata", type=int, nargs="+", default=[1000, 10_000])
    ap.add_argument("--regimes", action="store_true", help="with transitions, thinnings, a choice")
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
        if args.regimes:
            st = with_regimes(st)
        # one stratum a stand (ages differ); regeneration groups by code x 1-m site class
        strata = make_strata(st, rng.integers(0, 3, n), 1.0, 1e-9)
        t0 = time.perf_counter()
        lp = solve_lp(st, curves, Periods(2027, 10, 20), strata, "max-even-flow", "even", 0.1, 1.0)
        print(
            f"{lp.strata:,} strata x 20 periods{' with regimes' if args.regimes else ''}: "
            f"{lp.columns:,} columns, {lp.rows:,} rows, {lp.status}, built and solved in "
            f"{time.perf_counter() - t0:.1f} s (level {lp.objective / 10:,.0f} m3/year)",
            flush=True,
        )


if __name__ == "__main__":
    main()
