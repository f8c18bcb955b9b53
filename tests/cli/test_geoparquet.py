"""GeoParquet in and out: a stand layer and overlays as GeoParquet give the run the GeoPackage
gives; ``output.format = "geoparquet"`` writes the layers as GeoParquet; a file that is not
GeoParquet is an input error that names the file and what is wrong."""

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pyogrio
import pytest
import shapely
from test_run import run_command, small_forest

from yieldscape.cli.main import main
from yieldscape.io.geoparquet import iter_partitions
from yieldscape.io.vector import read_layer

from helpers import (
    assert_outputs_documented,
    scenario_dict,
    squares,
    stand_attrs,
    write_layer,
    write_scenario,
)


def _as_parquet(gpkg, layer, path):
    """One layer of a GeoPackage written as GeoParquet through geopandas (the GeoParquet
    writer most users have)."""
    gpd.read_file(gpkg, layer=layer, engine="pyogrio").to_parquet(path)
    return path


@pytest.fixture(scope="module")
def both_runs(tmp_path_factory):
    """The small forest with every option (tests/cli/test_run.py) run twice: from its
    GeoPackage into a GeoPackage, and from the same layers as GeoParquet (the stands as a
    dataset of two files, the overlays as single files) into GeoParquet."""
    gp_dir = tmp_path_factory.mktemp("gpkg")
    gp_out = gp_dir / "results"
    run_command(["run", str(small_forest(gp_dir)), "--out", str(gp_out), "-q"])
    pq_dir = tmp_path_factory.mktemp("parquet")
    scenario = small_forest(pq_dir)
    gpkg = pq_dir / "forest.gpkg"
    stands = gpd.read_file(gpkg, layer="stands", engine="pyogrio")
    (pq_dir / "stands").mkdir()
    stands.iloc[:25].to_parquet(pq_dir / "stands" / "part-0.parquet")
    stands.iloc[25:].to_parquet(pq_dir / "stands" / "part-1.parquet")
    _as_parquet(gpkg, "reserves", pq_dir / "reserves.parquet")
    _as_parquet(gpkg, "streams", pq_dir / "streams.geoparquet")
    text = scenario.read_text(encoding="utf-8")
    text = text.replace('path = "forest.gpkg"', 'path = "stands"').replace('layer = "stands"\n', "")
    for name, path in (("reserves", "reserves.parquet"), ("streams", "streams.geoparquet")):
        text = text.replace(f'layer = "forest.gpkg"\nlayer_name = "{name}"', f'layer = "{path}"')
    assert "forest.gpkg" not in text
    text += '\n[output]\nformat = "geoparquet"\ngeoparquet_geometry = "native"\n'
    scenario.write_text(text, encoding="utf-8")
    gpkg.unlink()  # nothing is read from it
    pq_out = pq_dir / "results"
    run_command(["run", str(scenario), "--out", str(pq_out), "-q"])
    return gp_out, pq_out, pq_dir


def test_geoparquet_inputs_give_the_same_tables_byte_for_byte(both_runs):
    gp_out, pq_out, _ = both_runs
    csvs = sorted(p.name for p in gp_out.glob("*.csv"))
    assert len(csvs) > 10 and csvs == sorted(p.name for p in pq_out.glob("*.csv"))
    for name in csvs:
        assert (gp_out / name).read_bytes() == (pq_out / name).read_bytes(), name


def test_geoparquet_output_holds_the_geopackage_layers(both_runs):
    gp_out, pq_out, _ = both_runs
    assert not (pq_out / "projection.gpkg").exists()
    gpkg = gp_out / "projection.gpkg"
    encodings = {}
    for name, layer in (("stands", "stands"), ("harvests", "harvests"), ("harvestable", None)):
        # read back by pyarrow and geopandas (other readers than ours)
        table = pq.read_table(pq_out / f"{name}.parquet")
        geo = json.loads(table.schema.metadata[b"geo"])
        assert geo["primary_column"] == "geometry"
        assert geo["columns"]["geometry"]["crs"]["id"] == {"authority": "EPSG", "code": 32633}
        ours = gpd.read_parquet(pq_out / f"{name}.parquet")
        # GeoParquet 1.1: a native encoding holds one geometry type; WKB any mix
        types = sorted(set(ours.geom_type))
        encodings[name] = geo["columns"]["geometry"]["encoding"]
        assert encodings[name] == (types[0].lower() if len(types) == 1 else "WKB"), types
        assert geo["columns"]["geometry"]["geometry_types"] == types
        theirs = pyogrio.read_dataframe(gpkg, layer=layer or name)
        assert list(ours.columns) == list(theirs.columns)
        pd.testing.assert_frame_equal(
            pd.DataFrame(ours.drop(columns="geometry")),
            pd.DataFrame(theirs.drop(columns="geometry")),
            check_dtype=False,  # GDAL stores int32 as int32, booleans as int16 subtype
        )
        # the same shapes; the GeoPackage promotes a layer of polygons and multipolygons to
        # multipolygons (one type per layer), GeoParquet keeps each as it is
        assert ours.geometry.geom_equals(theirs.geometry).all()
    assert set(encodings.values()) == {"WKB", "polygon"}, encodings  # both kinds written
    ages = pd.read_parquet(pq_out / "stand_ages.parquet")
    pd.testing.assert_frame_equal(
        ages, pyogrio.read_dataframe(gpkg, layer="stand_ages"), check_dtype=False
    )


