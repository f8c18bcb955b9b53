"""yieldscape.io.geoparquet: our reader gives the frame geopandas' ``read_parquet`` gives
(the independent reference) for WKB files, native (GeoArrow) files written by geopandas and
by our writer, datasets and an empty file; our writer's native encoding is read back by
geopandas and pyarrow as the frame written."""

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
import shapely

import yieldscape.io.geoparquet as geoparquet
from yieldscape.errors import InventoryError
from yieldscape.io.geoparquet import iter_partitions, read_geoparquet, write_geoparquet

from helpers import squares, stand_attrs


def _frame(n=23, geoms=None, crs="EPSG:32633"):
    attrs = stand_attrs(n, ages=np.arange(n) * 10)
    attrs["NOTE"] = pd.Series([None, "thinned"] * (n // 2) + ["x"] * (n % 2), dtype="str")
    return gpd.GeoDataFrame(attrs, geometry=squares(n) if geoms is None else geoms, crs=crs)


def _holed(n):
    """Squares with a square hole in every third, and a two-part multipolygon in every
    fifth (the parts of a GeoArrow column: rings per polygon, polygons per part)."""
    outer = squares(n)
    hole = shapely.buffer(shapely.centroid(outer), 20.0, cap_style="square")
    holed = shapely.difference(outer, hole)
    geoms = np.where(np.arange(n) % 3 == 0, holed, outer)
    multi = shapely.multipolygons([[g, shapely.affinity.translate(g, 0, -5000)] for g in outer])
    return np.where(np.arange(n) % 5 == 0, multi, geoms)


def _same_as_geopandas(path, chunked=True, monkeypatch=None):
    if chunked:  # chunks of 7 rows on two threads, whatever the machine
        monkeypatch.setattr(geoparquet, "CHUNK_ROWS", 7)
        monkeypatch.setattr(geoparquet, "THREADS", 2)
    ours, _ = read_geoparquet(path, None, "inventory.layer", "stand layer")
    files = [path] if path.is_file() else sorted(path.glob("*.parquet"))
    theirs = pd.concat([gpd.read_parquet(f) for f in files], ignore_index=True)
    pd.testing.assert_frame_equal(ours, theirs, check_exact=True)
    assert ours.crs == theirs.crs and ours.geometry.name == theirs.geometry.name
    same = ours.geometry.geom_equals_exact(theirs.geometry, 0.0)
    assert (same | (ours.geometry.isna() & theirs.geometry.isna())).all()
    return ours


@pytest.mark.parametrize("encoding", ["WKB", "geoarrow"])
@pytest.mark.parametrize("kind", ["squares", "holed", "points", "lines"])
def test_reads_what_geopandas_reads(tmp_path, monkeypatch, encoding, kind):
    n = 23
    geoms = {
        "squares": squares(n),
        "holed": _holed(n),
        "points": shapely.centroid(squares(n)),
        "lines": shapely.boundary(squares(n)),
    }[kind]
    frame = _frame(n, geoms)[["ID", "geometry", "SPP", "AGE", "NOTE"]]  # geometry not last
    path = tmp_path / "stands.parquet"
    # geopandas' geoarrow writer promotes polygons among multipolygons to multipolygons
    frame.to_parquet(path, geometry_encoding=encoding, row_group_size=10)
    geo = json.loads(pq.read_schema(path).metadata[b"geo"])["columns"]["geometry"]
    assert (geo["encoding"] == "WKB") == (encoding == "WKB")
    ours = _same_as_geopandas(path, monkeypatch=monkeypatch)
    assert list(ours.columns) == ["ID", "geometry", "SPP", "AGE", "NOTE"]


def test_our_native_files_read_as_the_frame_written(tmp_path, monkeypatch):
    # polygons with holes, one file of four row groups (BATCH_ROWS 7), read in chunks of 7
    monkeypatch.setattr(geoparquet, "BATCH_ROWS", 7)
    frame = _frame(26, shapely.difference(squares(26), shapely.buffer(squares(26)[0], -40)))
    frame.loc[4, "geometry"] = shapely.difference(frame.geometry[4], shapely.box(0, 0, 1, 1))
    path = tmp_path / "stands.parquet"
    write_geoparquet(path, frame, native=True)
    assert pq.ParquetFile(path).metadata.num_row_groups == 4
    geo = json.loads(pq.read_schema(path).metadata[b"geo"])
    assert geo["version"] == "1.1.0" and geo["columns"]["geometry"]["encoding"] == "polygon"
    ours = _same_as_geopandas(path, monkeypatch=monkeypatch)
    pd.testing.assert_frame_equal(ours, frame, check_exact=True)


@pytest.mark.parametrize(
    ("geoms", "encoding"),
    [
        (squares(5), "polygon"),
        (shapely.multipolygons([[g] for g in squares(5)]), "multipolygon"),
        (shapely.centroid(squares(5)), "point"),
        (shapely.force_3d(shapely.boundary(squares(5)), 100.0), "linestring"),
        (np.r_[squares(4), shapely.multipolygons([squares(1)])], "WKB"),  # two types
        (np.r_[squares(4), shapely.Polygon()], "WKB"),  # an empty polygon
        (np.r_[squares(4), [None]], "WKB"),  # a missing geometry
        (np.r_[squares(4), shapely.force_3d(squares(1))], "WKB"),  # 2D and 3D
    ],
    ids=["polygon", "multipolygon", "point", "linestring z", "mixed", "empty", "null", "dims"],
)
def test_the_writer_picks_the_native_encoding_of_one_type(tmp_path, geoms, encoding):
    # GeoParquet 1.1 native encodings hold one geometry type, without nulls or empties here
    frame = _frame(5, geoms)
    path = tmp_path / "layer.parquet"
    write_geoparquet(path, frame, native=True)
    geo = json.loads(pq.read_schema(path).metadata[b"geo"])["columns"]["geometry"]
    assert geo["encoding"] == encoding
    write_geoparquet(tmp_path / "wkb.parquet", frame)  # the default: WKB, any reader's
    wkb = json.loads(pq.read_schema(tmp_path / "wkb.parquet").metadata[b"geo"])
    assert wkb["columns"]["geometry"]["encoding"] == "WKB"
    pd.testing.assert_frame_equal(gpd.read_parquet(tmp_path / "wkb.parquet"), frame)
    back = gpd.read_parquet(path)  # geopandas' reader, the reference
    pd.testing.assert_frame_equal(back, frame, check_exact=True)
    ours, _ = read_geoparquet(path, None, "k", "layer")
    pd.testing.assert_frame_equal(ours, frame, check_exact=True)


def test_a_dataset_of_wkb_and_native_files(tmp_path, monkeypatch):
    frame = _frame(30)
    (tmp_path / "ds").mkdir()
    frame.iloc[:12].to_parquet(tmp_path / "ds" / "a.parquet")
    write_geoparquet(tmp_path / "ds" / "b.parquet", frame.iloc[12:].reset_index(drop=True), True)
    encodings = [
        json.loads(pq.read_schema(f).metadata[b"geo"])["columns"]["geometry"]["encoding"]
        for f in sorted((tmp_path / "ds").glob("*.parquet"))
    ]
    assert encodings == ["WKB", "polygon"]
    ours = _same_as_geopandas(tmp_path / "ds", monkeypatch=monkeypatch)
    pd.testing.assert_frame_equal(ours, frame, check_exact=True)
    assert [len(p) for p in iter_partitions(tmp_path / "ds")] == [12, 18]


def test_an_empty_file(tmp_path, monkeypatch):
    path = tmp_path / "stands.parquet"
    _frame(3).iloc[:0].to_parquet(path)
    ours = _same_as_geopandas(path, monkeypatch=monkeypatch)
    assert len(ours) == 0 and ours.crs == "EPSG:32633"
    write_geoparquet(tmp_path / "ours.parquet", _frame(3).iloc[:0], native=True)
    assert len(_same_as_geopandas(tmp_path / "ours.parquet", chunked=False)) == 0


def test_crs_from_the_metadata(tmp_path, monkeypatch):
    # GeoParquet 1.1: "crs" null is an unknown CRS; no "crs" key is OGC:CRS84
    frame = _frame(4, crs=None)
    frame.to_parquet(tmp_path / "none.parquet")
    assert _same_as_geopandas(tmp_path / "none.parquet", monkeypatch=monkeypatch).crs is None
    table = pq.read_table(tmp_path / "none.parquet")
    geo = json.loads(table.schema.metadata[b"geo"])
    del geo["columns"]["geometry"]["crs"]
    meta = {**table.schema.metadata, b"geo": json.dumps(geo).encode()}
    pq.write_table(table.replace_schema_metadata(meta), tmp_path / "nokey.parquet")
    crs = _same_as_geopandas(tmp_path / "nokey.parquet", chunked=False).crs
    assert crs.to_string() == "OGC:CRS84"


def test_partitions_of_two_crs(tmp_path):
    (tmp_path / "ds").mkdir()
    _frame(4).to_parquet(tmp_path / "ds" / "a.parquet")
    write_geoparquet(tmp_path / "ds" / "b.parquet", _frame(4).to_crs("EPSG:3067"))
    with pytest.raises(InventoryError, match=r"b\.parquet: its CRS \(EPSG:3067\) is not that of"):
        read_geoparquet(tmp_path / "ds", None, "k", "stand layer")


def test_nulls_in_a_native_column_go_to_geopandas(tmp_path, monkeypatch):
    # a null row: our chunked build leaves such files to geopandas' reader
    frame = _frame(6, shapely.centroid(squares(6)))
    frame.loc[2, "geometry"] = None
    frame.to_parquet(tmp_path / "p.parquet", geometry_encoding="geoarrow")
    ours = _same_as_geopandas(tmp_path / "p.parquet", monkeypatch=monkeypatch)
    assert ours.geometry.isna().tolist() == [False, False, True, False, False, False]


def test_a_covering_column_is_left_out_as_geopandas_does(tmp_path, monkeypatch):
    _frame(5).to_parquet(tmp_path / "c.parquet", write_covering_bbox=True)
    assert "bbox" in pq.read_schema(tmp_path / "c.parquet").names
    assert "bbox" not in _same_as_geopandas(tmp_path / "c.parquet", monkeypatch=monkeypatch)


def test_partitions_of_two_schemas(tmp_path):
    # a column missing from one file would come out as nulls from the concatenation
    (tmp_path / "ds").mkdir()
    _frame(4).to_parquet(tmp_path / "ds" / "a.parquet")
    _frame(4).drop(columns="AGE").to_parquet(tmp_path / "ds" / "b.parquet")
    with pytest.raises(
        InventoryError,
        match=r"b\.parquet: its columns are not those of "
        r"a\.parquet \(missing: AGE; not in a\.parquet: none\)",
    ):
        read_geoparquet(tmp_path / "ds", None, "k", "stand layer")
