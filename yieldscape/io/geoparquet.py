"""GeoParquet in and out (GeoParquet 1.0/1.1, https://geoparquet.org): one file, or a
partitioned dataset (a directory of GeoParquet files), read through pyarrow and geopandas;
GDAL is not needed, and pyogrio's wheels carry no Parquet driver.

A partitioned dataset is read file by file, in the order of the files' paths (each file one
partition); hive-style folder names (``region=north/``) are not read as columns."""

from __future__ import annotations

import functools
import json
import os
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pyproj
import shapely
from geopandas.array import from_shapely

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
    file), checked as :func:`geo_metadata` checks; one partition in memory at a time, and the
    next file's Arrow table read on a second thread meanwhile (pyarrow releases the GIL)."""
    files = parquet_files(path)
    if not files:
        raise InventoryError(f"{path}: the directory holds no GeoParquet files (*.parquet)")
    first_crs = None
    with ThreadPoolExecutor(1) as ahead:
        coming = ahead.submit(_read_table, files[0], what)
        for n, file in enumerate(files):
            table, geo = coming.result()
            if n + 1 < len(files):
                coming = ahead.submit(_read_table, files[n + 1], what)
            frame = _to_frame(file, table, geo, what).reset_index(drop=True)
            del table
            if n == 0:
                first_crs, first_columns = frame.crs, list(frame.columns)
            elif set(frame.columns) != set(first_columns):  # concat would fill in nulls
                missing = [c for c in first_columns if c not in frame.columns]
                extra = [c for c in frame.columns if c not in first_columns]
                raise InventoryError(
                    f"{file}: its columns are not those of {files[0].name} (missing: "
                    f"{', '.join(missing) or 'none'}; not in {files[0].name}: "
                    f"{', '.join(extra) or 'none'}); the partitions of a dataset share one "
                    "schema"
                )
            elif frame.crs != first_crs:
                raise InventoryError(
                    f"{file}: its CRS ({_crs_name(frame.crs)}) is not that of {files[0].name} "
                    f"({_crs_name(first_crs)}); the partitions of a dataset share one CRS"
                )
            yield frame


def _crs_name(crs: pyproj.CRS | None) -> str | None:
    """A CRS as its authority code where it has one (its PROJJSON is pages long)."""
    return crs if crs is None else crs.to_string()


# GeoParquet 1.1 native (GeoArrow) encodings: shapely's type and the depth of list nesting
# above the coordinates (https://geoarrow.org/format)
_NATIVE = {
    "point": (shapely.GeometryType.POINT, 0),
    "linestring": (shapely.GeometryType.LINESTRING, 1),
    "polygon": (shapely.GeometryType.POLYGON, 2),
    "multipoint": (shapely.GeometryType.MULTIPOINT, 1),
    "multilinestring": (shapely.GeometryType.MULTILINESTRING, 2),
    "multipolygon": (shapely.GeometryType.MULTIPOLYGON, 3),
}
CHUNK_ROWS = 100_000  # rows of geometry built at a time when reading
THREADS = min(2, os.cpu_count() or 1)  # threads building native-encoded geometry


def _read_table(file: Path, what: str) -> tuple[pa.Table | None, dict]:
    """A file's Arrow table and ``geo`` metadata; None for the table when the file is left
    to geopandas' reader (see :func:`_own_read`)."""
    geo = geo_metadata(file, what)
    if not _own_read(geo):
        return None, geo
    try:
        return pq.read_table(file), geo
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise InventoryError(f"{file}: the {what} cannot be read ({exc})") from None


def _own_read(geo: dict) -> bool:
    """Whether we build the frame ourselves: metadata that geopandas would accept without a
    word, one geometry column, WKB or a native encoding, planar edges, no bbox covering.
    Anything else goes to ``gpd.read_parquet``, whose checks, warnings and messages then
    apply unchanged."""
    columns = geo.get("columns")
    if not (geo.get("version") or geo.get("schema_version")) or not isinstance(columns, dict):
        return False
    if len(columns) != 1 or not isinstance(columns.get(geo["primary_column"]), dict):
        return False
    meta = columns[geo["primary_column"]]
    if "covering" in meta:  # a bbox column, which geopandas leaves out of the frame
        return False
    return meta.get("encoding") in ("WKB", *_NATIVE) and meta.get("edges", "planar") == "planar"


