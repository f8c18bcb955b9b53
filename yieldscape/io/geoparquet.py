"""GeoParquet in and out (GeoParquet 1.0/1.1, https://geoparquet.org): one file, or a
partitioned dataset (a directory of GeoParquet files), read through pyarrow and geopandas;
GDAL is not needed, and pyogrio's wheels carry no Parquet driver.

A partitioned dataset is read file by file, in the order of the files' paths (each file one
partition); hive-style folder names (``region=north/``) are not read as columns."""

from __future__ import annotations

import json
from collections.abc import Iterator
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pyproj
import shapely

from yieldscape._version import __version__
from yieldscape.errors import InventoryError

SUFFIXES = (".parquet", ".geoparquet")


def is_geoparquet(path: Path) -> bool:
    """Whether ``path`` names a GeoParquet file (by its suffix) or a partitioned dataset (a
    directory holding ``*.parquet`` files; a FileGDB is a directory too, and is left to GDAL)."""
    if path.is_dir():
        return path.suffix.lower() != ".gdb" and bool(parquet_files(path))
    return path.suffix.lower() in SUFFIXES


def parquet_files(path: Path) -> list[Path]:
    """The files of a GeoParquet file or dataset, in path order (``_metadata`` and hidden
    files, which writers leave beside the partitions, skipped)."""
    if not path.is_dir():
        return [path]
    return sorted(
        p
        for p in path.rglob("*")
        if p.is_file()
        and p.suffix.lower() in SUFFIXES
        and not any(part.startswith((".", "_")) for part in p.relative_to(path).parts)
    )


def geo_metadata(path: Path, what: str) -> dict:
    """The ``geo`` metadata of a GeoParquet file, checked: it is Parquet, it has GeoParquet
    metadata, and its primary geometry column is in the file."""
    try:
        schema = pq.read_schema(path)
    except (pa.ArrowException, OSError) as exc:
        raise InventoryError(f"{path}: the {what} is not a Parquet file ({exc})") from None
    raw = (schema.metadata or {}).get(b"geo")
    if raw is None:
        raise InventoryError(
            f"{path}: a Parquet file without GeoParquet metadata (no 'geo' key in its schema), "
            f"so not a GeoParquet {what}; write it with geopandas' to_parquet or GDAL's "
            "Parquet driver"
        )
    try:
        geo = json.loads(raw)
        column = geo["primary_column"]
    except (ValueError, KeyError, TypeError):
        raise InventoryError(
            f"{path}: the GeoParquet metadata ('geo') is not valid JSON with a primary_column"
        ) from None
    if column not in schema.names:
        raise InventoryError(
            f"{path}: the {what} has no geometry column (the GeoParquet metadata names "
            f"{column!r}; the columns are: {', '.join(schema.names)})"
        )
    return geo


def read_geoparquet(
    path: Path, layer: str | None, key: str, what: str
) -> tuple[gpd.GeoDataFrame, str]:
    """A GeoParquet file or dataset as one frame (rows in file order, a fresh index), and
    its layer name (the file's stem, or the directory's name); ``layer`` must be that name or
    None, as the file holds one layer."""
    name = path.name if path.is_dir() else path.stem
    if layer is not None and layer != name:
        raise InventoryError(
            f"{path}: no layer {layer!r} ({key}); a GeoParquet {what} holds one layer, "
            f"{name!r}: leave {key} out"
        )
    parts = list(iter_partitions(path, what))
    frame = parts[0] if len(parts) == 1 else pd.concat(parts, ignore_index=True)
    return frame, name