def test_docs_describe_the_geoparquet_outputs(both_runs):
    _, pq_out, pq_dir = both_runs
    assert_outputs_documented(pq_out, pq_dir / "stands")
    rec = json.loads((pq_out / "run.json").read_text())
    assert rec["scenario"]["output"] == {"format": "geoparquet", "geoparquet_geometry": "native"}
    assert "stands.parquet" in rec["outputs"] and "harvests.parquet" in rec["outputs"]


def test_the_default_geoparquet_geometry_is_wkb(tmp_path):
    # WKB by default: GeoParquet 1.0 readers (GDAL 3.5-3.8, geopandas < 1.0) read it
    layer = write_layer(tmp_path / "s.gpkg", squares(20), stand_attrs(20, np.arange(20) * 9.0))
    raw = scenario_dict(layer)
    raw["output"] = {"format": "geoparquet"}
    out = tmp_path / "out"
    assert (
        main(["run", str(write_scenario(tmp_path / "s.toml", raw)), "--out", str(out), "-q"]) == 0
    )
    stands = pyogrio.read_dataframe(layer)
    for name in ("stands", "harvests"):
        geo = json.loads(pq.read_schema(out / f"{name}.parquet").metadata[b"geo"])
        assert geo["columns"]["geometry"]["encoding"] == "WKB"
        back = gpd.read_parquet(out / f"{name}.parquet")
        assert len(back) and back.geometry.is_valid.all()
    back = gpd.read_parquet(out / "stands.parquet")
    assert back.geometry.normalize().geom_equals_exact(stands.geometry.normalize(), 1e-6).all()


# -- reading ---------------------------------------------------------------------------------


def _stands(tmp_path, n=6):
    return gpd.GeoDataFrame(
        stand_attrs(n, ages=np.arange(n) * 20.0), geometry=squares(n), crs="EPSG:32633"
    )


def test_a_partitioned_dataset_reads_as_its_files_in_order(tmp_path):
    frame = _stands(tmp_path, 30)
    (tmp_path / "ds" / "b").mkdir(parents=True)
    frame.iloc[:10].to_parquet(tmp_path / "ds" / "a.parquet")
    frame.iloc[10:].to_parquet(tmp_path / "ds" / "b" / "c.parquet")
    (tmp_path / "ds" / "_metadata").write_bytes(b"not read")
    whole, name = read_layer(tmp_path / "ds", None)
    assert name == "ds"
    pd.testing.assert_frame_equal(whole, frame)
    assert [len(p) for p in iter_partitions(tmp_path / "ds")] == [10, 20]