def _to_frame(file: Path, table: pa.Table | None, geo: dict, what: str) -> gpd.GeoDataFrame:
    """The frame geopandas' ``read_parquet`` makes of the file (same columns, order, dtypes,
    index and CRS), its geometry built in chunks, native encodings on :data:`THREADS` threads
    (``shapely.from_ragged_array`` builds the GEOS geometries without the GIL;
    ``shapely.from_wkb`` holds it, so WKB is built on one)."""
    try:
        if table is None:
            return gpd.read_parquet(file)
        column = geo["primary_column"]
        meta = geo["columns"][column]
        if meta["encoding"] in _NATIVE and _has_nulls(table[column], meta["encoding"]):
            return gpd.read_parquet(file)
        at = list(table.slice(0, 0).to_pandas().columns).index(column)
        frame = table.drop_columns([column]).to_pandas()
        geometry = _geometry(table.column(column), meta["encoding"])
        # GeoParquet: no "crs" key is OGC:CRS84, null an unknown CRS
        crs = _crs(json.dumps(meta.get("crs", "OGC:CRS84"), sort_keys=True))
        frame.insert(at, column, from_shapely(geometry, crs=crs))
        attrs = (table.schema.metadata or {}).get(b"PANDAS_ATTRS")  # geopandas' to_parquet
        if attrs:
            frame.attrs = json.loads(attrs)
        return gpd.GeoDataFrame(frame, geometry=column)
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise InventoryError(f"{file}: the {what} cannot be read ({exc})") from None


def _geometry(column: pa.ChunkedArray, encoding: str) -> np.ndarray:
    """shapely geometries of a WKB or GeoArrow column, in chunks of :data:`CHUNK_ROWS` rows."""
    chunks = [
        chunk.slice(lo, CHUNK_ROWS)
        for chunk in column.chunks
        for lo in range(0, len(chunk), CHUNK_ROWS)
    ]
    if not chunks:
        return np.empty(0, dtype=object)
    if encoding == "WKB":
        parts = [shapely.from_wkb(c.to_numpy(zero_copy_only=False)) for c in chunks]
    elif THREADS > 1 and len(chunks) > 1:
        with ThreadPoolExecutor(THREADS) as pool:
            parts = list(pool.map(functools.partial(_from_geoarrow, encoding=encoding), chunks))
    else:
        parts = [_from_geoarrow(c, encoding) for c in chunks]
    return np.concatenate(parts)


def _from_geoarrow(array: pa.Array, encoding: str) -> np.ndarray:
    """shapely geometries of a GeoArrow array without nulls (a slice of a column): its
    offsets rebased to the slice, level by level, and its coordinates as an (n, 2 or 3)
    array."""
    kind, depth = _NATIVE[encoding]
    level, offsets = _storage(array), []
    for _ in range(depth):
        off = np.asarray(level.offsets)
        offsets.insert(0, (off - off[0]).astype(np.int64))
        level = level.flatten()  # takes the slice, where .values would give the whole child
    if pa.types.is_struct(level.type):  # separated coordinates (GeoParquet 1.1)
        # by name, as geopandas takes them: x and y, and z where there are more fields
        names = "xy" if level.type.num_fields == 2 else "xyz"
        coords = np.column_stack([np.asarray(level.field(k)) for k in names])
    else:  # interleaved: fixed-size lists of 2 or 3 doubles
        coords = np.asarray(level.flatten()).reshape(len(level), level.type.list_size)
    return shapely.from_ragged_array(kind, coords, tuple(offsets) or None)


def _storage(array: pa.Array) -> pa.Array:
    return array.storage if isinstance(array, pa.ExtensionArray) else array


def _has_nulls(column: pa.ChunkedArray, encoding: str) -> bool:
    """Whether a GeoArrow column holds a null at any level (a null list's offsets may span
    values that flatten() skips, so the offsets would not fit the coordinates)."""
    for chunk in column.chunks:
        level = _storage(chunk)
        for _ in range(_NATIVE[encoding][1] + 1):
            if level.null_count:
                return True
            if not (pa.types.is_list(level.type) or pa.types.is_large_list(level.type)):
                break
            level = level.flatten()
    return False


@functools.lru_cache(maxsize=8)
def _crs(text: str) -> pyproj.CRS | None:
    """The CRS of a file's metadata (JSON text), parsed once for all the partitions of a
    dataset: pyproj takes about 40 ms to parse a PROJJSON CRS."""
    crs = json.loads(text)
    if isinstance(crs, dict):
        crs = _without_member_ids(crs)
    return None if crs is None else pyproj.CRS.from_user_input(crs)


def _without_member_ids(crs: dict) -> dict:
    """A PROJJSON CRS without the ids of datum ensemble members, which older PROJ databases
    do not know (as geopandas and GDAL read it: GDAL pull request 5872)."""

    def drop(node: object) -> None:
        if isinstance(node, dict):
            for key, value in node.items():
                if key == "members" and isinstance(value, list):
                    for member in value:
                        if isinstance(member, dict):
                            member.pop("id", None)
                drop(value)
        elif isinstance(node, list):
            for item in node:
                drop(item)

    drop(crs)
    return crs


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


