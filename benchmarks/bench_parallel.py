"""Time sensitivity cases and Monte Carlo replicates as Dask tasks against the serial run.

Builds the synthetic region of ``bench_pipeline.py`` (square 6.25 ha stands, the sample's
species, curves, regimes and flow rules, aspatial, no LP bound) and times ``yieldscape.run``
on it, each variant in a fresh process, the variants interleaved round after round (medians
of ``--rounds``):

- *cases*: the base case and eight ``[[sensitivity]]`` cases (flow band, ending stock,
  disturbance rate, area cap), outputs written to a temporary directory; serial against
  ``--workers 2`` (``Parallel(workers=2)``: a local cluster of two processes started and shut
  down inside the timed call, as ``yieldscape run --workers 2`` does);
- *replicates*: the base case with disturbance (0.4% a year) and ``--replicates`` Monte
  Carlo replicates, no outputs written; the stage "Monte Carlo disturbance" timed serial and
  with ``--workers 1`` and ``2`` (the cluster is started before that stage; its start is in
  the whole run's time, given beside it).

Every variant's tables are checked equal to the serial run's (the wood flow of each case, the
Monte Carlo table).

    python benchmarks/bench_parallel.py --case-stands 20000 --mc-stands 100000 --replicates 100
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
import tomllib
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_pipeline import SCENARIO, build_region  # noqa: E402


def cases(area_ha: float) -> list[dict]:
    """Eight cases of about the base case's cost: flow band, ending stock, rate, area cap."""
    sets = [
        {"flow.band": 0.05},
        {"flow.band": 0.15},
        {"flow.band": 0.2},
        {"flow.ending_stock": 0.8},
        {"flow.ending_stock": 0.9},
        {"disturbance.annual_rate": 0.002},
        {"disturbance.annual_rate": 0.004},
        {"harvest.max_area_ha_per_period": 0.15 * area_ha},
    ]
    return [{"name": f"case-{k}", "set": s} for k, s in enumerate(sets, start=1)]


def scenario(gpkg: Path, n: int, with_cases: bool, replicates: int = 0):
    """bench_pipeline's synthetic scenario with the eight cases and ``replicates``."""
    from yieldscape.config import parse_scenario

    raw = tomllib.loads(SCENARIO.read_text())
    raw["inventory"]["path"] = str(gpkg)
    raw["inventory"].pop("from_raster", None)
    for section in ("landbase", "cover", "sensitivity", "units", "partitions"):
        raw.pop(section, None)
    raw["inventory"]["fields"].pop("unit", None)
    area = n * 6.25
    raw["harvest"] = {"priority": "oldest", "max_area_ha_per_period": area * 0.18}
    raw["flow"]["lp_bound"] = False
    raw["report"] = {"age_class_width_years": 20}
    raw["sensitivity"] = cases(area) if with_cases else []
    raw["disturbance"] = {"annual_rate": 0.004 if replicates else 0.0, "replicates": replicates}
    return parse_scenario(raw, base_dir=SCENARIO.parent, where=str(SCENARIO))


def one_run(gpkg: Path, n: int, kind: str, workers: int | None, replicates: int) -> dict:
    """One timed ``yieldscape.run`` (a child process): wall time, stage time, the tables."""
    import yieldscape

    scn = scenario(gpkg, n, kind == "cases", replicates if kind == "replicates" else 0)
    parallel = yieldscape.Parallel(workers=workers) if workers else None
    with tempfile.TemporaryDirectory(dir=gpkg.parent) as tmp:
        out = Path(tmp) / "out" if kind == "cases" else None
        t0 = time.perf_counter()
        result = yieldscape.run(scn, out, parallel=parallel)
        wall = time.perf_counter() - t0
    tables = {name: c.wood_flow.to_json() for name, c in result.cases.items()}
    if result.monte_carlo is not None:
        tables["monte_carlo"] = result.monte_carlo.to_json()
    return {
        "wall_s": wall,
        "mc_s": result.timings_s.get("Monte Carlo disturbance", 0.0),
        "tables": tables,
    }


def child(gpkg: Path, n: int, kind: str, workers: int, replicates: int) -> dict:
    proc = subprocess.run(
        [
            sys.executable,
            __file__,
            "--child",
            str(gpkg),
            str(n),
            kind,
            str(workers),
            str(replicates),
        ],
        capture_output=True,
        text=True,
    )
    if proc.returncode:
        raise RuntimeError(proc.stderr[-3000:])
    return json.loads(proc.stdout.strip().splitlines()[-1])


def compare(kind: str, gpkg: Path, n: int, variants: list[int], rounds: int, reps: int) -> dict:
    """Median wall and Monte Carlo stage times of each variant (0: serial), interleaved."""
    times: dict[int, list[dict]] = {w: [] for w in variants}
    reference = None
    for _ in range(rounds):
        for w in variants:
            row = child(gpkg, n, kind, w, reps)
            reference = reference or row["tables"]
            if row["tables"] != reference:
                raise AssertionError(f"{kind}, workers {w}: tables differ from the serial run")
            times[w].append(row)
            print(
                f"  {kind} workers={w or 'serial'}: {row['wall_s']:.1f} s wall, "
                f"{row['mc_s']:.1f} s Monte Carlo",
                flush=True,
            )
    return {
        w: {k: statistics.median(r[k] for r in rows) for k in ("wall_s", "mc_s")}
        for w, rows in times.items()
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--case-stands", type=int, default=20_000)
    ap.add_argument("--mc-stands", type=int, default=100_000)
    ap.add_argument("--replicates", type=int, default=100)
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--skip", choices=("cases", "replicates"))
    ap.add_argument("--child", nargs=5, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        gpkg, n, kind, workers, reps = args.child
        row = one_run(Path(gpkg), int(n), kind, int(workers) or None, int(reps))
        print(json.dumps(row))
        return
    with tempfile.TemporaryDirectory(dir=HERE) as tmp:
        lines = []
        if args.skip != "cases":
            gpkg = Path(tmp) / "cases.gpkg"
            build_region(args.case_stands, gpkg)
            t = compare("cases", gpkg, args.case_stands, [0, 2], args.rounds, 0)
            ratio = t[2]["wall_s"] / t[0]["wall_s"]
            lines.append(
                f"| 8 sensitivity cases + base, {args.case_stands:,} stands (whole run) | "
                f"{t[0]['wall_s']:.1f} | - | {t[2]['wall_s']:.1f} | {ratio:.2f}x |"
            )
        if args.skip != "replicates":
            gpkg = Path(tmp) / "mc.gpkg"
            build_region(args.mc_stands, gpkg)
            t = compare("replicates", gpkg, args.mc_stands, [0, 1, 2], args.rounds, args.replicates)
            lines.append(
                f"| {args.replicates} Monte Carlo replicates, {args.mc_stands:,} stands "
                f"(the stage) | {t[0]['mc_s']:.1f} | {t[1]['mc_s']:.1f} | {t[2]['mc_s']:.1f} | "
                f"{t[2]['mc_s'] / t[0]['mc_s']:.2f}x |"
            )
            lines.append(
                f"| the same, whole run (cluster start included) | {t[0]['wall_s']:.1f} | "
                f"{t[1]['wall_s']:.1f} | {t[2]['wall_s']:.1f} | "
                f"{t[2]['wall_s'] / t[0]['wall_s']:.2f}x |"
            )
    print("\n| work | serial s | --workers 1 s | --workers 2 s | workers 2 / serial |")
    print("|---|---:|---:|---:|---:|")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
