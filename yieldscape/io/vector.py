"""Vector I/O through pyogrio (GDAL): read a stand layer, write GeoPackage layers and tables;
register SQL views as feature layers (sqlite3, the GeoPackage being an SQLite database)."""

from __future__ import annotations

import os
import sqlite3
import threading
from collections.abc import Callable, Iterator
from contextlib import closing, contextmanager
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyarrow as pa
import pyogrio
import shapely
from pyogrio.errors import DataLayerError, DataSourceError

from yieldscape.errors import InventoryError
from yieldscape.io.geoparquet import is_geoparquet, read_geoparquet
from yieldscape.runlog import release_freed_memory, without_collector


def read_layer(
    path: Path, layer: str | None, key: str = "inventory.layer", what: str = "stand layer"
) -> tuple[gpd.GeoDataFrame, str]:
    """Read one vector layer of any format GDAL reads, or a GeoParquet file or partitioned
    dataset (:mod:`yieldscape.io.geoparquet`); return it with the layer name used.

    ``key`` and ``what`` name the scenario key and the kind of file in messages.
    """
    if not path.exists():
        raise InventoryError(f"{path}: {what} file not found")
    try:
        str(path).encode("utf-8")
    except UnicodeEncodeError:  # bytes of another encoding in a file or folder name
        raise InventoryError(
            f"{str(path)!r}: the {what}'s path is not UTF-8, and GDAL reads UTF-8 paths only; "
            "rename the file or its folder"
        ) from None
    if is_geoparquet(path):
        with without_collector():  # a geometry object per row (see without_collector)
            return read_geoparquet(path, layer, key, what)
    try:
        layers = [str(name) for name in pyogrio.list_layers(path)[:, 0]]
    except (DataSourceError, OSError) as exc:
        raise InventoryError(f"{path}: not a vector file GDAL can read ({exc})") from None
    if not layers:
        raise InventoryError(f"{path}: the file holds no layers")
    if layer is None:
        if len(layers) > 1:
            raise InventoryError(
                f"{path}: the file holds {len(layers)} layers ({', '.join(layers)}); "
                f"name one with {key}"
            )
        layer = layers[0]
    elif layer not in layers:
        raise InventoryError(
            f"{path}: no layer {layer!r} ({key}); the file holds: {', '.join(layers)}"
        )
    try:
        with without_collector():  # a geometry object per row (see without_collector)
            frame = pyogrio.read_dataframe(path, layer=layer, use_arrow=True)
    except (DataSourceError, DataLayerError, OSError) as exc:
        raise InventoryError(f"{path}, layer {layer!r}: cannot be read ({exc})") from None
    if not isinstance(frame, gpd.GeoDataFrame) or frame.geometry.name not in frame:
        raise InventoryError(f"{path}, layer {layer!r}: the layer has no geometry column")
    return frame, layer


# GeoPackage 1.2 (OGC 12-128r15): GDAL writes it since 2.2 and reads it without a word, while a
# 1.4 file makes an older GDAL (3.6, under QGIS 3.22 on Debian 12) warn on every open that it
# "may only be partially supported"; nothing we write needs 1.3 or 1.4.
GPKG_VERSION = "1.2"


def write_gpkg_layer(path: Path, frame: pd.DataFrame, layer: str, spatial: bool = True) -> None:
    """Write (or add) one layer to a GeoPackage; ``spatial=False`` writes an attribute table
    (``gpkg_contents.data_type = 'attributes'``). The file is created at :data:`GPKG_VERSION`.

    A long layer goes in batches of :data:`BATCH_ROWS` rows (one layer, one write), so that
    only a batch at a time is held as Arrow and WKB: the rows, types, geometry type and CRS
    pyogrio's ``write_dataframe`` writes from the whole frame, where the batches can hold to
    them (a table of Arrow-typed columns; polygons, 2D, none empty); else that writer."""
    create = not path.exists()
    geometry = _polygon_layer(frame) if spatial else None
    dtypes = frame.dtypes.drop(geometry.name) if geometry is not None else frame.dtypes
    if len(frame) <= BATCH_ROWS or not _arrow_typed(dtypes) or (spatial and geometry is None):
        pyogrio.write_dataframe(
            frame if spatial else pd.DataFrame(frame),
            path,
            layer=layer,
            driver="GPKG",
            use_arrow=True,
            append=not create,
            dataset_options={"VERSION": GPKG_VERSION} if create else None,
        )
    else:
        pyogrio.write_arrow(
            _batches(pd.DataFrame(frame, copy=False), geometry),
            path,
            layer=layer,
            driver="GPKG",
            geometry_name=geometry.name if geometry else None,
            geometry_type=geometry.kind if geometry else None,
            crs=geometry.crs if geometry else None,
            append=not create,
            dataset_options={"VERSION": GPKG_VERSION} if create else None,
        )
    release_freed_memory()  # the Arrow copy of a large layer, before the next one


