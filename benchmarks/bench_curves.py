"""Time yield-curve evaluation for 1M stands x 21 period boundaries, per family, and the
`yieldscape curves` report on the sample region.

    python benchmarks/bench_curves.py
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from yieldscape.growth import (
    ChapmanRichards,
    GompertzYield,
    LogisticYield,
    Schumacher,
    SiteScaling,
    StockGrowth,
    TableYield,
)
from yieldscape.projection import CurveSet

N, P = 1_000_000, 21
SITE = SiteScaling(20.0, 1.0, 0.3)
FAMILIES = {
    "chapman-richards": ChapmanRichards(600.0, 0.028, 3.0, SITE),
    "schumacher": Schumacher(1500.0, 90.0, SITE),
    "logistic": LogisticYield(500.0, 30.0, 0.07, SITE),
    "gompertz": GompertzYield(500.0, 6.0, 0.04, SITE),
    "stock-threshold": StockGrowth(0.08, 600.0, 60.0, 40.0, SITE),
    "table (3 classes)": TableYield(
        (20.0, 40.0, 60.0, 80.0, 100.0, 120.0),
        (
            (10, 60, 140, 220, 280, 310),
            (20, 110, 230, 330, 400, 440),
            (35, 170, 320, 440, 520, 560),
        ),
        (16.0, 20.0, 24.0),
    ),
}


def main() -> None:
    rng = np.random.default_rng(1)
    age0 = rng.integers(0, 200, N).astype(float)
    site = rng.uniform(16, 24, N)
    print(
        f"{N:,} stands x {P} ages = {N * P:,} evaluations, as the projection makes them: "
        "site terms once per stand, then one call per period"
    )
    print(f"  {'family':<18} {'exact formula':>14} {'projection':>11}")
    for name, curve in FAMILIES.items():
        sp = np.zeros(N, dtype=np.int32)
        t0 = time.perf_counter()
        for p in range(P):
            curve.volume_m3_ha(age0 + 10.0 * p, site)
        exact = time.perf_counter() - t0
        cs = CurveSet([name], [curve])
        t0 = time.perf_counter()
        terms = cs.site_terms(sp, site)
        for p in range(P):
            cs.volume_m3_ha(sp, age0 + 10.0 * p, terms=terms)
        tab = time.perf_counter() - t0
        print(f"  {name:<18} {exact:12.3f} s {tab:9.3f} s")
    mixed = CurveSet(list(FAMILIES), list(FAMILIES.values()))
    sp = rng.integers(0, len(FAMILIES), N).astype(np.int32)
    t0 = time.perf_counter()
    terms = mixed.site_terms(sp, site)
    for p in range(P):
        mixed.volume_m3_ha(sp, age0 + 10.0 * p, terms=terms)
    print(f"  {'all six, mixed':<18} {'':>14} {time.perf_counter() - t0:9.3f} s")

    scenario = Path(__file__).resolve().parents[1] / "sample_region" / "scenario.toml"
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        subprocess.run(
            [
                sys.executable,
                "-m",
                "yieldscape.cli.main",
                "curves",
                str(scenario),
                "--out",
                tmp,
                "-q",
            ],
            check=True,
        )
        print(
            f"yieldscape curves on the sample region: {time.perf_counter() - t0:.2f} s "
            "(whole command, with start-up)"
        )


if __name__ == "__main__":
    main()
