"""GeoParquet against the GeoPackage: reading a stand layer, and the netdown partition by
partition (national scale).

*read*: the synthetic region of bench_pipeline.py (square 6.25 ha stands with five attributes)
written once as a GeoPackage (pyogrio, Arrow), one GeoParquet file and a partitioned dataset
of eight files (geopandas, WKB), and that file and dataset again through our writer (the
native polygon encoding of GeoParquet 1.1); then each is read through
``yieldscape.io.vector.read_layer`` (the run's reader) in a fresh process, the formats
alternating for ``--rounds`` rounds; medians of the read times (imports excluded) and of
the processes' peak RSS.

*netdown*: the same region with ``area_ha`` as a partitioned dataset, netted down by a rock
rule, buffered reserve discs, a slope raster and a percent step: once in memory
(``apply_netdown`` on the whole layer) and once partition by partition
(``netdown_by_partition`` over ``iter_partitions``, remaining geometry dropped), each in a
fresh process: time and peak RSS.

*run*: the region as a partitioned dataset run end to end through ``yieldscape.run`` with
bench_pipeline.py's scenario (no netdown; ``--format`` of the layers written), in a fresh
process: stage timings and peak RSS.

    python benchmarks/bench_parquet.py read --stands 1000000 --rounds 5
    python benchmarks/bench_parquet.py netdown --stands 1000000 --parts 8
    python benchmarks/bench_parquet.py run --stands 2000000 --parts 16
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
# the yieldscape of this checkout, whichever one is installed (the files written here by our
# writer must come from the reader's own checkout)
if str(HERE.parent) not in sys.path:
    sys.path.insert(0, str(HERE.parent))
FORMATS = ("gpkg", "parquet", "dataset", "parquet_ours", "parquet_native", "dataset_native")
FORMATS += ("parquet_native_1thread", "gpkg_overlap", "gpkg_no_arrow")  # not used by a run


def _rss_gb() -> float:
    """This process's peak RSS [GB]: VmHWM, the peak of its own memory map. getrusage's
    ru_maxrss would not do in a child: Linux carries the parent's peak across fork and exec."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024**2
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024**2


def build(n: int, tmp: Path, parts: int) -> dict[str, Path]:
    """The region as a GeoPackage, one GeoParquet file and a dataset of ``parts`` files
    written by geopandas (WKB geometry, what most writers write), the file written by our
    writer (``write_geoparquet``: WKB, zstd, row groups), and the same file and dataset in
    the native polygon encoding (``output.geoparquet_geometry = "native"``)."""
    import pyogrio

    from yieldscape.io.geoparquet import write_geoparquet

    sys.path.insert(0, str(HERE))
    from bench_pipeline import build_region

    paths = {"gpkg": tmp / "region.gpkg", "parquet": tmp / "region.parquet"}
    paths["gpkg_no_arrow"] = paths["gpkg_overlap"] = paths["gpkg"]
    paths["dataset"] = tmp / "region"
    paths["parquet_ours"] = tmp / "ours.parquet"
    paths["parquet_native"] = paths["parquet_native_1thread"] = tmp / "native.parquet"
    paths["dataset_native"] = tmp / "native"
    build_region(n, paths["gpkg"])
    frame = pyogrio.read_dataframe(paths["gpkg"], layer="stands", use_arrow=True)
    frame.to_parquet(paths["parquet"])
    write_geoparquet(paths["parquet_ours"], frame)
    write_geoparquet(paths["parquet_native"], frame, native=True)
    paths["dataset"].mkdir()
    paths["dataset_native"].mkdir()
    ends = np.linspace(0, n, parts + 1).astype(int)
    for k in range(parts):
        part = frame.iloc[ends[k] : ends[k + 1]]
        part.to_parquet(paths["dataset"] / f"part-{k:03d}.parquet")
        write_geoparquet(paths["dataset_native"] / f"part-{k:03d}.parquet", part, native=True)
    return paths