BATCH_ROWS = 250_000


def _arrow_typed(dtypes: pd.Series) -> bool:
    """Whether every column converts to one Arrow type whatever its rows (as pyogrio would
    convert the whole frame): no object or time-zoned columns, which it treats specially."""
    return not any(
        dtype == np.dtype(object) or isinstance(dtype, pd.DatetimeTZDtype) for dtype in dtypes
    )


@dataclass(frozen=True)
class _Polygons:
    """A layer's geometry as pyogrio's write_dataframe would declare it."""

    name: str  # the geometry column
    kind: str  # "Polygon" or "MultiPolygon"
    promote: bool  # polygons written as one-part multipolygons (mixed single and multi)
    crs: str | None


def _polygon_layer(frame: gpd.GeoDataFrame) -> _Polygons | None:
    """pyogrio's choice of geometry type and CRS for a layer of 2D polygons and
    multipolygons, none empty (``pyogrio.geopandas.write_dataframe``: one type as it is; both
    promoted to MultiPolygon, as the GPKG driver mixes no single and multi types); None for
    any other layer."""
    geoms = frame.geometry.to_numpy()
    kind = shapely.get_type_id(geoms)
    if (
        not len(geoms)
        or ((kind != 3) & (kind != 6)).any()
        or shapely.is_empty(geoms).any()
        or shapely.has_z(geoms).any()
    ):
        return None
    kinds = set(np.unique(kind).tolist())
    crs = frame.crs
    if crs is not None:
        epsg = crs.to_epsg()
        crs = f"EPSG:{epsg}" if epsg else crs.to_wkt("WKT1_GDAL")
    return _Polygons(
        frame.geometry.name, "Polygon" if kinds == {3} else "MultiPolygon", kinds == {3, 6}, crs
    )


def _batches(frame: pd.DataFrame, geometry: _Polygons | None) -> pa.RecordBatchReader:
    """``frame`` as Arrow record batches of BATCH_ROWS rows, made one at a time, the geometry
    as WKB in its own place (as pyogrio converts a whole frame)."""

    def chunk(rows: pd.DataFrame) -> pa.Table:
        if geometry is not None:
            geoms = rows[geometry.name].to_numpy()
            if geometry.promote:
                one = shapely.get_type_id(geoms) == 3
                geoms = geoms.copy()
                geoms[one] = shapely.multipolygons(np.atleast_2d(geoms[one]), axis=0)
            rows = rows.copy(deep=False)
            rows[geometry.name] = shapely.to_wkb(geoms)
        return pa.Table.from_pandas(rows, schema=schema, preserve_index=False)

    schema = None
    schema = chunk(frame.iloc[:1]).schema
    parts = (
        batch
        for i in range(0, len(frame), BATCH_ROWS)
        for batch in chunk(frame.iloc[i : i + BATCH_ROWS]).to_batches()
    )
    return pa.RecordBatchReader.from_batches(schema, parts)


