"""A corpus of bad values: every number read from any input is finite and in its stated range,
every geometry is repaired or rejected the same way. Each case runs the real command on a
six-stand forest and asserts exit code 2, one message naming the file, key, field, row or
value, no traceback, and nothing written (no output folder, no staged sibling)."""

import re

import numpy as np
import pytest
import shapely

from yieldscape.cli.main import main

from helpers import scenario_dict, squares, stand_attrs, write_layer, write_scenario

N = 6


def _put(path: str, value):
    """An edit of the raw scenario: set the dotted key ``path`` to ``value``."""

    def edit(raw, tmp_path):
        *tables, key = path.split(".")
        node = raw
        for t in tables:
            node = node.setdefault(t, {})
        node[key] = value(tmp_path) if callable(value) else value

    return edit


def _table_species(ages, volumes, **more):
    def edit(raw, tmp_path):
        raw["species"]["pine"] = {
            "curve": "table",
            "ages": ages,
            "volumes_m3_ha": volumes,
            "min_harvest_age": 40,
            **more,
        }

    return edit


def _csv_species(text):
    def edit(raw, tmp_path):
        (tmp_path / "pine.csv").write_text(text, encoding="utf-8")
        raw["species"]["pine"] = {"curve": "table", "table_csv": "pine.csv", "min_harvest_age": 40}

    return edit


def _attrs(field, value, row=2):
    attrs = stand_attrs(N, ages=np.arange(N) * 20.0 + 40)
    col = attrs[field].astype(object) if isinstance(value, str) else attrs[field].copy()
    col[row] = value
    attrs[field] = col
    return attrs


def _targets(values):
    def edit(raw, tmp_path):
        raw["scenario"]["periods"] = len(values)
        raw["flow"]["policy"] = "targets"
        raw["flow"]["targets_m3"] = values

    return edit


def _overlay(geom, strict_step=True):
    def edit(raw, tmp_path):
        attrs = {"KIND": np.array(["reserve"], dtype=object)}
        write_layer(tmp_path / "reserves.gpkg", [geom], attrs, layer="reserves")
        raw["landbase"] = {"steps": [{"label": "reserves", "layer": "reserves.gpkg"}]}

    return edit


_X, _Y = 500_000.0, 6_700_000.0
BOWTIE = shapely.Polygon([(_X, _Y), (_X + 150, _Y + 150), (_X + 150, _Y), (_X, _Y + 150)])
NAN, INF = float("nan"), float("inf")

