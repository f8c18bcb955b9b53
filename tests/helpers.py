"""Small inventories and scenarios made in code and written through the real writers."""

from __future__ import annotations

import warnings
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pyogrio
import shapely

ROOT = Path(__file__).resolve().parents[1]


def squares(
    n: int, side_m: float = 100.0, x0: float = 500_000.0, y0: float = 6_700_000.0, per_row: int = 10
) -> np.ndarray:
    """n edge-sharing squares of side_m metres (100 m -> 1 ha) in rows of per_row."""
    i = np.arange(n)
    x = x0 + (i % per_row) * side_m
    y = y0 + (i // per_row) * side_m
    return shapely.box(x, y, x + side_m, y + side_m)


def write_layer(
    path: Path,
    geoms: Any,
    attrs: dict[str, Any],
    crs: str | None = "EPSG:32633",
    layer: str = "stands",
    driver: str | None = None,
) -> Path:
    """Write a stand layer with pyogrio (GDAL), as a user's GIS would have."""
    frame = gpd.GeoDataFrame(attrs, geometry=list(geoms), crs=crs)
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", "'crs' was not provided", UserWarning)  # on purpose
        pyogrio.write_dataframe(frame, path, layer=layer, driver=driver)
    return path


def write_raster(
    path: Path,
    values: np.ndarray,
    x0: float = 500_000.0,
    y0: float = 6_701_000.0,
    cell: float = 10.0,
    crs: str | None = "EPSG:32633",
    nodata: float = -9999.0,
) -> Path:
    """Write a one-band float32 GeoTIFF (north up, upper left corner at x0, y0) with rasterio."""
    import rasterio
    from rasterio.transform import from_origin

    prof = {
        "driver": "GTiff",
        "width": values.shape[1],
        "height": values.shape[0],
        "count": 1,
        "dtype": "float32",
        "transform": from_origin(x0, y0, cell, cell),
        "nodata": nodata,
        "compress": "deflate",
    }
    if crs is not None:
        prof["crs"] = crs
    with rasterio.open(path, "w", **prof) as dst:
        dst.write(values.astype("float32"), 1)
    return path


def stand_attrs(n: int, ages: Any, species: Any = "pine", site: Any = 18.0) -> dict[str, Any]:
    return {
        "ID": np.arange(1, n + 1),
        "SPP": np.broadcast_to(np.asarray(species, dtype=object), (n,)).copy(),
        "SI": np.broadcast_to(np.asarray(site, dtype=float), (n,)).copy(),
        "AGE": np.broadcast_to(np.asarray(ages), (n,)).copy(),
        "ZONE": np.array(["east"] * n, dtype=object),
    }


def scenario_dict(inventory: Path, **sections: dict[str, Any]) -> dict[str, Any]:
    """A complete scenario for one pine curve; keyword sections are merged in."""
    raw: dict[str, Any] = {
        "scenario": {
            "name": "test",
            "start_year": 2030,
            "period_years": 10,
            "periods": 10,
            "harvest_timing": "midpoint",
        },
        "inventory": {
            "path": str(inventory),
            "layer": "stands",
            "fields": {
                "stand_id": "ID",
                "species": "SPP",
                "site_index": "SI",
                "age": "AGE",
                "zone": "ZONE",
            },
        },
        "species": {
            "pine": {
                "curve": "chapman-richards",
                "a": 400.0,
                "k": 0.03,
                "c": 3.0,
                "min_harvest_age": 60,
                "regen_delay_years": 0,
                "site_index_min_m": 10.0,
                "site_index_max_m": 30.0,
            }
        },
        "harvest": {"priority": "oldest"},
        "flow": {"policy": "even", "band": 0.0, "ending_stock": 0.0},
        # figures take most of a small run's time: drawn only where a test is about them
        "report": {"figures": False},
    }
    for name, table in sections.items():
        if isinstance(table, dict) and isinstance(raw.get(name), dict):
            raw[name] = {**raw[name], **table}
        else:
            raw[name] = table
    return raw


def small_case_files(directory: Path) -> tuple[Path, Path]:
    """Twenty 1-ha pine stands aged 0..95 and a scenario over them: (layer, scenario)."""
    n = 20
    layer = write_layer(directory / "stands.gpkg", squares(n), stand_attrs(n, np.arange(n) * 5))
    return layer, write_scenario(directory / "scenario.toml", scenario_dict(layer))


def dump_toml(raw: dict[str, Any]) -> str:
    """Enough TOML for test scenarios: tables, arrays, arrays of tables, inline tables."""

    def key(k: str) -> str:
        return k if k.replace("_", "").replace("-", "").isalnum() else value(k)

    def value(v: Any) -> str:
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, str):
            return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
        if isinstance(v, list | tuple):
            return "[" + ", ".join(value(x) for x in v) + "]"
        if isinstance(v, dict):
            return "{ " + ", ".join(f"{key(k)} = {value(x)}" for k, x in v.items()) + " }"
        return repr(v)

    def is_table_array(v: Any) -> bool:
        return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)

    lines: list[str] = []

    def table(prefix: str, tbl: dict[str, Any]) -> None:
        if prefix:
            lines.append(f"[{prefix}]")
        for k, v in tbl.items():
            if not isinstance(v, dict) and not is_table_array(v):
                lines.append(f"{key(k)} = {value(v)}")
        for k, v in tbl.items():
            path = f"{prefix}.{k}" if prefix else k
            if isinstance(v, dict):
                table(path, v)
            elif is_table_array(v):
                for item in v:
                    lines.append(f"[[{path}]]")
                    lines.extend(f"{key(a)} = {value(b)}" for a, b in item.items())

    table("", raw)
    return "\n".join(lines) + "\n"


