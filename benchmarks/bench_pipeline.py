"""Time the pipeline's stages on synthetic regions of 10k, 100k and 1M stands.

Each size runs in its own process (so peak memory is per size): it builds a grid of square
stands (1-30 ha, shared edges) with random species, site index and ages, writes it as a
GeoPackage, then runs ``yieldscape.run`` on it (the sample's species and rules, aspatial, no
cover targets, no LP bound, no sensitivity cases) and reports its stage timings: reading and
checking, the projection and even-flow scheduling, building the output tables, the indicators,
and writing every output (GeoPackage with its map layers, CSV, figures, report). Beside it, the
floor: pyogrio reading the same stand layer (``use_arrow=True``) and writing it to a new
GeoPackage, each time in a fresh process (median of three), and the ratio of the run's total
to that floor; and the run's CPU seconds (user + system) in its own process and in the helper
that draws the figures, which move less than wall time with other jobs on the machine. Prints
one line per size and, with --markdown, a table for docs/performance.md.

    python benchmarks/bench_pipeline.py                 # 10k, 100k, 1M
    python benchmarks/bench_pipeline.py --sizes 10000 100000
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
SCENARIO = HERE.parent / "sample_region" / "scenario.toml"
SEED = 7
FLOOR_ROUNDS = 3


def build_region(n: int, path: Path, units: int = 0) -> None:
    """Write the synthetic region of ``n`` stands to ``path``; ``units`` > 0 adds a field
    UNIT naming ``units`` management units, strips of stands by id (``u0``, ``u1``, ...)."""
    import geopandas as gpd
    import pyogrio
    import shapely

    rng = np.random.default_rng(SEED)
    side = 250.0  # 6.25 ha squares
    per_row = int(np.ceil(np.sqrt(n)))
    i = np.arange(n)
    x = 400_000 + (i % per_row) * side
    y = 6_500_000 + (i // per_row) * side
    species = rng.choice(["spruce", "pine", "fir", "aspen"], n, p=[0.4, 0.3, 0.2, 0.1])
    old = rng.random(n) < 0.57
    age = np.where(old, rng.integers(91, 220, n), rng.integers(1, 40, n))
    age = np.where(species == "aspen", np.minimum(age, 140), age)
    frame = gpd.GeoDataFrame(
        {
            "STAND_NO": i + 1,
            "SPP": species,
            "SI_M": np.round(rng.uniform(15, 25, n), 1),
            "AGE": age,
            "ZONE": rng.choice(["highland", "valley", "lakeshore"], n),
        },
        geometry=shapely.box(x, y, x + side, y + side),
        crs="EPSG:32633",
    )
    if units:
        frame["UNIT"] = np.char.add("u", (i * units // n).astype(str))
    pyogrio.write_dataframe(frame, path, layer="stands", driver="GPKG", use_arrow=True)


def synthetic_scenario(gpkg: Path, n: int):
    """The sample scenario's species, curves and rules over a synthetic layer, no netdown."""
    from yieldscape.config import parse_scenario

    return parse_scenario(synthetic_raw(gpkg, n), base_dir=SCENARIO.parent, where=str(SCENARIO))


def synthetic_raw(gpkg: Path, n: int) -> dict:
    """The TOML tables of :func:`synthetic_scenario`, to change before parsing."""
    import tomllib

    raw = tomllib.loads(SCENARIO.read_text())
    raw["inventory"]["path"] = str(gpkg)
    raw["inventory"].pop("from_raster", None)  # the sample's rasters cover the sample only
    for section in ("landbase", "cover", "sensitivity", "units", "partitions"):
        raw.pop(section, None)
    raw["inventory"]["fields"].pop("unit", None)  # one regional flow (bench_units: units)
    raw["harvest"] = {"priority": "oldest", "max_area_ha_per_period": n * 6.25 * 0.18}
    raw["flow"]["lp_bound"] = False
    raw["report"] = {"age_class_width_years": 20}  # figures, report, map layers; no rasters
    return raw


def floor_once(gpkg: Path) -> float:
    """Seconds for pyogrio to read the stand layer of ``gpkg`` and write it to a new
    GeoPackage beside it (arrow on both sides, as the tool reads and writes), imports excluded."""
    import pyogrio

    out = gpkg.with_name("floor.gpkg")
    out.unlink(missing_ok=True)
    t0 = time.perf_counter()
    frame = pyogrio.read_dataframe(gpkg, layer="stands", use_arrow=True)
    pyogrio.write_dataframe(frame, out, layer="stands", driver="GPKG", use_arrow=True)
    seconds = time.perf_counter() - t0
    out.unlink()
    return seconds


