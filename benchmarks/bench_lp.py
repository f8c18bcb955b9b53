"""Build and solve the harvest LP (Model II) with 1k and 10k strata x 20 periods.

python benchmarks/bench_lp.py [--strata 1000 10000]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from yieldscape.growth import ChapmanRichards, SiteScaling
from yieldscape.projection import CurveSet, Periods, StandArrays
from yieldscape.schedule.lp import make_strata, solve_lp


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--strata", type=int, nargs="+", default=[1000, 10_000])
    args = ap.parse_args()
    curves = CurveSet(
        ["spruce", "pine"],
        [
            ChapmanRichards(620.0, 0.028, 3.0, SiteScaling(21.0, 1.0, 0.3)),
            ChapmanRichards(480.0, 0.024, 2.8, SiteScaling(17.0, 1.0, 0.0)),
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
        # one stratum a stand (ages differ); regeneration groups by species x 1-m site class
        strata = make_strata(st, rng.integers(0, 3, n), 1.0, 1e-9)
        t0 = time.perf_counter()
        lp = solve_lp(st, curves, Periods(2027, 10, 20), strata, "max-even-flow", "even", 0.1, 1.0)
        print(
            f"{lp.strata:,} strata x 20 periods: {lp.columns:,} columns, {lp.rows:,} rows, "
            f"{lp.status}, built and solved in {time.perf_counter() - t0:.1f} s "
            f"(level {lp.objective / 10:,.0f} m3/year)",
            flush=True,
        )


if __name__ == "__main__":
    main()
