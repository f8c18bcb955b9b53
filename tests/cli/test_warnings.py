"""Results and inputs that deserve a warning get one, on stderr, in run.log, in run.json's
record of the run and in the report; the run still succeeds. Each case on a small forest."""

import html
import json
import re

import numpy as np
import pytest
import shapely

import yieldscape
from yieldscape.cli.main import main

from helpers import scenario_dict, squares, stand_attrs, write_layer, write_scenario

N = 20
_X, _Y = 500_000.0, 6_700_000.0
BOWTIE = shapely.Polygon([(_X, _Y), (_X + 100, _Y + 100), (_X + 100, _Y), (_X, _Y + 100)])


def _forest(tmp_path, attrs=None, geoms=None, **sections):
    attrs = attrs if attrs is not None else stand_attrs(N, ages=np.arange(N) * 5.0 + 20)
    geoms = geoms if geoms is not None else list(squares(N))
    layer = write_layer(tmp_path / "stands.gpkg", geoms, attrs)
    return scenario_dict(layer, **sections)


def _with(field, row, value):
    attrs = stand_attrs(N, ages=np.arange(N) * 5.0 + 20)
    attrs[field] = attrs[field].copy()
    attrs[field][row] = value
    return attrs


def _reserve_bowtie(tmp_path):
    write_layer(tmp_path / "reserves.gpkg", [BOWTIE], {"K": np.array([1])}, layer="reserves")
    return {"steps": [{"label": "reserves", "layer": str(tmp_path / "reserves.gpkg")}]}


def _sliver_geoms():
    geoms = list(squares(N))
    x0, y0, _, _ = shapely.bounds(geoms[0])
    geoms[0] = shapely.box(x0, y0, x0 + 1e-3, y0 + 1e-3)  # 1 mm x 1 mm
    return geoms


def _case(name, tmp_path):
    """The raw scenario of a case."""
    if name == "repaired stand geometry":
        geoms = list(squares(N))
        geoms[3] = shapely.Polygon(
            [(_X + 300, _Y), (_X + 400, _Y + 100), (_X + 400, _Y), (_X + 300, _Y + 100)]
        )
        return _forest(tmp_path, geoms=geoms)
    if name == "repaired overlay geometry":
        return _forest(tmp_path, landbase=_reserve_bowtie(tmp_path))
    if name == "sliver stand":
        return _forest(tmp_path, geoms=_sliver_geoms())
    if name == "age beyond the curves' range":
        return _forest(tmp_path, attrs=_with("AGE", 4, 600.0))
    if name == "site index in feet":
        pine = {k: v for k, v in _pine().items() if not k.startswith("site_index_")}
        raw = _forest(tmp_path, attrs=_with("SI", 4, 70.0))
        raw["species"]["pine"] = pine  # no validity range: the curve takes any site
        return raw
    if name == "yield table that collapses":
        raw = _forest(tmp_path)
        raw["species"]["pine"] = {
            "curve": "table",
            "ages": [0, 40, 80, 120],
            "volumes_m3_ha": [0, 150, 290, 8],
            "min_harvest_age": 60,
        }
        return raw
    if name == "stock below its minimum viable stock":
        raw = _forest(tmp_path)
        raw["species"]["pine"] = {
            "curve": "stock-minimum",
            "r": 0.05,
            "capacity_m3_ha": 400.0,
            "initial_m3_ha": 10.0,
            "min_viable_m3_ha": 30.0,
            "min_harvest_age": 60,
        }
        return raw
    if name == "minimum harvest age of 5000 years":
        return _forest(tmp_path, species={"pine": {**_pine(), "min_harvest_age": 5000}})
    if name == "opening without green-up":
        return _forest(tmp_path, harvest={"greenup_years": 0, "max_opening_ha": 40})
    if name == "unusual disturbance rate":
        return _forest(tmp_path, disturbance={"annual_rate": 0.05})
    raise KeyError(name)


def _pine():
    return scenario_dict("x")["species"]["pine"]


WARNED = {
    "repaired stand geometry": r"stands.gpkg, layer 'stands': row 4 \(stand 4\): "
    r"Self-intersection.*1 invalid geometries repaired with make_valid",
    "repaired overlay geometry": r"#1 'reserves': 1 invalid overlay geometries repaired with "
    r"make_valid \(feature 1: Self-intersection",
    "sliver stand": r"row 1 \(stand 1\): 1e-10 ha: 1 stands are smaller than 0.01 ha",
    "age beyond the curves' range": r"row 5 \(stand 5\): 600: 1 stands are older than "
    r"growth.max_age_years = 400",
    "site index in feet": r"row 5 \(stand 5\): 70: 1 stands have a site index above 60 m",
    "yield table that collapses": r"\[species.pine\]: the volume falls from 290 m3/ha at age 80 "
    r"to 8 at age 120",
    "stock below its minimum viable stock": r"species pine: initial_m3_ha is below "
    r"min_viable_m3_ha, so its stands collapse after harvest",
    "minimum harvest age of 5000 years": r"20 stands \(20.0 ha, 100.0% of the harvestable land "
    r"base\) can never be cut: .*pine: 20 stands, 20.0 ha \(minimum harvest age 5,000 years\)",
    "opening without green-up": r"\[harvest\] max_opening_ha = 40 has no effect: "
    r"greenup_years = 0 switches the spatial rules off",
    "unusual disturbance rate": r"\[disturbance\] annual_rate = 0.05: 0.05 is unusual: usually "
    r">= 0 and <= 0.02",
}