def _run_exit_2(tmp_path, capsys, path, overlay=False):
    layer = path
    raw = scenario_dict(layer)
    if overlay:
        good = write_layer(tmp_path / "good.gpkg", squares(6), stand_attrs(6, np.arange(6) * 20.0))
        raw = scenario_dict(good)
        raw["landbase"] = {"steps": [{"label": "reserves", "layer": str(path)}]}
    else:
        del raw["inventory"]["layer"]
    scenario = write_scenario(tmp_path / "scenario.toml", raw)
    assert main(["run", str(scenario), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())
    return err


def test_a_plain_parquet_file_is_not_geoparquet(tmp_path, capsys):
    path = tmp_path / "stands.parquet"
    pd.DataFrame(_stands(tmp_path).drop(columns="geometry")).to_parquet(path)
    err = _run_exit_2(tmp_path, capsys, path)
    assert f"{path}: a Parquet file without GeoParquet metadata" in err


def test_a_file_that_is_not_parquet(tmp_path, capsys):
    path = tmp_path / "stands.parquet"
    path.write_text("ID,AGE\n1,20\n", encoding="utf-8")
    err = _run_exit_2(tmp_path, capsys, path)
    assert f"{path}: the stand layer is not a Parquet file" in err


def test_geoparquet_metadata_naming_a_missing_geometry_column(tmp_path, capsys):
    path = tmp_path / "stands.parquet"
    table = pa.Table.from_pandas(pd.DataFrame(_stands(tmp_path).drop(columns="geometry")))
    # the GeoParquet 1.1 'geo' metadata of a file whose geometry column was dropped
    geo = {"version": "1.1.0", "primary_column": "geom", "columns": {"geom": {"encoding": "WKB"}}}
    meta = {**table.schema.metadata, b"geo": json.dumps(geo).encode()}
    pq.write_table(table.replace_schema_metadata(meta), path)
    err = _run_exit_2(tmp_path, capsys, path)
    assert f"{path}: the stand layer has no geometry column (the GeoParquet metadata names " in err


def test_geoparquet_without_crs(tmp_path, capsys):
    # GeoParquet 1.1: "crs": null means an undefined CRS (a missing key would mean OGC:CRS84)
    path = tmp_path / "stands.parquet"
    _stands(tmp_path).set_crs(None, allow_override=True).to_parquet(path)
    assert json.loads(pq.read_schema(path).metadata[b"geo"])["columns"]["geometry"]["crs"] is None
    err = _run_exit_2(tmp_path, capsys, path)
    assert "the layer has no CRS; state it with inventory.crs" in err


def test_geoparquet_overlay_without_crs(tmp_path, capsys):
    path = tmp_path / "reserves.parquet"
    gpd.GeoDataFrame({"ID": [1]}, geometry=squares(1), crs=None).to_parquet(path)
    err = _run_exit_2(tmp_path, capsys, path, overlay=True)
    assert f"{path}, layer 'reserves': the layer has no CRS" in err


def test_a_geoparquet_file_holds_one_layer(tmp_path, capsys):
    path = tmp_path / "stands.parquet"
    _stands(tmp_path).to_parquet(path)
    raw = scenario_dict(path)  # asks for layer 'stands': the file's stem, so it is found
    scenario = write_scenario(tmp_path / "scenario.toml", raw)
    assert main(["check", str(scenario)]) == 0
    raw["inventory"]["layer"] = "forest"
    scenario = write_scenario(tmp_path / "scenario.toml", raw)
    assert main(["check", str(scenario)]) == 2
    assert "a GeoParquet stand layer holds one layer, 'stands'" in capsys.readouterr().err


def test_a_layer_written_in_batches_reads_back_whole(tmp_path, monkeypatch):
    # five row groups of 7 rows; a text column null in the whole first batch; a multipolygon
    # among polygons; the geometry column not last. Read back by geopandas' reader.
    import yieldscape.io.geoparquet as geoparquet

    monkeypatch.setattr(geoparquet, "BATCH_ROWS", 7)
    frame = _stands(tmp_path, 30)
    frame["NOTE"] = pd.Series([None] * 8 + ["thinned"] * 22, dtype=object)
    frame.loc[3, "geometry"] = shapely.MultiPolygon([frame.geometry[3]])
    frame = frame[["ID", "geometry", "NOTE", "AGE"]]
    geoparquet.write_geoparquet(tmp_path / "out.parquet", frame)
    assert pq.ParquetFile(tmp_path / "out.parquet").metadata.num_row_groups == 5
    back = gpd.read_parquet(tmp_path / "out.parquet")
    assert list(back.columns) == list(frame.columns) and back.crs == frame.crs
    assert back["NOTE"].isna().sum() == 8 and (back["NOTE"][8:] == "thinned").all()
    assert (back["ID"] == frame["ID"]).all() and (back["AGE"] == frame["AGE"]).all()
    assert back.geometry.geom_equals_exact(frame.geometry, 0.0).all()
    geo = json.loads(pq.read_schema(tmp_path / "out.parquet").metadata[b"geo"])["columns"]
    assert geo["geometry"]["geometry_types"] == ["MultiPolygon", "Polygon"]
    assert geo["geometry"]["bbox"] == list(frame.total_bounds)
