"""Bad input: exit code 2, one message naming the problem, and no output directory contents."""

import re
import subprocess
import sys

import numpy as np
import pytest
import shapely

from yieldscape.cli.main import main

from helpers import scenario_dict, squares, stand_attrs, write_layer, write_scenario

N = 6


def _case(tmp_path, attrs=None, geoms=None, crs="EPSG:32633", raw_edit=None):
    attrs = attrs if attrs is not None else stand_attrs(N, ages=np.arange(N) * 20.0)
    geoms = geoms if geoms is not None else list(squares(N))
    layer = write_layer(tmp_path / "stands.gpkg", geoms, attrs, crs=crs)
    raw = scenario_dict(layer)
    if raw_edit:
        raw_edit(raw)
    return write_scenario(tmp_path / "scenario.toml", raw)


def _attrs(**changes):
    attrs = stand_attrs(N, ages=np.arange(N) * 20.0)
    for key, (i, value) in changes.items():
        col = attrs[key].copy()
        if value is None or isinstance(value, str):
            col = col.astype(object)  # a null (or text) in a numeric field
        col[i] = value
        attrs[key] = col
    return attrs


def _geoms(i, geom):
    geoms = list(squares(N))
    geoms[i] = geom
    return geoms


def _drop_field(raw):
    raw["inventory"]["fields"]["age"] = "AGE_YRS"


CASES = {
    "missing field": (
        dict(raw_edit=_drop_field),
        r"field 'AGE_YRS' \(inventory.fields.age\) is not in the layer",
    ),
    "duplicate id": (dict(attrs=_attrs(ID=(3, 1))), r"duplicate id in 2 stands: row 1 \(stand 1\)"),
    "null id": (dict(attrs=_attrs(ID=(2, None))), r"field 'ID': null id in 1 stands: row 3"),
    "null age": (dict(attrs=_attrs(AGE=(4, None))), r"null age in 1 stands: row 5 \(stand 5\)"),
    "negative age": (dict(attrs=_attrs(AGE=(1, -5.0))), r"negative age.*row 2 \(stand 2\): -5"),
    "unknown species": (
        dict(attrs=_attrs(SPP=(0, "larch"))),
        r"species not in the scenario: 'larch'.*row 1",
    ),
    "site out of range": (
        dict(attrs=_attrs(SI=(2, 45.0))),
        r"site index outside the range of the 'pine' curve.*row 3.*45",
    ),
    "non-polygon": (
        dict(geoms=_geoms(1, shapely.LineString([(0, 0), (1, 1)]))),
        r"geometry is not a polygon in 1 stands: row 2 \(stand 2\): LineString",
    ),
    "empty geometry": (
        dict(geoms=_geoms(5, shapely.Polygon())),
        r"empty or missing geometry in 1 stands: row 6",
    ),
    "no crs": (dict(crs=None), r"the layer has no CRS"),
    "empty layer": (
        dict(attrs={k: v[:0] for k, v in stand_attrs(N, ages=1).items()}, geoms=[]),
        r"the layer is empty",
    ),
}


@pytest.mark.parametrize("name", list(CASES))
def test_bad_inventory_exits_2_and_writes_nothing(tmp_path, capsys, name):
    kwargs, pattern = CASES[name]
    scenario = _case(tmp_path, **kwargs)
    out = tmp_path / "out"
    assert main(["run", str(scenario), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "stands.gpkg, layer 'stands'" in err
    errors = [line for line in err.splitlines() if line.startswith("yieldscape: error:")]
    assert len(errors) == 1  # one paragraph, on one line
    assert re.search(pattern, errors[0]), err
    assert "Traceback" not in err
    assert not out.exists()
    assert not any(p.name.startswith(".out.") for p in tmp_path.iterdir())
    # the same problem is found by `check`
    assert main(["check", str(scenario)]) == 2


def test_invalid_geometry_rejected_with_strict(tmp_path, capsys):
    x, y = 500_000.0, 6_700_000.0
    bowtie = shapely.Polygon([(x, y), (x + 100, y + 100), (x + 100, y), (x, y + 100)])
    scenario = _case(tmp_path, geoms=_geoms(0, bowtie))
    out = tmp_path / "out"
    assert main(["run", str(scenario), "--out", str(out), "--strict"]) == 2
    assert "invalid geometry (--strict) in 1 stands: row 1" in capsys.readouterr().err
    assert not out.exists()
    assert main(["run", str(scenario), "--out", str(out), "-q"]) == 0  # repaired by default
    assert (out / "projection.gpkg").is_file()


@pytest.mark.parametrize(
    ("args", "pattern"),
    [
        (
            ["--set", "flow.bandx=0.2"],
            r"--set flow.bandx=0.2: unknown \[flow\] key 'bandx'; did you mean 'band'",
        ),
        (["--set", "flow.band=1.5"], r"--set flow.band=1.5: \[flow\] band = 1.5: must be >= 0"),
        (["--set", "nonsense"], r"expected KEY=VALUE"),
        (["--set", "scenario.periods=0"], r"\[scenario\] periods = 0: must be >= 1"),
        (["--set", "inventory.layer=roads"], r"no layer 'roads' \(inventory.layer\)"),
        (["--set", "inventory.path=nowhere.gpkg"], r"nowhere.gpkg: stand layer file not found"),
    ],
)
def test_bad_scenario_exits_2(tmp_path, capsys, args, pattern):
    scenario = _case(tmp_path)
    out = tmp_path / "out"
    assert main(["run", str(scenario), "--out", str(out), *args]) == 2
    assert re.search(pattern, capsys.readouterr().err)
    assert not out.exists()


def test_missing_scenario_file_via_console_script(tmp_path):
    # The installed console script, as a user runs it.
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "yieldscape.cli.main",
            "run",
            str(tmp_path / "none.toml"),
            "--out",
            str(tmp_path / "o"),
        ],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2
    assert "none.toml: scenario file not found" in proc.stderr
    assert "Traceback" not in proc.stderr


def test_never_deletes_a_users_files_in_an_earlier_output(tmp_path, capsys):
    scenario = _case(tmp_path)
    out = tmp_path / "out"
    assert main(["run", str(scenario), "--out", str(out), "-q"]) == 0
    (out / "my_notes.txt").write_text("keep me")
    assert main(["run", str(scenario), "--out", str(out)]) == 2
    assert "holds files yieldscape did not write (my_notes.txt)" in capsys.readouterr().err
    assert (out / "my_notes.txt").read_text() == "keep me"
    assert (out / "projection.gpkg").is_file()  # the earlier result is untouched


def test_refuses_to_replace_a_foreign_directory(tmp_path, capsys):
    scenario = _case(tmp_path)
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    assert main(["run", str(scenario), "--out", str(out)]) == 2
    assert "not an earlier yieldscape output" in capsys.readouterr().err
    assert (out / "notes.txt").read_text() == "keep me"