def read_once(path: Path, how: str) -> dict:
    """Child process: read the layer as a run does, or one of the variants for scale that the
    run does not use (``gpkg_no_arrow``: pyogrio without Arrow; ``gpkg_overlap``: the
    GeoPackage's Arrow batches read by GDAL on a thread while ``shapely.from_wkb`` builds the
    previous one; ``parquet_native_1thread``: our reader with its geometry built on one
    thread); seconds, CPU seconds (all threads) and peak RSS."""
    import pyogrio

    import yieldscape.io.geoparquet as geoparquet
    from yieldscape.io.vector import read_layer

    if how == "parquet_native_1thread":
        geoparquet.THREADS = 1
    t0, cpu0 = time.perf_counter(), time.process_time()
    if how == "gpkg_no_arrow":
        frame = pyogrio.read_dataframe(path, layer="stands", use_arrow=False)
    elif how == "gpkg_overlap":
        frame = _gpkg_overlapped(path)
    else:
        frame, _ = read_layer(path, "stands" if path.suffix == ".gpkg" else None)
    seconds, cpu = time.perf_counter() - t0, time.process_time() - cpu0
    return {"s": seconds, "cpu_s": cpu, "rows": len(frame), "rss_gb": _rss_gb()}


def _gpkg_overlapped(path: Path, batch: int = 65_536):  # noqa: ANN202
    """The GeoPackage through ``pyogrio.open_arrow``: GDAL reads batch k+1 on a thread (it
    releases the GIL) while ``shapely.from_wkb`` (which holds it) builds batch k."""
    from concurrent.futures import ThreadPoolExecutor

    import geopandas as gpd
    import pyarrow as pa
    import pyogrio
    import shapely

    geoms, tables = [], []
    with pyogrio.open_arrow(path, layer="stands", batch_size=batch, use_pyarrow=True) as (
        meta,
        reader,
    ):
        column = meta["geometry_name"] or "wkb_geometry"
        with ThreadPoolExecutor(1) as ahead:
            coming = ahead.submit(reader.read_next_batch)
            while True:
                try:
                    got = coming.result()
                except StopIteration:
                    break
                coming = ahead.submit(reader.read_next_batch)
                wkb = got.column(column).to_numpy(zero_copy_only=False)
                geoms.append(shapely.from_wkb(wkb))
                tables.append(got.drop_columns([column]))
    frame = pa.Table.from_batches(tables).to_pandas()
    geometry = gpd.GeoSeries(np.concatenate(geoms), crs=meta["crs"])
    return gpd.GeoDataFrame(frame, geometry=geometry.values)


def _child(*args: str) -> dict:
    # the yieldscape of this checkout, whichever one is installed
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(HERE.parent), *sys.path[1:]])}
    proc = subprocess.run(
        [sys.executable, __file__, *args], capture_output=True, text=True, check=True, env=env
    )
    return json.loads(proc.stdout.strip().splitlines()[-1])


def read_bench(n: int, rounds: int, parts: int = 8) -> dict:
    with tempfile.TemporaryDirectory(dir=HERE) as tmp:
        paths = build(n, Path(tmp), parts)
        size = {
            k: sum(f.stat().st_size for f in ([p] if p.is_file() else p.iterdir()))
            for k, p in paths.items()
        }
        got: dict[str, list[dict]] = {k: [] for k in FORMATS}
        for _ in range(rounds):
            for k in FORMATS:
                got[k].append(_child("--read", str(paths[k]), k))
        assert all(r["rows"] == n for rows in got.values() for r in rows)
    row = {"stands": n, "rounds": rounds}
    for k in FORMATS:
        row[f"{k}_s"] = statistics.median(r["s"] for r in got[k])
        row[f"{k}_cpu_s"] = statistics.median(r["cpu_s"] for r in got[k])
        row[f"{k}_rss_gb"] = statistics.median(r["rss_gb"] for r in got[k])
        row[f"{k}_mb"] = size[k] / 1e6
    row["speedup_file"] = row["gpkg_s"] / row["parquet_s"]
    row["speedup_dataset"] = row["gpkg_s"] / row["dataset_s"]
    row["speedup_native"] = row["gpkg_s"] / row["parquet_native_s"]
    row["speedup_native_dataset"] = row["gpkg_s"] / row["dataset_native_s"]
    return row