def write_scenario(path: Path, raw: dict[str, Any]) -> Path:
    path.write_text(dump_toml(raw), encoding="utf-8")
    return path


def gap_forest(n: int = 120, seed: int = 4):
    """StandArrays of one species with an old-forest surplus and an age gap (as the sample)."""
    from yieldscape.projection import StandArrays

    rng = np.random.default_rng(seed)
    ages = np.where(rng.random(n) < 0.6, rng.uniform(90, 160, n), rng.uniform(0, 30, n))
    return StandArrays(
        np.zeros(n, np.int32),
        np.full(n, 20.0),
        ages,
        rng.uniform(5, 30, n),
        np.full(n, 60.0),
        np.zeros(n),
        np.arange(n),
    )


def unit_forest(n: int, seed: int, old: float = 0.6) -> list:
    """The per-stand arrays (species, site, age, area, minimum age, delay) of a one-species
    forest with a share ``old`` of old stands (90-160 years) and the rest young (0-30)."""
    rng = np.random.default_rng(seed)
    ages = np.where(rng.random(n) < old, rng.uniform(90, 160, n), rng.uniform(0, 30, n))
    return [
        np.zeros(n, np.int32),
        rng.uniform(16, 24, n),
        ages,
        rng.uniform(5, 30, n),
        np.full(n, 60.0),
        np.zeros(n),
    ]


def stands_of(*parts: list):
    """StandArrays of several :func:`unit_forest` forests, one after the other."""
    from yieldscape.projection import StandArrays

    arrays = [np.concatenate(cols) for cols in zip(*parts, strict=True)]
    return StandArrays(*arrays, np.arange(len(arrays[0])))


