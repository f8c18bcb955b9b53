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

``--run`` times the whole run instead, as a user makes it: the same region written once with a
field UNIT (the three strips), and ``yieldscape.run`` with every output written on *single*
(the scenario of ``bench_pipeline.py``) and on *both* (the same with ``unit = "UNIT"``, three
``[[units]]`` and the two partitions as ``where`` rules), each run in a fresh process, the two
alternating; the wall and CPU seconds of ``yieldscape.run`` (CPU: the process's and its
children's, the figures' helper included), the stages of run.json, medians of the rounds:

    python benchmarks/bench_units.py --run --sizes 100000 --rounds 5 --markdown
"""

from __future__ import annotations

import argparse
import json
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_pipeline import SCENARIO, build_region, synthetic_raw, synthetic_scenario  # noqa: E402
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


# --run: the whole run, single flow against three units and two partitions
RUN_VARIANTS = ("single", "both")
UNIT_NAMES = ("u0", "u1", "u2")  # bench_pipeline.build_region(units=3): strips by stand id
PARTITIONS = (  # bench_units' two, as the scenario's where rules
    {"name": "spruce", "where": "species in ['spruce', 'spruce_planted']", "min_share": 0.3},
    {"name": "old", "where": "AGE > 100", "max_share": 0.6},
)
STAGES = (
    "read and check inventory",
    "project and schedule",
    "build output tables",
    "indicators",
    "write outputs",
)


def run_scenario(gpkg: Path, n: int, variant: str):
    """The scenario of ``bench_pipeline.py`` (*single*) or with the units and partitions."""
    from yieldscape.config import parse_scenario

    raw = synthetic_raw(gpkg, n)
    if variant == "both":
        raw["inventory"]["fields"]["unit"] = "UNIT"
        raw["units"] = [
            {"name": u, "policy": "even", "band": 0.1, "ending_stock": 1.0} for u in UNIT_NAMES
        ]
        raw["partitions"] = [dict(p) for p in PARTITIONS]
    return parse_scenario(raw, base_dir=SCENARIO.parent, where=str(SCENARIO))


def _cpu_s() -> float:
    """CPU seconds of this process and of its children that have been waited for."""
    return sum(
        u.ru_utime + u.ru_stime
        for u in (
            resource.getrusage(resource.RUSAGE_SELF),
            resource.getrusage(resource.RUSAGE_CHILDREN),
        )
    )


def run_once(gpkg: Path, n: int, variant: str, out: Path) -> dict:
    """One ``yieldscape.run`` of ``variant`` writing into ``out``: seconds, stages, level."""
    import pandas as pd

    import yieldscape

    scn = run_scenario(gpkg, n, variant)
    wall0, cpu0 = time.perf_counter(), _cpu_s()
    result = yieldscape.run(scn, out)
    wall, cpu = time.perf_counter() - wall0, _cpu_s() - cpu0
    stages = json.loads((out / "run.json").read_text())["timings_s"]
    row = {"wall_s": wall, "cpu_s": cpu, "steps": result.flow.steps}
    row.update({s: stages[s] for s in STAGES})
    if variant == "both":  # what the run wrote: three units, two partitions kept every period
        units = pd.read_csv(out / "management_units.csv")
        parts = pd.read_csv(out / "partitions.csv")
        row["units"] = sorted(units["unit"].astype(str))
        row["partitions"] = sorted(parts["partition"].unique())
        row["partitions_hold"] = bool(parts["holds"].all())
        row["level_m3_per_year"] = float(units["level_m3_per_year"].sum())
    else:
        row["level_m3_per_year"] = result.level_m3_per_year
    return row


def run_rounds(n: int, rounds: int, progress=print) -> dict:
    """``rounds`` rounds of the two variants, each run in a fresh process, alternating."""
    import os

    import yieldscape

    runs: dict[str, list[dict]] = {v: [] for v in RUN_VARIANTS}
    # the children import the yieldscape this process imported (a worktree's, not an
    # installed copy's)
    root = str(Path(yieldscape.__file__).resolve().parents[1])
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([root, os.environ.get("PYTHONPATH", "")])}
    with tempfile.TemporaryDirectory(dir=HERE) as tmp:
        gpkg = Path(tmp) / "region.gpkg"
        build_region(n, gpkg, units=3)
        for r in range(rounds):
            for v in RUN_VARIANTS if r % 2 == 0 else RUN_VARIANTS[::-1]:
                out = Path(tmp) / f"out-{v}-{r}"
                cmd = [sys.executable, __file__, "--run-one", v, str(gpkg), str(n), str(out)]
                proc = subprocess.run(cmd, capture_output=True, text=True, check=True, env=env)
                row = json.loads(proc.stdout.strip().splitlines()[-1])
                runs[v].append(row)
                progress(
                    f"round {r + 1} {v:>6}: wall {row['wall_s']:.2f} s, CPU {row['cpu_s']:.2f} s, "
                    f"project+schedule {row['project and schedule']:.2f} s "
                    f"({row['steps']} trials), level {row['level_m3_per_year']:,.0f} m3/year"
                )
    got = runs["both"][-1]
    if got["units"] != list(UNIT_NAMES) or got["partitions"] != sorted(
        p["name"] for p in PARTITIONS
    ):
        raise SystemExit(f"the both run wrote units {got['units']}, partitions {got['partitions']}")
    summary: dict = {"stands": n, "rounds": rounds, "partitions_hold": got["partitions_hold"]}
    for v, rows in runs.items():
        summary[v] = {
            k: statistics.median(row[k] for row in rows)
            for k in ("wall_s", "cpu_s", "steps", "level_m3_per_year", *STAGES)
        }
    for k in ("wall_s", "cpu_s", *STAGES):  # each round's both / single, median over rounds
        summary[f"ratio_{k}"] = statistics.median(
            b[k] / s[k] for b, s in zip(runs["both"], runs["single"], strict=True)
        )
    return summary


def print_run_markdown(s: dict) -> None:
    print(
        "\n| variant | wall s | CPU s | read + check s | project + schedule s | tables s | "
        "indicators s | write s | trials | level m3/year |"
    )
    print("|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    for v in RUN_VARIANTS:
        r = s[v]
        print(
            f"| {v} | {r['wall_s']:.2f} | {r['cpu_s']:.2f} | "
            + " | ".join(f"{r[k]:.2f}" for k in STAGES)
            + f" | {r['steps']:.0f} | {r['level_m3_per_year']:,.0f} |"
        )
    print(
        "| both / single | "
        + " | ".join(f"{s[f'ratio_{k}']:.2f}x" for k in ("wall_s", "cpu_s", *STAGES))
        + " | | |"
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[100_000])
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--markdown", action="store_true")
    ap.add_argument("--clock", choices=sorted(CLOCKS), default="wall")
    ap.add_argument("--run", action="store_true", help="time the whole run (single vs both)")
    ap.add_argument("--run-one", nargs=4, help=argparse.SUPPRESS)  # child: variant gpkg n out
    args = ap.parse_args()
    if args.run_one:
        v, gpkg, n, out = args.run_one
        print(json.dumps(run_once(Path(gpkg), int(n), v, Path(out))))
        return
    if args.run:
        for n in args.sizes:
            s = run_rounds(n, args.rounds, progress=lambda m: print(m, flush=True))
            print(
                f"{n:,} stands, medians of {args.rounds} rounds: both / single wall "
                f"{s['ratio_wall_s']:.2f}x, CPU {s['ratio_cpu_s']:.2f}x; partitions hold "
                f"in every period: {s['partitions_hold']}",
                flush=True,
            )
            if args.markdown:
                print_run_markdown(s)
        return
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
