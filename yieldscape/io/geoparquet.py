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
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

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


def write_geoparquet(path: Path, frame: gpd.GeoDataFrame) -> None:
    """Write a layer as one GeoParquet file (WKB geometry, zstd, no pandas index)."""
    frame.to_parquet(path, index=False, compression="zstd", write_covering_bbox=False)