def write_geoparquet(path: Path, frame: gpd.GeoDataFrame, native: bool = False) -> None:
    """Write a layer as one GeoParquet 1.1 file (zstd, no pandas index), in row groups of
    :data:`BATCH_ROWS` rows converted one at a time, so that only a batch is held as Arrow
    (geopandas' ``to_parquet`` converts the whole frame at once: about 0.4 GB more at the
    peak of a 1M-stand run). The geometry is in WKB or, with ``native``, in the native
    (GeoArrow) encoding of its type where :func:`native_encoding` finds one (GDAL >= 3.9 and
    geopandas >= 1.0 read it; it is built without parsing WKB, on two threads by our
    reader), else in WKB."""
    geom = frame.geometry.name
    geoms = frame.geometry.to_numpy()
    attrs = pd.DataFrame({c: frame[c] for c in frame.columns if c != geom}, copy=False)
    at = list(frame.columns).index(geom)
    native = native_encoding(geoms) if native else None

    # the attributes' types from the whole frame (an object column null in a first batch)
    attr_schema = pa.Schema.from_pandas(attrs, preserve_index=False)
    geo = json.dumps(_geo(geom, geoms, frame.crs, native[0] if native else "WKB"))
    geom_type = _native_type(*native) if native else pa.binary()
    schema = attr_schema.insert(at, pa.field(geom, geom_type, nullable=native is None))
    schema = schema.with_metadata({**(attr_schema.metadata or {}), b"geo": geo})
    with pq.ParquetWriter(path, schema, compression="zstd") as writer:
        for lo in range(0, max(len(frame), 1), BATCH_ROWS):
            rows = attrs.iloc[lo : lo + BATCH_ROWS]
            table = pa.Table.from_pandas(rows, schema=attr_schema, preserve_index=False)
            part = geoms[lo : lo + BATCH_ROWS]
            if native:
                column = _to_geoarrow(part, native[1], geom_type)
            else:
                column = pa.array(shapely.to_wkb(part), type=pa.binary())
            writer.write_table(table.add_column(at, schema.field(at), column).cast(schema))


# shapely type id -> GeoParquet 1.1 native encoding (none for linear rings and collections)
_ENCODINGS = {0: "point", 1: "linestring", 3: "polygon", 4: "multipoint"}
_ENCODINGS |= {5: "multilinestring", 6: "multipolygon"}


def native_encoding(geoms: np.ndarray) -> tuple[str, bool] | None:
    """The GeoParquet 1.1 native encoding of a geometry column and whether it has Z, or None
    where WKB is needed: no rows, a missing or empty geometry, more than one geometry type
    (polygons among multipolygons: the encodings hold one type each), 2D and 3D mixed, a
    linear ring or collection, or more coordinates than 32-bit list offsets count."""
    if not len(geoms) or (shapely.is_missing(geoms) | shapely.is_empty(geoms)).any():
        return None
    types, has_z = np.unique(shapely.get_type_id(geoms)), np.unique(shapely.has_z(geoms))
    if len(types) != 1 or len(has_z) != 1 or int(types[0]) not in _ENCODINGS:
        return None
    if shapely.get_num_coordinates(geoms).sum() >= 2**31:
        return None
    return _ENCODINGS[int(types[0])], bool(has_z[0])


def _native_type(encoding: str, has_z: bool) -> pa.DataType:
    """The Arrow type of a native encoding: separated coordinates (a struct of x, y and z),
    nested in lists, none of them nullable (as geopandas writes it)."""
    kind = pa.struct([pa.field(k, pa.float64(), nullable=False) for k in "xyz"[: 2 + has_z]])
    for _ in range(_NATIVE[encoding][1]):
        kind = pa.list_(pa.field("element", kind, nullable=False))
    return kind


def _to_geoarrow(geoms: np.ndarray, has_z: bool, kind: pa.DataType) -> pa.Array:
    """A batch of geometries of one type as a GeoArrow array of type ``kind``."""
    _, coords, offsets = shapely.to_ragged_array(geoms, include_z=has_z)
    point = kind
    while pa.types.is_list(point):
        point = point.value_type
    array: pa.Array = pa.StructArray.from_arrays(
        [pa.array(coords[:, k]) for k in range(coords.shape[1])], fields=list(point)
    )
    for off in offsets:  # innermost first
        outer = pa.list_(pa.field("element", array.type, nullable=False))
        array = pa.ListArray.from_arrays(pa.array(off, type=pa.int32()), array, type=outer)
    return array


def _geo(column: str, geoms: np.ndarray, crs: pyproj.CRS | None, encoding: str) -> dict:
    """The file's ``geo`` metadata (GeoParquet 1.1.0: encoding, geometry types, CRS as
    PROJJSON, null for an unknown one, and the bounding box)."""
    live = geoms[~(shapely.is_missing(geoms) | shapely.is_empty(geoms))]
    both = np.unique(shapely.get_type_id(live) * 2 + shapely.has_z(live))
    types = sorted({_TYPE_NAMES[int(k) // 2] + (" Z" if k % 2 else "") for k in both})
    meta: dict = {"encoding": encoding, "geometry_types": types}
    meta["crs"] = crs.to_json_dict() if crs is not None else None
    if len(live):
        meta["bbox"] = [float(v) for v in shapely.total_bounds(live)]
    return {
        "version": "1.1.0",
        "primary_column": column,
        "columns": {column: meta},
        "creator": {"library": "yieldscape", "version": __version__},
    }