def move_attribute_table(src: Path, dst: Path, table: str) -> None:
    """Move the attribute table ``table`` from the GeoPackage ``src`` (written there by
    :func:`write_gpkg_layer`) into the GeoPackage ``dst``, as GDAL would have written it
    there, and delete ``src``: the same CREATE TABLE, the rows with their fids (so
    AUTOINCREMENT's ``sqlite_sequence`` row follows), its ``gpkg_contents`` row (data_type
    'attributes', OGC 12-128r15 Req 13/14), and GDAL's feature count
    (``gpkg_ogr_contents``) with its two triggers, made after the rows as GDAL makes them.

    One INSERT ... SELECT in SQLite takes 5M rows x 5 columns in about 1.2 s, where GDAL
    inserts them one statement each in 4-5.5 s: a helper process writes ``src`` beside the
    run's other writes (:func:`yieldscape.publish.shared_figures`)."""
    with closing(sqlite3.connect(dst, isolation_level=None)) as con:
        con.execute("PRAGMA synchronous = OFF")  # synced once by the writer (unsynced_gpkg)
        con.execute("ATTACH DATABASE ? AS side", (str(src),))
        try:
            con.execute("BEGIN")
            (create,) = con.execute(
                "SELECT sql FROM side.sqlite_master WHERE type = 'table' AND name = ?", (table,)
            ).fetchone()
            con.execute(create)
            con.execute(f'INSERT INTO main."{table}" SELECT * FROM side."{table}"')
            con.execute(
                "INSERT INTO main.gpkg_contents SELECT * FROM side.gpkg_contents "
                "WHERE table_name = ?",
                (table,),
            )
            con.execute(
                "INSERT INTO main.gpkg_ogr_contents SELECT * FROM side.gpkg_ogr_contents "
                "WHERE table_name = ?",
                (table,),
            )
            triggers = con.execute(
                "SELECT sql FROM side.sqlite_master WHERE type = 'trigger' AND tbl_name = ? "
                "ORDER BY rowid",
                (table,),
            ).fetchall()
            for (sql,) in triggers:
                con.execute(sql)
            con.execute("COMMIT")
        except BaseException:
            if con.in_transaction:
                con.execute("ROLLBACK")
            raise
        finally:
            con.execute("DETACH DATABASE side")
    src.unlink()


def fid_runs(values: np.ndarray) -> dict[object, tuple[int, int]] | None:
    """The range of fids (first, last) each value holds in a table written in the order of
    ``values`` (a fresh GeoPackage table numbers its rows 1, 2, ... as they come), or None if
    some value's rows are not one run; a view can then select a value's rows as a range of
    SQLite's primary key, with no index (see :func:`fids_in_order`)."""
    if not len(values):
        return {}
    starts = np.flatnonzero(np.r_[True, values[1:] != values[:-1]])
    firsts = values[starts]
    if len(pd.unique(firsts)) != len(firsts):
        return None
    lasts = np.r_[starts[1:], len(values)]
    return {v: (int(a) + 1, int(b)) for v, a, b in zip(firsts.tolist(), starts, lasts, strict=True)}


def fids_in_order(path: Path, table: str, rows: int) -> bool:
    """Whether ``table`` of the GeoPackage ``path`` numbers its ``rows`` rows 1 to ``rows``
    (fids unique, as SQLite's primary key): the premise of :func:`fid_runs`. The least and
    greatest fid are read from the primary key, the row count from GDAL's feature count
    (``gpkg_ogr_contents``) where it keeps one (counting the rows would read the table)."""
    with closing(sqlite3.connect(path)) as con:
        least, most = con.execute(
            f'SELECT (SELECT min("fid") FROM "{table}"), (SELECT max("fid") FROM "{table}")'
        ).fetchone()
        if not rows:
            return least is None
        try:
            kept = con.execute(
                "SELECT feature_count FROM gpkg_ogr_contents WHERE table_name = ?", (table,)
            ).fetchone()
        except sqlite3.OperationalError:  # no such table: GDAL was told to keep none
            kept = None
        count = kept[0] if kept and kept[0] is not None else None
        if count is None:
            (count,) = con.execute(f'SELECT count(*) FROM "{table}"').fetchone()
    return (count, least, most) == (rows, 1, rows)