def floor(gpkg: Path, rounds: int = FLOOR_ROUNDS) -> float:
    """Median over ``rounds`` fresh processes of :func:`floor_once`."""
    times = []
    for _ in range(rounds):
        proc = subprocess.run(
            [sys.executable, __file__, "--floor", str(gpkg)],
            capture_output=True,
            text=True,
            check=True,
        )
        times.append(float(proc.stdout.strip().splitlines()[-1]))
    return statistics.median(times)


def _cpu(who: int) -> float:
    """User plus system CPU seconds of this process or of its ended children so far."""
    usage = resource.getrusage(who)
    return usage.ru_utime + usage.ru_stime


def one_size(n: int) -> dict:
    import yieldscape

    with tempfile.TemporaryDirectory(dir=HERE) as tmp:
        tmp = Path(tmp)
        gpkg = tmp / "region.gpkg"
        build_region(n, gpkg)
        floor_s = floor(gpkg)
        scn = synthetic_scenario(gpkg, n)
        own0, kids0 = _cpu(resource.RUSAGE_SELF), _cpu(resource.RUSAGE_CHILDREN)
        result = yieldscape.run(scn, tmp / "out")
        own, kids = _cpu(resource.RUSAGE_SELF) - own0, _cpu(resource.RUSAGE_CHILDREN) - kids0
        # the stage timings with the writing, as run.json records them
        st = json.loads((tmp / "out" / "run.json").read_text())["timings_s"]
        t = {
            "read_check_s": st["read and check inventory"],
            "project_schedule_s": st["project and schedule"],
            "tables_s": st["build output tables"],
            "indicators_s": st["indicators"],
            "write_s": st["write outputs"],
        }
        t["total_s"] = sum(t.values())
        t["floor_s"] = floor_s
        t["cpu_s"], t["helper_cpu_s"] = own, kids  # user + system; the helper draws figures
        t["ratio"] = t["total_s"] / floor_s
        t["search_steps"] = result.flow.steps
        t["harvest_rows"] = len(result.harvests)
        t["peak_rss_gb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024**2
        t["stands"] = n
        t["periods"] = scn.scenario.periods
        return t


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000, 1_000_000])
    ap.add_argument("--one", type=int, help=argparse.SUPPRESS)  # child process
    ap.add_argument("--floor", type=Path, help=argparse.SUPPRESS)  # child process
    ap.add_argument("--markdown", action="store_true")
    args = ap.parse_args()
    if args.floor:
        print(floor_once(args.floor))
        return
    if args.one:
        print(json.dumps(one_size(args.one)))
        return
    rows = []
    for n in args.sizes:
        proc = subprocess.run(
            [sys.executable, __file__, "--one", str(n)], capture_output=True, text=True, check=True
        )
        row = json.loads(proc.stdout.strip().splitlines()[-1])
        rows.append(row)
        print(
            f"{n:>9,} stands x {row['periods']} periods: read+check {row['read_check_s']:.2f} s, "
            f"project+schedule {row['project_schedule_s']:.2f} s ({row['search_steps']} "
            f"search steps), tables {row['tables_s']:.2f} s, indicators "
            f"{row['indicators_s']:.2f} s, write {row['write_s']:.2f} s "
            f"({row['harvest_rows']:,} harvest rows), total {row['total_s']:.1f} s, "
            f"peak RSS {row['peak_rss_gb']:.2f} GB; pyogrio read + write {row['floor_s']:.2f} s, "
            f"ratio {row['ratio']:.1f}x; CPU {row['cpu_s']:.1f} s (helper "
            f"{row['helper_cpu_s']:.1f} s), load {os.getloadavg()[0]:.1f}",
            flush=True,
        )
    if args.markdown:
        print(
            "\n| stands | read + check s | project + schedule s | tables s | indicators s | "
            "write s | total s | peak RSS GB | pyogrio read + write s | total / floor | "
            "CPU s (helper) |"
        )
        print("|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
        for r in rows:
            print(
                f"| {r['stands']:,} | {r['read_check_s']:.2f} | {r['project_schedule_s']:.2f} |"
                f" {r['tables_s']:.2f} | {r['indicators_s']:.2f} | {r['write_s']:.2f} |"
                f" {r['total_s']:.1f} | {r['peak_rss_gb']:.2f} | {r['floor_s']:.2f} |"
                f" {r['ratio']:.1f}x | {r['cpu_s']:.1f} ({r['helper_cpu_s']:.1f}) |"
            )


if __name__ == "__main__":
    main()