def iter_partitions(path: Path, what: str = "stand layer") -> Iterator[gpd.GeoDataFrame]:
    """Each file of a GeoParquet file or dataset as a GeoDataFrame (index 0..n-1 of the
    file), checked as :func:`geo_metadata` checks; one partition in memory at a time."""
    files = parquet_files(path)
    if not files:
        raise InventoryError(f"{path}: the directory holds no GeoParquet files (*.parquet)")
    first_crs = None
    for n, file in enumerate(files):
        geo_metadata(file, what)
        try:
            frame = gpd.read_parquet(file)
        except (pa.ArrowException, OSError, ValueError) as exc:
            raise InventoryError(f"{file}: the {what} cannot be read ({exc})") from None
        frame = frame.reset_index(drop=True)
        if n == 0:
            first_crs = frame.crs
        elif frame.crs != first_crs:
            raise InventoryError(
                f"{file}: its CRS ({frame.crs}) is not that of {files[0].name} ({first_crs}); "
                "the partitions of a dataset share one CRS"
            )
        yield frame


def partition_rows(path: Path) -> list[int]:
    """Rows of each partition of a partitioned GeoParquet dataset (from the files' footers);
    one entry for any other layer (its rows not counted: 0)."""
    if not (path.is_dir() and is_geoparquet(path)):
        return [0]
    return [pq.ParquetFile(file).metadata.num_rows for file in parquet_files(path)]


BATCH_ROWS = 250_000  # rows converted to Arrow and WKB at a time when writing

# GeoParquet 1.1 geometry type names by shapely type id (a linear ring is written as WKB's
# LineString, as GEOS does)
_TYPE_NAMES = {0: "Point", 1: "LineString", 2: "LineString", 3: "Polygon", 4: "MultiPoint"}
_TYPE_NAMES |= {5: "MultiLineString", 6: "MultiPolygon", 7: "GeometryCollection"}


def write_geoparquet(path: Path, frame: gpd.GeoDataFrame) -> None:
    """Write a layer as one GeoParquet 1.1 file (WKB geometry, zstd, no pandas index), in
    row groups of :data:`BATCH_ROWS` rows converted one at a time, so that only a batch is
    held as Arrow and WKB (geopandas' ``to_parquet`` converts the whole frame at once: about
    0.4 GB more at the peak of a 1M-stand run)."""
    geom = frame.geometry.name
    geoms = frame.geometry.to_numpy()
    attrs = pd.DataFrame({c: frame[c] for c in frame.columns if c != geom}, copy=False)
    at = list(frame.columns).index(geom)

    # the attributes' types from the whole frame (an object column null in a first batch)
    attr_schema = pa.Schema.from_pandas(attrs, preserve_index=False)
    geo = json.dumps(_geo(geom, geoms, frame.crs))
    schema = attr_schema.insert(at, pa.field(geom, pa.binary()))
    schema = schema.with_metadata({**(attr_schema.metadata or {}), b"geo": geo})
    with pq.ParquetWriter(path, schema, compression="zstd") as writer:
        for lo in range(0, max(len(frame), 1), BATCH_ROWS):
            rows = attrs.iloc[lo : lo + BATCH_ROWS]
            table = pa.Table.from_pandas(rows, schema=attr_schema, preserve_index=False)
            wkb = pa.array(shapely.to_wkb(geoms[lo : lo + BATCH_ROWS]), type=pa.binary())
            writer.write_table(table.add_column(at, schema.field(at), wkb).cast(schema))


def _geo(column: str, geoms: np.ndarray, crs: pyproj.CRS | None) -> dict:
    """The file's ``geo`` metadata (GeoParquet 1.1.0: encoding, geometry types, CRS as
    PROJJSON, null for an unknown one, and the bounding box)."""
    live = geoms[~(shapely.is_missing(geoms) | shapely.is_empty(geoms))]
    both = np.unique(shapely.get_type_id(live) * 2 + shapely.has_z(live))
    types = sorted({_TYPE_NAMES[int(k) // 2] + (" Z" if k % 2 else "") for k in both})
    meta: dict = {"encoding": "WKB", "geometry_types": types}
    meta["crs"] = crs.to_json_dict() if crs is not None else None
    if len(live):
        meta["bbox"] = [float(v) for v in shapely.total_bounds(live)]
    return {
        "version": "1.1.0",
        "primary_column": column,
        "columns": {column: meta},
        "creator": {"library": "yieldscape", "version": __version__},
    }