# ----------------------------------------------------------------------------- netdown
def netdown_inputs(n: int, tmp: Path, parts: int) -> Path:
    """The region with area_ha as a dataset of ``parts`` files, the reserves and the slope
    raster beside it."""
    import geopandas as gpd
    import shapely

    paths = build(n, tmp, parts)
    for file in sorted(paths["dataset"].iterdir()):
        part = gpd.read_parquet(file)
        part["area_ha"] = 6.25
        part["COVER"] = np.where(part["STAND_NO"] % 31 == 0, "rock", "forest")
        part.to_parquet(file)
    rng = np.random.default_rng(15)
    per_row = int(np.ceil(np.sqrt(n)))
    x0, y0, extent = 400_000.0, 6_500_000.0, per_row * 250.0
    k = max(1, n // 300)
    centre = rng.uniform([x0, y0], [x0 + extent, y0 + extent], (k, 2))
    reserves = gpd.GeoDataFrame(
        {"RID": np.arange(k)},
        geometry=shapely.buffer(shapely.points(centre), rng.uniform(50, 600, k)),
        crs="EPSG:32633",
    )
    reserves.to_parquet(tmp / "reserves.parquet")
    cells = min(10_000, int(extent / 25))
    from bench_landbase import write_slope  # the same raster, beside this script

    write_slope(tmp / "slope.tif", x0, y0, extent, cells)
    return paths["dataset"]


def netdown_steps(tmp: Path) -> tuple:
    from yieldscape.config import NetdownStep

    steps = (
        NetdownStep(1, "where", "rock", where="COVER in ['rock']"),
        NetdownStep(2, "layer", "reserves", layer=tmp / "reserves.parquet", buffer_m=30.0),
        NetdownStep(3, "raster", "steep", raster=tmp / "slope.tif", above=40.0),
        NetdownStep(4, "percent", "roads", percent=3.0),
    )
    return steps


def netdown_once(dataset: Path, how: str) -> dict:
    """Child process: the netdown in memory or partition by partition."""
    import pandas as pd

    from yieldscape.io.geoparquet import iter_partitions
    from yieldscape.io.readers import read_overlay, read_step_raster
    from yieldscape.landbase import apply_netdown, netdown_by_partition

    steps = netdown_steps(dataset.parent)

    def fields(frame):  # noqa: ANN001, ANN202
        return {"COVER": frame["COVER"]}

    t0 = time.perf_counter()
    if how == "memory":
        parts = list(iter_partitions(dataset))
        stands = pd.concat(parts, ignore_index=True)
        del parts
        nd = apply_netdown(stands, steps, fields(stands), read_overlay, read_step_raster)
    else:
        nd = netdown_by_partition(
            iter_partitions(dataset),
            steps,
            fields,
            read_overlay,
            read_step_raster,
            keep_geometry=False,
        )
    seconds = time.perf_counter() - t0
    return {
        "s": seconds,
        "rss_gb": _rss_gb(),
        "harvestable_ha": float(nd.harvestable_ha.sum()),
        "removed_ha": nd.removed_ha.sum(axis=1).tolist(),
    }


def netdown_bench(n: int, parts: int) -> dict:
    with tempfile.TemporaryDirectory(dir=HERE) as tmp:
        dataset = netdown_inputs(n, Path(tmp), parts)
        mem = _child("--netdown", str(dataset), "memory")
        part = _child("--netdown", str(dataset), "partitions")
    assert mem["removed_ha"] == part["removed_ha"], (mem, part)
    return {
        "stands": n,
        "parts": parts,
        "memory_s": mem["s"],
        "memory_rss_gb": mem["rss_gb"],
        "partitions_s": part["s"],
        "partitions_rss_gb": part["rss_gb"],
        "harvestable_ha": part["harvestable_ha"],
    }


# ----------------------------------------------------------------------------- end to end
def run_once(n: int, parts: int, fmt: str) -> dict:
    """Child process: bench_pipeline's synthetic region as a partitioned GeoParquet dataset
    run end to end (its scenario, output in ``fmt``); stage timings and peak RSS."""
    from dataclasses import replace

    from yieldscape import run
    from yieldscape.config import OutputConfig

    sys.path.insert(0, str(HERE))
    from bench_pipeline import synthetic_scenario

    with tempfile.TemporaryDirectory(dir=HERE) as tmp:
        paths = build(n, Path(tmp), parts)
        paths["gpkg"].unlink()
        paths["parquet"].unlink()
        scn = synthetic_scenario(paths["dataset"], n)
        scn = replace(
            scn,
            inventory=replace(scn.inventory, layer=None),
            output=OutputConfig(fmt),
        )
        t0 = time.perf_counter()
        result = run(scn, Path(tmp) / "out")
        total = time.perf_counter() - t0
        st = json.loads((Path(tmp) / "out" / "run.json").read_text())["timings_s"]
    return {
        "stands": n,
        "parts": parts,
        "format": fmt,
        "total_s": total,
        "rss_gb": _rss_gb(),
        "stages_s": st,
        "harvest_rows": len(result.harvests),
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("what", nargs="?", choices=("read", "netdown", "run"), default="read")
    ap.add_argument("--format", choices=("gpkg", "geoparquet"), default="geoparquet")
    ap.add_argument("--stands", type=int, default=1_000_000)
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--parts", type=int, default=8)
    ap.add_argument("--read", nargs=2, help=argparse.SUPPRESS)  # child process
    ap.add_argument("--netdown", nargs=2, help=argparse.SUPPRESS)  # child process
    ap.add_argument("--run", action="store_true", help=argparse.SUPPRESS)  # child process
    args = ap.parse_args()
    if args.run:
        print(json.dumps(run_once(args.stands, args.parts, args.format)))
        return
    if args.what == "run":
        r = _child(
            "--run",
            "--stands",
            str(args.stands),
            "--parts",
            str(args.parts),
            "--format",
            args.format,
        )
        print(json.dumps(r))
        return
    if args.read:
        print(json.dumps(read_once(Path(args.read[0]), args.read[1])))
        return
    if args.netdown:
        print(json.dumps(netdown_once(Path(args.netdown[0]), args.netdown[1])))
        return
    if args.what == "read":
        r = read_bench(args.stands, args.rounds, args.parts)
        print(json.dumps(r))
        print(
            "\n| stands | layer | size MB | read s (median) | CPU s | peak RSS GB |"
            " GeoPackage / this |"
        )
        print("|---:|---|---:|---:|---:|---:|---:|")
        names = {
            "gpkg": "GeoPackage (pyogrio, Arrow)",
            "parquet": "GeoParquet, one file",
            "dataset": f"GeoParquet, {args.parts} files",
            "parquet_ours": "GeoParquet WKB (our writer: zstd, row groups), one file",
            "parquet_native": "GeoParquet native polygons (our writer), one file",
            "dataset_native": f"GeoParquet native polygons (our writer), {args.parts} files",
            "parquet_native_1thread": "the same, one file, geometry on one thread (not used)",
            "gpkg_overlap": "GeoPackage, GDAL reading ahead on a thread (not used)",
            "gpkg_no_arrow": "GeoPackage (pyogrio without Arrow, not used)",
        }
        for k in FORMATS:
            print(
                f"| {r['stands']:,} | {names[k]} | {r[k + '_mb']:.0f} | {r[k + '_s']:.2f} |"
                f" {r[k + '_cpu_s']:.2f} | {r[k + '_rss_gb']:.2f} |"
                f" {r['gpkg_s'] / r[k + '_s']:.1f}x |"
            )
    else:
        r = netdown_bench(args.stands, args.parts)
        print(json.dumps(r))
        print("\n| stands | netdown | time s | peak RSS GB |")
        print("|---:|---|---:|---:|")
        print(f"| {r['stands']:,} | in memory | {r['memory_s']:.1f} | {r['memory_rss_gb']:.2f} |")
        print(
            f"| {r['stands']:,} | {r['parts']} partitions, geometry dropped |"
            f" {r['partitions_s']:.1f} | {r['partitions_rss_gb']:.2f} |"
        )


if __name__ == "__main__":
    main()