# name -> (scenario edit, layer attrs, extra CLI args, message pattern)
CASES = {
    # [scenario]
    "horizon of 10000 periods": (
        _put("scenario.periods", 10000),
        None,
        [],
        r"\[scenario\] periods = 10000: must be >= 1 and <= 1000",
    ),
    "period of 10000 years": (
        _put("scenario.period_years", 10000),
        None,
        [],
        r"period_years = 10000: must be >= 1 and <= 100",
    ),
    "horizon beyond 1000 years": (
        _put("scenario.periods", 101),
        None,
        [],
        r"periods = 101 x period_years = 10 is a horizon of 1,010 years; at most 1,000",
    ),
    "start year beyond any calendar": (
        _put("scenario.start_year", 99_999_999_999),
        None,
        [],
        r"start_year = 99999999999: must be >= 1 and <= 9999",
    ),
    "horizon ending after year 9999": (
        _put("scenario.start_year", 9950),
        None,
        [],
        r"start_year = 9950 with a horizon of 100 years ends in 10050",
    ),
    "start year not whole": (
        _put("scenario.start_year", 2030.5),
        None,
        [],
        r"start_year = 2030.5: must be a whole number",
    ),
    # [flow]
    "target NaN": (
        _targets([NAN, 1.0]),
        None,
        [],
        r"targets_m3 = \[nan, 1.0\]: nan is not a finite",
    ),
    "target inf": (
        _targets([INF, 1.0]),
        None,
        [],
        r"targets_m3 = \[inf, 1.0\]: inf is not a finite",
    ),
    "target negative": (
        _targets([-5.0, 1.0]),
        None,
        [],
        r"targets_m3 = \[-5.0, 1.0\]: must be >= 0",
    ),
    "target text": (
        _targets(["a lot", 1.0]),
        None,
        [],
        r"targets_m3 = .*must be an array of numbers",
    ),
    "band inf": (_put("flow.band", INF), None, [], r"\[flow\] band = inf: must be a finite number"),
    "band NaN": (_put("flow.band", NAN), None, [], r"\[flow\] band = nan: must be a finite number"),
    "ending stock negative": (
        _put("flow.ending_stock", -1.0),
        None,
        [],
        r"\[flow\] ending_stock = -1.0: must be >= 0",
    ),
    "step-down of 100%": (
        _put("flow.step_down_max", 1.0),
        None,
        [],
        r"step_down_max = 1.0: must be > 0 and < 1",
    ),
    "LP age class NaN": (
        _put("flow.lp_age_class_years", NAN),
        None,
        [],
        r"lp_age_class_years = nan: must be a finite number",
    ),
    # [harvest]
    "area cap NaN": (
        _put("harvest.max_area_ha_per_period", NAN),
        None,
        [],
        r"max_area_ha_per_period = nan: must be a finite number",
    ),
    "area cap zero": (
        _put("harvest.max_area_ha_per_period", 0),
        None,
        [],
        r"max_area_ha_per_period = 0: must be > 0",
    ),
    "green-up inf": (
        _put("harvest.greenup_years", INF),
        None,
        [],
        r"greenup_years = inf: must be a finite number",
    ),
    "separation negative": (
        _put("harvest.separation_m", -10),
        None,
        [],
        r"separation_m = -10: must be >= 0",
    ),
    # [species.*]
    "asymptote inf": (
        _put("species.pine.a", INF),
        None,
        [],
        r"\[species.pine\] a = inf: must be a finite",
    ),
    "rate NaN": (
        _put("species.pine.k", NAN),
        None,
        [],
        r"\[species.pine\] k = nan: must be a finite",
    ),
    "rate zero": (_put("species.pine.k", 0.0), None, [], r"\[species.pine\] k = 0.0: must be > 0"),
    "site exponent inf": (
        _put("species.pine.site_exponent_a", INF),
        None,
        [],
        r"site_exponent_a = inf: must be a finite number",
    ),
    "minimum harvest age negative": (
        _put("species.pine.min_harvest_age", -1),
        None,
        [],
        r"min_harvest_age = -1: must be >= 0 and <= 5000",
    ),
    "minimum harvest age a million": (
        _put("species.pine.min_harvest_age", 1e6),
        None,
        [],
        r"min_harvest_age = 1000000.0: must be >= 0 and <= 5000",
    ),
    "regeneration delay inf": (
        _put("species.pine.regen_delay_years", INF),
        None,
        [],
        r"regen_delay_years = inf: must be a finite number",
    ),
    "MAI share above one": (
        _put("species.pine.min_harvest_mai_share", 1.5),
        None,
        [],
        r"min_harvest_mai_share = 1.5: must be > 0 and <= 1",
    ),
    "site range negative": (
        _put("species.pine.site_index_min_m", -3.0),
        None,
        [],
        r"site_index_min_m = -3.0: must be > 0",
    ),
    "price NaN": (
        _put("species.pine.price_per_m3", NAN),
        None,
        [],
        r"price_per_m3 = nan: must be a finite",
    ),
    "table age inf": (
        _table_species([0.0, 50.0, INF], [0.0, 100.0, 200.0]),
        None,
        [],
        r"ages = \[0.0, 50.0, inf\]: inf is not a finite number",
    ),
    "table volume NaN": (
        _table_species([0.0, 50.0, 100.0], [0.0, NAN, 200.0]),
        None,
        [],
        r"volumes_m3_ha = \[0.0, nan, 200.0\]: nan is not a finite number",
    ),
    "table volume negative": (
        _table_species([0.0, 50.0, 100.0], [0.0, -1.0, 200.0]),
        None,
        [],
        r"volumes_m3_ha = \[0.0, -1.0, 200.0\]: must be >= 0",
    ),
    "table ages beyond 5000 years": (
        _table_species([0.0, 50.0, 9000.0], [0.0, 100.0, 200.0]),
        None,
        [],
        r"ages = \[0.0, 50.0, 9000.0\]: must be >= 0 and <= 5000",
    ),
    "yield CSV with inf": (
        _csv_species("age_years,volume_m3_ha\n0,0\n50,inf\n100,300\n"),
        None,
        [],
        r"pine.csv, line 3: .*every value must be a finite number",
    ),
    "yield CSV age NaN": (
        _csv_species("age_years,volume_m3_ha\n0,0\nnan,150\n100,300\n"),
        None,
        [],
        r"pine.csv, line 3: .*every value must be a finite number",
    ),
    "yield CSV with text": (
        _csv_species("age_years,volume_m3_ha\n0,0\n50,lots\n100,300\n"),
        None,
        [],
        r"pine.csv, line 3: .*not a number",
    ),
    "yield CSV with a negative site": (
        _csv_species("age_years,volume_m3_ha,site_index_m\n0,0,-2\n50,200,-2\n"),
        None,
        [],
        r"pine.csv, line 2: .*a site index > 0",
    ),
    "product share NaN": (
        _put("species.pine.products", {"ages": [40, 80], "saw": [NAN, 0.5], "pulp": [0.5, 0.5]}),
        None,
        [],
        r"\[species.pine.products\] saw: nan is not a finite number",
    ),
    # [economics], [growth], [disturbance], [report], [[cover]], [[landbase.steps]]
    "discount rate 150%": (
        _put("economics.discount_rate", 1.5),
        None,
        [],
        r"discount_rate = 1.5: must be > 0 and < 1",
    ),
    "max age zero": (
        _put("growth.max_age_years", 0.0),
        None,
        [],
        r"max_age_years = 0.0: must be >= 1 and <= 5000",
    ),
    "disturbance rate NaN": (
        _put("disturbance.annual_rate", NAN),
        None,
        [],
        r"annual_rate = nan: must be a finite number",
    ),
    "disturbance rate of one": (
        _put("disturbance.annual_rate", 1.0),
        None,
        [],
        r"annual_rate = 1.0: must be >= 0 and < 1",
    ),
    "negative seed": (_put("disturbance.seed", -1), None, [], r"seed = -1: must be >= 0"),
    "a million replicates": (
        _put("disturbance.replicates", 1_000_000),
        None,
        [],
        r"replicates = 1000000: must be >= 0 and <= 100000",
    ),
    "age class width inf": (
        _put("report.age_class_width_years", INF),
        None,
        [],
        r"age_class_width_years = inf: must be a finite number",
    ),
    "raster cell of a tenth of a millimetre": (
        _put("report.raster_cell_m", 0.0001),
        None,
        [],
        r"raster_cell_m = 0.0001: a grid over the stands \(0.6 x 0.1 km\) would hold "
        r"[\d,]+ cells, more than the 200,000,000 allowed; use raster_cell_m >= 0.02",
    ),
    "cover share NaN": (
        _put("cover", [{"zone": "*", "older_than_years": 100, "min_share": NAN}]),
        None,
        [],
        r"\[cover #1\] min_share = nan: must be a finite number",
    ),
    "cover age negative": (
        _put("cover", [{"zone": "*", "older_than_years": -5, "min_share": 0.1}]),
        None,
        [],
        r"\[cover #1\] older_than_years = -5: must be >= 0",
    ),
    "netdown percent 150": (
        _put("landbase", {"steps": [{"label": "roads", "percent": 150}]}),
        None,
        [],
        r"\[landbase.steps #1 'roads'\] percent = 150: must be >= 0 and <= 100",
    ),
    "netdown threshold inf": (
        _put("landbase", {"steps": [{"label": "steep", "raster": "x.tif", "above": INF}]}),
        None,
        [],
        r"above = inf: must be a finite number",
    ),
    "netdown rule adds a number to text": (
        _put("landbase", {"steps": [{"label": "odd", "where": "SPP + 1 > 2"}]}),
        None,
        [],
        r"\[\[landbase.steps\]\] #1 'odd': where = 'SPP \+ 1 > 2': 'SPP \+ 1' mixes text "
        r"and numbers",
    ),
    "netdown rule negates text": (
        _put("landbase", {"steps": [{"label": "odd", "where": "-SPP == 1"}]}),
        None,
        [],
        r"where = '-SPP == 1': '-SPP' negates text",
    ),
    "self-intersecting overlay with --strict": (
        _overlay(BOWTIE),
        None,
        ["--strict"],
        r"#1 'reserves': 1 invalid overlay geometries \(--strict\): feature 1: Self-intersection",
    ),
    # regimes: regeneration, thinning, analysis units
    "regrowth as an unknown code": (
        _put("species.pine.regenerate_as", "ghost"),
        None,
        [],
        r"\[species.pine\] regenerate_as names 'ghost', which has no \[species.ghost\] table",
    ),
    "regrowth shares not adding to 1": (
        _put("species.pine.regenerate_as", {"pine": 0.5, "pine2": 0.2}),
        None,
        [],
        r"regenerate_as = .*the shares add up to 0.7, not 1",
    ),
    "an empty choice": (
        _put("species.pine.regenerate_as", []),
        None,
        [],
        r"regenerate_as = \[\]: a choice needs at least one code",
    ),
    "a thinning share above one": (
        _put("species.pine.thinnings", [{"age_years": 30, "removal_share": 1.5}]),
        None,
        [],
        r"\[species.pine.thinnings #1\] removal_share = 1.5: must be > 0 and < 1",
    ),
    "a thinning share of zero": (
        _put("species.pine.thinnings", [{"age_years": 30, "removal_share": 0}]),
        None,
        [],
        r"removal_share = 0: must be > 0 and < 1",
    ),
    "a thinning age beyond the curve": (
        _put("species.pine.thinnings", [{"age_years": 450, "removal_share": 0.2}]),
        None,
        [],
        r"age_years = 450 is beyond the curve \(growth.max_age_years is 400\)",
    ),
    "a thinning age beyond the table": (
        _table_species(
            [0.0, 50.0, 100.0],
            [0.0, 150.0, 300.0],
            thinnings=[{"age_years": 120, "removal_share": 0.2}],
        ),
        None,
        [],
        r"age_years = 120 is beyond the curve \(the table's last age is 100\)",
    ),
    "removals larger than the stand": (
        _table_species([0.0, 50.0, 100.0], [0.0, 150.0, 300.0], thinning_m3_ha=[0.0, 200.0, 0.0]),
        None,
        [],
        r"thinning_m3_ha = 200 at age 50 is larger than the standing volume 150",
    ),
    "table removals on a parametric curve": (
        _put("species.pine.thinning_m3_ha", [10.0, 20.0]),
        None,
        [],
        r"key 'thinning_m3_ha' does not apply to curve 'chapman-richards'",
    ),
    "an analysis unit of an unknown code": (
        _put("inventory.analysis_units", [{"where": "AGE > 50", "species": "ghost"}]),
        None,
        [],
        r"\[\[inventory.analysis_units\]\] #1 species = 'ghost' has no \[species.ghost\] table",
    ),
    "an analysis unit naming an unknown field": (
        _put("inventory.analysis_units", [{"where": "ORIGIN == 'planted'", "species": "pine"}]),
        None,
        [],
        r"\[\[inventory.analysis_units\]\] #1: where = .* names field 'ORIGIN'",
    ),
    # the stand layer
    "age inf": (
        None,
        _attrs("AGE", INF),
        [],
        r"field 'AGE': not a finite number in 1 stands: row 3",
    ),
    "age 10000": (
        None,
        _attrs("AGE", 10_000.0),
        [],
        r"field 'AGE': age above 5000 years, older than any tree known in 1 stands: "
        r"row 3 \(stand 3\): 10000",
    ),
    "site index inf": (
        None,
        _attrs("SI", INF),
        [],
        r"field 'SI': not a finite number in 1 stands: row 3",
    ),
    "site index in feet, 500": (
        None,
        _attrs("SI", 500.0),
        [],
        r"field 'SI': site index above 150 m.* row 3 \(stand 3\): 500",
    ),
    "site index zero": (None, _attrs("SI", 0.0), [], r"site index must be > 0 in 1 stands: row 3"),
    "age as text": (
        None,
        _attrs("AGE", "old"),
        [],
        r"field 'AGE': not a number in 1 stands: row 3",
    ),
}


@pytest.mark.parametrize("name", list(CASES))
def test_bad_value_exits_2_names_it_and_writes_nothing(tmp_path, capsys, name):
    edit, attrs, args, pattern = CASES[name]
    attrs = attrs if attrs is not None else stand_attrs(N, ages=np.arange(N) * 20.0 + 40)
    layer = write_layer(tmp_path / "stands.gpkg", squares(N), attrs)
    raw = scenario_dict(layer)
    if edit is not None:
        edit(raw, tmp_path)
    scenario = write_scenario(tmp_path / "scenario.toml", raw)
    out = tmp_path / "out"
    code = main(["run", str(scenario), "--out", str(out), *args])
    err = capsys.readouterr().err
    assert code == 2, err
    errors = [line for line in err.splitlines() if line.startswith("yieldscape: error:")]
    assert len(errors) == 1, err
    assert re.search(pattern, errors[0]), errors[0]
    assert "Traceback" not in err
    assert not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".")) == []