def _warned_everywhere(out, err, pattern):
    """The warning is on stderr, in run.log, in run.json and in the report's warnings."""
    assert re.search(pattern, err), err
    assert re.search(pattern, (out / "run.log").read_text(encoding="utf-8"))
    record = json.loads((out / "run.json").read_text(encoding="utf-8"))
    assert any(re.search(pattern, w) for w in record["warnings"]), record["warnings"]
    page = html.unescape((out / "report.html").read_text(encoding="utf-8"))
    start = page.index('<div class="warnings">')
    block = page[start : page.index("</div>", start)]
    assert re.search(pattern, block), block


@pytest.mark.parametrize("name", list(WARNED))
def test_a_warning_reaches_the_user(tmp_path, capsys, name):
    scenario = write_scenario(tmp_path / "scenario.toml", _case(name, tmp_path))
    out = tmp_path / "out"
    assert main(["run", str(scenario), "--out", str(out), "--set", "flow.lp_bound=false"]) == 0
    _warned_everywhere(out, capsys.readouterr().err, WARNED[name])


def test_clean_input_gives_no_warning(tmp_path, capsys):
    scenario = write_scenario(tmp_path / "scenario.toml", _forest(tmp_path))
    out = tmp_path / "out"
    assert main(["run", str(scenario), "--out", str(out)]) == 0
    assert json.loads((out / "run.json").read_text())["warnings"] == []
    assert " WARNING " not in (out / "run.log").read_text()


def test_a_level_held_down_while_stock_piles_up_is_named(tmp_path, capsys):
    # An old forest under an old-forest target it already barely meets: the target, not
    # growth, holds the harvest far below the land's long-term sustained yield while the
    # harvestable stock stays well above a regulated forest's. The warning names the target.
    attrs = stand_attrs(N, ages=np.linspace(150, 250, N))
    raw = _forest(
        tmp_path,
        attrs=attrs,
        cover=[{"zone": "*", "older_than_years": 140, "min_share": 0.9}],
        flow={"policy": "even", "band": 0.0, "ending_stock": 0.0},
    )
    scenario = write_scenario(tmp_path / "scenario.toml", raw)
    out = tmp_path / "out"
    assert main(["run", str(scenario), "--out", str(out)]) == 0
    pattern = (
        r"is only \d+% of the long-term sustained yield .* ends at [\d.]+ times a regulated "
        r"forest's: a rule, not the forest's growth, holds the level down. What stops a higher "
        r"level: .*the cover targets"
    )
    _warned_everywhere(out, capsys.readouterr().err, pattern)


def test_monte_carlo_spread_in_stock_only_is_named(tmp_path, capsys):
    # Low targets every replicate meets: P10 = P50 = P90 of harvest; the spread is in stock.
    raw = _forest(
        tmp_path,
        attrs=stand_attrs(N, ages=np.linspace(60, 160, N)),
        scenario={"periods": 4},
        flow={"policy": "targets", "targets_m3": [100.0] * 4, "ending_stock": 0.0},
        disturbance={"annual_rate": 0.01, "replicates": 20, "seed": 3},
    )
    scenario = write_scenario(tmp_path / "scenario.toml", raw)
    out = tmp_path / "out"
    assert main(["run", str(scenario), "--out", str(out)]) == 0
    pattern = r"every disturbance replicate met the harvest target in every period"
    _warned_everywhere(out, capsys.readouterr().err, pattern)


def test_a_crumb_left_by_a_reserve_is_named_and_costs_nothing(tmp_path, capsys):
    # The end-to-end case of a reserve drawn a hair inside a stand's boundary: it leaves a
    # 1 mm2 crumb of harvestable area. Under a cover target (a rule of the sequential pick)
    # the level must equal the level with the stand wholly reserved, and the crumb is named.
    geoms = list(squares(N))
    oldest = N - 1
    x0, y0, _, _ = shapely.bounds(geoms[oldest])
    hole = shapely.box(x0 + 50, y0 + 50, x0 + 50.001, y0 + 50.001)
    levels = {}
    for name, reserve in (("crumb", geoms[oldest].difference(hole)), ("whole", geoms[oldest])):
        d = tmp_path / name
        d.mkdir()
        write_layer(d / "reserve.gpkg", [reserve], {"K": np.array([1])}, layer="reserve")
        raw = _forest(
            d,
            landbase={"steps": [{"label": "reserve", "layer": str(d / "reserve.gpkg")}]},
            cover=[{"zone": "*", "older_than_years": 90, "min_share": 0.1}],
        )
        scenario = write_scenario(d / "s.toml", raw)
        if name == "crumb":
            out = d / "out"
            assert main(["run", str(scenario), "--out", str(out)]) == 0
            rec = json.loads((out / "run.json").read_text())
            levels[name] = rec["flow"]["level_m3_per_year"]
            pattern = r"1 stands keep less than 1 m2 of harvestable area after the netdown"
            _warned_everywhere(out, capsys.readouterr().err, pattern)
        else:  # the reference level: the library's run, in memory
            run = yieldscape.run(yieldscape.load_scenario(scenario), None)
            levels[name] = run.flow.level_m3_per_year
    assert levels["whole"] > 0
    assert levels["crumb"] == pytest.approx(levels["whole"], rel=1e-6)