def cbc_solve(model) -> tuple[float, list]:  # noqa: ANN001 - an LPModel
    """CBC (through PuLP, an independent solver) on the same matrix model: the optimal cost
    of the minimisation and the solution."""
    import warnings

    import pulp

    A = model.matrix.tocsr()
    prob = pulp.LpProblem("harvest", pulp.LpMinimize)
    x = [prob.add_variable(f"x{i}", lowBound=0) for i in range(A.shape[1])]
    prob += pulp.lpSum(float(c) * x[i] for i, c in enumerate(model.cost) if c)
    for r in range(A.shape[0]):
        span = slice(A.indptr[r], A.indptr[r + 1])
        expr = pulp.lpSum(
            float(v) * x[c] for c, v in zip(A.indices[span], A.data[span], strict=True)
        )
        lo, hi = model.row_lo[r], model.row_hi[r]
        if lo == hi:
            prob += expr == float(lo)
        else:
            if np.isfinite(lo) and lo > -1e29:
                prob += expr >= float(lo)
            if np.isfinite(hi) and hi < 1e29:
                prob += expr <= float(hi)
    with warnings.catch_warnings():
        # PuLP 3 still ships CBC but announces its move to a separate package in PuLP 4
        warnings.simplefilter("ignore", DeprecationWarning)
        prob.solve(pulp.PULP_CBC_CMD(msg=False))
    assert pulp.LpStatus[prob.status] == "Optimal"
    return pulp.value(prob.objective), x


def assert_outputs_documented(out: Path, stand_layer: Path) -> None:
    """Every layer, column, CSV, run.json key, figure and raster a run wrote into ``out`` is
    described in docs/outputs.md (the stand layer's own attributes, carried, aside)."""
    import json
    import re

    import pandas as pd
    import pyarrow.parquet as pq

    from yieldscape.io.geoparquet import is_geoparquet, parquet_files

    text = (ROOT / "docs" / "outputs.md").read_text(encoding="utf-8")
    if is_geoparquet(stand_layer):
        inputs = set(pq.read_schema(parquet_files(stand_layer)[0]).names)
    else:
        inputs = set(pyogrio.read_info(stand_layer, layer="stands")["fields"])
    gpkg = out / "projection.gpkg"
    layers = []  # (name as documented, its columns)
    if gpkg.exists():
        for layer, _ in pyogrio.list_layers(gpkg):
            name = re.sub(r"_\d+$", "_<NN>", re.sub(r"_age_\d{4}$", "_age_<YEAR>", layer))
            layers.append((name, pyogrio.read_info(gpkg, layer=layer)["fields"]))
    for path in out.glob("*.parquet"):  # output.format = "geoparquet"
        layers.append((path.name, [c for c in pq.read_schema(path).names if c != "geometry"]))
    assert layers, "no layer written"
    for layer, cols in layers:
        assert re.search(rf"`{re.escape(layer)}`", text), f"layer {layer}"
        cols = [c for c in cols if c not in inputs]  # the layer's own attributes, carried
        for col in cols:
            col = re.sub(r"^removed_step\d+_ha$", "removed_step<N>_ha", col)
            assert re.search(rf"^\| `{re.escape(col)}` \|", text, re.M), f"{layer}.{col}"
    for csv in out.glob("*.csv"):
        assert f"`{csv.name}`" in text, csv.name
        for col in pd.read_csv(csv).columns:
            assert re.search(rf"^\| `{col}` \|", text, re.M), f"{csv.name} {col}"
    for key in json.loads((out / "run.json").read_text()):
        assert re.search(rf"^\| `{key}` \|", text, re.M), f"run.json {key}"
    for png in (out / "figures").glob("*.png"):
        name = re.sub(r"^curves_\w+\.png$", "curves_<species>.png", png.name)
        assert f"| `{name}` |" in text, png.name
    for tif in (out / "rasters").glob("*.tif"):
        name = re.sub(r"^age_\d{4}\.tif$", "age_<YEAR>.tif", tif.name)
        assert f"| `{name}` |" in text, tif.name


def regional_wood_flow(path: Path):
    """The region's rows of a written wood_flow.csv (a run with management units adds each
    unit's rows after them)."""
    import pandas as pd

    wf = pd.read_csv(path)
    return wf[wf["unit"] == "region"].reset_index(drop=True)
