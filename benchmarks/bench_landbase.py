"""Time the land base netdown: 100k stands against 20k stream segments and a 10k x 10k raster.

Builds a synthetic region (square stands of 6.25 ha, random meandering stream segments with
three classes, a smooth slope raster of 10,000 x 10,000 cells), then times `yieldscape.check`
with and without the netdown steps; the difference is the netdown.

    python benchmarks/bench_landbase.py [--stands 100000] [--segments 20000] [--cells 10000]
"""

from __future__ import annotations

import argparse
import json
import resource
import tempfile
import time
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyogrio
import rasterio
import shapely
from rasterio.transform import from_origin

HERE = Path(__file__).resolve().parent
SCENARIO = HERE.parent / "sample_region" / "scenario.toml"
SEED = 11


def write_slope(path: Path, x0: float, y0: float, extent: float, cells: int) -> None:
    """A square slope raster [%] over (x0, y0) .. (x0 + extent, y0 + extent), EPSG:32633:
    25 +- 20 in smooth waves, ``cells`` a side."""

    yy = np.linspace(0, 6 * np.pi, cells, dtype=np.float32)
    slope = (25 + 20 * np.sin(yy)[:, None] * np.cos(yy)[None, :]).astype(np.float32)
    cell = extent / cells
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=cells,
        height=cells,
        count=1,
        dtype="float32",
        crs="EPSG:32633",
        tiled=True,
        transform=from_origin(x0, y0 + extent, cell, cell),
    ) as dst:
        dst.write(slope, 1)


def build(tmp: Path, n: int, segments: int, cells: int) -> tuple[Path, Path, Path]:
    rng = np.random.default_rng(SEED)
    side = 250.0
    per_row = int(np.ceil(np.sqrt(n)))
    i = np.arange(n)
    x0, y0 = 400_000.0, 6_500_000.0
    x = x0 + (i % per_row) * side
    y = y0 + (i // per_row) * side
    species = rng.choice(["spruce", "pine", "fir", "aspen"], n, p=[0.4, 0.3, 0.2, 0.1])
    stands = gpd.GeoDataFrame(
        {
            "STAND_NO": i + 1,
            "SPP": species,
            "SI_M": np.round(rng.uniform(15, 25, n), 1),
            "AGE": rng.integers(1, 200, n),
            "ZONE": "valley",
            "COVER": rng.choice(["forest", "rock"], n, p=[0.97, 0.03]),
        },
        geometry=shapely.box(x, y, x + side, y + side),
        crs="EPSG:32633",
    )
    gpkg = tmp / "region.gpkg"
    pyogrio.write_dataframe(stands, gpkg, layer="stands", use_arrow=True)
    extent = per_row * side
    # meandering segments of 8 vertices, ~600 m long
    start = rng.uniform([x0, y0], [x0 + extent, y0 + extent], (segments, 2))
    steps = rng.normal(0, 60, (segments, 7, 2)) + np.array([70.0, 20.0])
    coords = np.concatenate([start[:, None, :], start[:, None, :] + np.cumsum(steps, 1)], 1)
    lines = shapely.linestrings(coords)
    streams = gpd.GeoDataFrame(
        {"STREAM_CLASS": rng.choice([1, 2, 3], segments, p=[0.1, 0.3, 0.6])},
        geometry=lines,
        crs="EPSG:32633",
    )
    pyogrio.write_dataframe(streams, gpkg, layer="streams", append=True, use_arrow=True)
    tif = tmp / "slope.tif"
    write_slope(tif, x0, y0, extent, cells)
    return gpkg, tif, tmp


def main() -> None:
    import tomllib

    import yieldscape
    from yieldscape.config import apply_override, parse_scenario

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stands", type=int, default=100_000)
    ap.add_argument("--segments", type=int, default=20_000)
    ap.add_argument("--cells", type=int, default=10_000)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(dir=HERE) as tmp:
        t0 = time.perf_counter()
        gpkg, tif, _ = build(Path(tmp), args.stands, args.segments, args.cells)
        print(f"built inputs in {time.perf_counter() - t0:.1f} s")
        base = [
            f"inventory.path={json.dumps(str(gpkg))}",
            "inventory.layer=stands",
            "inventory.fields.site_index=SI_M",
        ]
        steps = [
            {"label": "rock", "where": "COVER == 'rock'"},
            {
                "label": "riparian",
                "layer": str(gpkg),
                "layer_name": "streams",
                "buffer_by": {"field": "STREAM_CLASS", "widths_m": {"1": 30, "2": 20, "3": 10}},
            },
            {"label": "steep", "raster": str(tif), "above": 40},
            {"label": "roads", "percent": 3},
        ]
        toml_steps = (
            "["
            + ", ".join(
                "{"
                + ", ".join(
                    f"{k} = {json.dumps(v) if not isinstance(v, dict) else _inline(v)}"
                    for k, v in s.items()
                )
                + "}"
                for s in steps
            )
            + "]"
        )
        raw = tomllib.loads(SCENARIO.read_text())
        raw["inventory"].pop("from_raster", None)  # the sample's rasters cover the sample only
        raw["inventory"]["fields"].pop("unit", None)  # the synthetic layer has no units
        raw.pop("units", None)
        raw.pop("partitions", None)
        raw["landbase"] = {"steps": []}
        for item in base:
            apply_override(raw, item)
        scn0 = parse_scenario(raw, base_dir=SCENARIO.parent)
        apply_override(raw, f"landbase.steps={toml_steps}")
        scn1 = parse_scenario(raw, base_dir=SCENARIO.parent)
        t0 = time.perf_counter()
        yieldscape.check(scn0)
        t_plain = time.perf_counter() - t0
        t0 = time.perf_counter()
        res = yieldscape.check(scn1)
        t_net = time.perf_counter() - t0
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024**2
        print(res.netdown.table.to_string(index=False))
        print(
            f"{args.stands:,} stands, {args.segments:,} stream segments, "
            f"{args.cells:,} x {args.cells:,} raster: check without netdown {t_plain:.1f} s, "
            f"with netdown {t_net:.1f} s (netdown {t_net - t_plain:.1f} s), "
            f"peak RSS {peak:.1f} GB"
        )


def _inline(d: dict) -> str:
    return (
        "{"
        + ", ".join(
            f"{k} = {_inline(v) if isinstance(v, dict) else json.dumps(v)}"
            if k.isidentifier()
            else f'"{k}" = {json.dumps(v)}'
            for k, v in d.items()
        )
        + "}"
    )


if __name__ == "__main__":
    main()
