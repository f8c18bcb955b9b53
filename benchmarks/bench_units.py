"""Time the flow search with management units and partitions against the single flow.

Builds the synthetic region of ``bench_pipeline.py`` (square 6.25 ha stands, the sample's
species, curves, regimes and flow rules, aspatial, an area cap of 18% of the area per period)
and, on the stand arrays a run makes of it, times side by side in one process (medians of
``--rounds`` rounds, the variants interleaved):

- *single*: ``find_even_flow``, one regional even flow;
- *units*: three management units (the stands in three strips by stand id), each its own even
  flow (band 0.1, ending stock 1.0), ``find_unit_flows``;
- *partitions*: the single flow with two partitions (the spruce codes at least 30% of each
  period's harvest; the stands older than 100 years at the start at most 60%);
- *both*: the three units and the two partitions.

    python benchmarks/bench_units.py --sizes 100000 --rounds 3 --markdown
    python benchmarks/bench_units.py --sizes 100000 --rounds 3 --markdown --clock cpu

``--clock cpu`` times the process's CPU seconds instead of the wall clock: on a machine other
jobs share, what the search itself costs (it runs on one thread).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_pipeline import build_region, synthetic_scenario  # noqa: E402
from bench_search import model  # noqa: E402

VARIANTS = ("single", "units", "partitions", "both")


def partitions_of(arrays, curves):
    """The two partitions: spruce codes >= 30%, stands older than 100 years <= 60%."""
    from yieldscape.schedule.partitions import PartitionRules

    n, C = arrays.n, len(curves.codes)
    spruce = np.array(["spruce" in c for c in curves.codes])
    member = np.zeros((n, C, 2), dtype=bool)
    member[:, :, 0] = spruce[None, :]
    member[:, :, 1] = (arrays.age_years > 100)[:, None]
    nan = np.nan
    return PartitionRules(
        ("spruce", "old"),
        member,
        np.array([0.3, nan]),
        np.array([nan, 0.6]),
        np.array([nan, nan]),
        np.array([nan, nan]),
    )


CLOCKS = {"wall": time.perf_counter, "cpu": time.process_time}


def one_round(arrays, curves, periods, rules, flow_cfg, clock=time.perf_counter) -> dict:
    from yieldscape.schedule import find_even_flow
    from yieldscape.schedule.units import UnitPolicy, find_unit_flows

    band, ending = flow_cfg.band, flow_cfg.ending_stock
    unit = np.minimum(3 * arrays.id_rank // arrays.n, 2).astype(np.int64)
    policies = [UnitPolicy(f"u{k}", "even", band, ending) for k in range(3)]
    parts = partitions_of(arrays, curves)
    out = {}
    for v in VARIANTS:
        r = replace(
            rules,
            units=unit if v in ("units", "both") else None,
            partitions=parts if v in ("partitions", "both") else None,
        )
        t0 = clock()
        if r.units is None:
            flow = find_even_flow(arrays, curves, periods, r, band, ending)
            level, steps = flow.level_m3_per_period, flow.steps
        else:
            found = find_unit_flows(arrays, curves, periods, r, policies)
            level, steps = float(found.levels_m3.sum()), found.steps
        out[f"{v}_s"] = clock() - t0
        out[f"{v}_trials"] = steps
        out[f"{v}_level"] = level / periods.period_years
    return out


def one_size(n: int, rounds: int, clock=time.perf_counter) -> dict:
    with tempfile.TemporaryDirectory(dir=HERE) as tmp:
        gpkg = Path(tmp) / "region.gpkg"
        build_region(n, gpkg)
        scn = synthetic_scenario(gpkg, n)
        arrays, curves, periods, rules = model(scn)
    runs = [one_round(arrays, curves, periods, rules, scn.flow, clock) for _ in range(rounds)]
    row = {k: statistics.median(r[k] for r in runs) for k in runs[0]}
    for v in VARIANTS[1:]:
        row[f"{v}_ratio"] = statistics.median(r[f"{v}_s"] / r["single_s"] for r in runs)
    row["stands"] = n
    return row


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[100_000])
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--markdown", action="store_true")
    ap.add_argument("--clock", choices=sorted(CLOCKS), default="wall")
    args = ap.parse_args()
    rows = [one_size(n, args.rounds, CLOCKS[args.clock]) for n in args.sizes]
    for r in rows:
        print(
            f"{r['stands']:,} stands: "
            + ", ".join(
                f"{v} {r[f'{v}_s']:.2f} s ({r[f'{v}_trials']:.0f} trials, "
                f"{r[f'{v}_level']:,.0f} m3/year)"
                for v in VARIANTS
            ),
            flush=True,
        )
    if args.markdown:
        print("\n| stands | variant | search s | x single | trial horizons | level m3/year |")
        print("|---:|---|---:|---:|---:|---:|")
        for r in rows:
            for v in VARIANTS:
                ratio = 1.0 if v == "single" else r[f"{v}_ratio"]
                print(
                    f"| {r['stands']:,} | {v} | {r[f'{v}_s']:.2f} | {ratio:.2f} | "
                    f"{r[f'{v}_trials']:.0f} | {r[f'{v}_level']:,.0f} |"
                )


if __name__ == "__main__":
    main()
