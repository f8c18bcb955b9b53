"""Time the even-flow search against one recorded simulation of the same horizon.

Builds the synthetic region of ``bench_pipeline.py`` (square 6.25 ha stands, the sample's
species, curves, regimes and flow rules, aspatial, an area cap of 18% of the area per period)
and, on the stand arrays the pipeline would make of it, times side by side in one process:

- *one simulation*: one recorded horizon at the level the search found (what a run does once
  anyway, to keep the schedule);
- *the search*: ``find_even_flow`` as the run calls it (its trials and the final recorded run).

Their ratio is the search's cost in recorded simulations; the trial count is the number of
horizons the search simulated, the final one included. Medians of ``--rounds`` rounds.

    python benchmarks/bench_search.py                   # 100k and 1M stands
    python benchmarks/bench_search.py --sizes 100000 --rounds 5 --markdown
    python benchmarks/bench_search.py --keep /tmp/regions   # build each layer once, reuse it
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_pipeline import build_region, synthetic_scenario  # noqa: E402


def model(scn):
    """The stand arrays, curves, periods and harvest rules a run of ``scn`` schedules with."""
    import yieldscape
    from yieldscape.projection import CurveSet, Periods, StandArrays
    from yieldscape.reporting.indicators import boundary_index
    from yieldscape.schedule import HarvestRules

    inventory = yieldscape.check(scn)
    curves = CurveSet.from_scenario(scn)
    arrays = StandArrays.from_table(inventory.stands, scn, curves)
    periods = Periods.from_scenario(scn)
    h = scn.harvest
    snaps = tuple(boundary_index(periods, y) for y in scn.report.age_class_years)
    rules = HarvestRules(h.priority, h.max_area_ha_per_period, snapshots=snaps)
    return arrays, curves, periods, rules


def one_round(arrays, curves, periods, rules, flow_cfg) -> dict:
    """One search and one recorded simulation at its level, timed."""
    from yieldscape.policies import EvenFlow
    from yieldscape.schedule import find_even_flow, simulate

    band, ending = flow_cfg.band, flow_cfg.ending_stock
    t0 = time.perf_counter()
    flow = find_even_flow(arrays, curves, periods, rules, band, ending)
    search_s = time.perf_counter() - t0
    t0 = time.perf_counter()
    simulate(
        arrays,
        curves,
        periods,
        EvenFlow(flow.level_m3_per_period, band),
        rules,
        ending_stock=ending,
        record=True,
    )
    sim_s = time.perf_counter() - t0
    return {
        "search_s": search_s,
        "simulation_s": sim_s,
        "trials": flow.steps,
        "level_m3_per_year": flow.level_m3_per_year,
    }


def one_size(n: int, rounds: int, region: Path | None = None) -> dict:
    """Medians of ``rounds`` rounds at ``n`` stands (``region``: a layer built before)."""
    with tempfile.TemporaryDirectory(dir=HERE) as tmp:
        gpkg = region if region is not None else Path(tmp) / "region.gpkg"
        if not gpkg.exists():
            build_region(n, gpkg)
        scn = synthetic_scenario(gpkg, n)
        arrays, curves, periods, rules = model(scn)
    runs = [one_round(arrays, curves, periods, rules, scn.flow) for _ in range(rounds)]
    row = {k: statistics.median(r[k] for r in runs) for k in runs[0]}
    row["ratio"] = statistics.median(r["search_s"] / r["simulation_s"] for r in runs)
    row["stands"] = n
    return row


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[100_000, 1_000_000])
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--markdown", action="store_true")
    ap.add_argument("--keep", type=Path, help="keep each size's layer in this directory")
    args = ap.parse_args()
    rows = []
    for n in args.sizes:
        region = args.keep / f"region_{n}.gpkg" if args.keep else None
        row = one_size(n, args.rounds, region)
        rows.append(row)
        print(
            f"{n:>9,} stands: one recorded simulation {row['simulation_s']:.2f} s, search "
            f"{row['search_s']:.2f} s ({row['ratio']:.1f}x, {row['trials']:.0f} trial "
            f"horizons), level {row['level_m3_per_year']:,.0f} m3/year",
            flush=True,
        )
    if args.markdown:
        print(
            "\n| stands | one recorded simulation s | search s | search / simulation | "
            "trial horizons | level m3/year |"
        )
        print("|---:|---:|---:|---:|---:|---:|")
        for r in rows:
            print(
                f"| {r['stands']:,} | {r['simulation_s']:.2f} | {r['search_s']:.2f} | "
                f"{r['ratio']:.1f} | {r['trials']:.0f} | {r['level_m3_per_year']:,.0f} |"
            )


if __name__ == "__main__":
    main()