@contextmanager
def unsynced_gpkg(path: Path, sync: bool = True) -> Iterator[None]:
    """Write a GeoPackage without SQLite's sync after each transaction
    (``OGR_SQLITE_SYNCHRONOUS=OFF`` for GDAL, ``PRAGMA synchronous = OFF`` in
    :func:`add_feature_views`), then sync the file once when the block ends without error.

    Safe here because a run writes into a staged directory that is moved into place only when
    every output is whole (:func:`yieldscape.io.outputs.staged_output`): SQLite without sync
    still survives the process failing, and only a crash of the machine itself could leave a
    broken file, in a staged directory nobody reads; the one sync at the end makes the file
    durable before it is moved into place (``sync=False``: none, for a file to be deleted or
    one synced by :func:`sync_in_background` after its last block)."""
    old = pyogrio.get_gdal_config_option("OGR_SQLITE_SYNCHRONOUS")
    pyogrio.set_gdal_config_options({"OGR_SQLITE_SYNCHRONOUS": "OFF"})
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options({"OGR_SQLITE_SYNCHRONOUS": old})
    if sync:
        _fsync(path)


def _fsync(path: Path) -> None:
    if path.exists():
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def sync_in_background(path: Path) -> Callable[[], None]:
    """Start a sync of a GeoPackage written in :func:`unsynced_gpkg` blocks with
    ``sync=False`` in a thread (the call waits on the disk and releases the GIL; at 1M stands
    0.75 s), so that the run goes on while it runs; the function returned waits for it and
    raises its error. The last one, started after the file's last write, must be waited for
    before the file is moved into place."""
    errors: list[OSError] = []

    def work() -> None:
        try:
            _fsync(path)
        except OSError as exc:
            errors.append(exc)

    thread = threading.Thread(target=work, name=f"sync {path.name}", daemon=True)
    thread.start()

    def wait() -> None:
        thread.join()
        if errors:
            raise errors[0]

    return wait


def add_feature_views(
    path: Path,
    views: list[tuple[str, str, str, str]],
    indexes: list[tuple[str, tuple[str, ...]]] = (),
) -> None:
    """Add SQL views to a GeoPackage as feature tables GDAL and GIS viewers list as layers.

    Each view is ``(name, select, like, description)``: the SELECT must return the fid and
    geometry column of the feature table ``like`` (``{geom}`` in it stands for that column's
    name), whose geometry column, type, SRS and extent the view is registered with (OGC
    12-128r15, GeoPackage 1.2, Req. 14: "The table_name column value in a gpkg_contents table
    row SHALL contain the name of a SQLite table or view"). ``indexes`` adds SQLite indexes on
    (table, columns) that the views filter by.
    """
    with closing(sqlite3.connect(path)) as con, con:
        con.execute("PRAGMA synchronous = OFF")  # synced once by the writer (unsynced_gpkg)
        for table, cols in indexes:
            name = f"idx_{table}_{'_'.join(cols)}"
            listed = ", ".join(f'"{c}"' for c in cols)
            con.execute(f'CREATE INDEX IF NOT EXISTS "{name}" ON "{table}" ({listed})')
        for name, select, like, description in views:
            column, gtype, srs, z, m = con.execute(
                "SELECT column_name, geometry_type_name, srs_id, z, m "
                "FROM gpkg_geometry_columns WHERE table_name = ?",
                (like,),
            ).fetchone()
            con.execute(f'CREATE VIEW "{name}" AS {select.replace("{geom}", column)}')
            con.execute(
                "INSERT INTO gpkg_contents (table_name, data_type, identifier, description, "
                "last_change, min_x, min_y, max_x, max_y, srs_id) "
                "SELECT ?, 'features', ?, ?, strftime('%Y-%m-%dT%H:%M:%fZ', 'now'), "
                "min_x, min_y, max_x, max_y, srs_id FROM gpkg_contents WHERE table_name = ?",
                (name, name, description, like),
            )
            con.execute(
                "INSERT INTO gpkg_geometry_columns (table_name, column_name, "
                "geometry_type_name, srs_id, z, m) VALUES (?, ?, ?, ?, ?, ?)",
                (name, column, gtype, srs, z, m),
            )
