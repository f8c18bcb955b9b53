"""The scenario file: typed keys, unknown keys rejected, --set overrides, every key documented."""

import re
from pathlib import Path

import pytest

from yieldscape import load_scenario
from yieldscape.config import KEYS, Range
from yieldscape.errors import ScenarioError

from helpers import scenario_dict, write_scenario

ROOT = Path(__file__).resolve().parents[1]


def test_sample_scenario_loads():
    scn = load_scenario(ROOT / "sample_region" / "scenario.toml")
    assert scn.scenario.periods * scn.scenario.period_years >= 100
    assert scn.inventory.path.is_file()
    aspen = scn.species["aspen"]
    assert aspen.curve == "table" and len(aspen.ages) == len(aspen.volumes_m3_ha[0]) > 2


@pytest.mark.parametrize(
    ("section", "table", "match"),
    [
        ("flow", {"bandd": 0.1}, r"\[flow\] key 'bandd'; did you mean 'band'"),
        ("scenario", {"periods": 2.5}, r"\[scenario\] periods = 2.5: must be a whole number"),
        ("scenario", {"harvest_timing": "dawn"}, r"choose one of: start, midpoint, end"),
        ("flow", {"band": 1.5}, r"\[flow\] band = 1.5: must be >= 0 and < 1"),
        ("harvest", {"priority": "biggest"}, r"priority = 'biggest': choose one of: oldest"),
        ("harvest", {"max_area_ha_per_period": -1}, r"must be > 0"),
    ],
)
def test_bad_keys_are_named(tmp_path, section, table, match):
    path = write_scenario(
        tmp_path / "s.toml", scenario_dict(tmp_path / "x.gpkg", **{section: table})
    )
    with pytest.raises(ScenarioError, match=match):
        load_scenario(path)


@pytest.mark.parametrize(
    ("species", "match"),
    [
        ({"a": -400.0}, r"\[species.pine\] a = -400.0: must be > 0"),
        ({"k": 0.0}, r"\[species.pine\] k = 0.0: must be > 0"),
        (
            {
                "curve": "stock-threshold",
                "r": 0.1,
                "capacity_m3_ha": 300.0,
                "initial_m3_ha": 5.0,
                "min_viable_m3_ha": 300.0,
            },
            r"min_viable_m3_ha = 300 must be below capacity_m3_ha",
        ),
        (
            {"curve": "stock-logistic", "r": -0.1, "capacity_m3_ha": 300.0, "initial_m3_ha": 5.0},
            r"r = -0.1: must be > 0",
        ),
        (
            {
                "curve": "stock-minimum",
                "r": 0.1,
                "capacity_m3_ha": 300.0,
                "initial_m3_ha": 50.0,
                "min_viable_m3_ha": 400.0,
            },
            r"min_viable_m3_ha = 400 must be below capacity_m3_ha = 300",
        ),
        (
            {"curve": "stock-minimum", "r": 0.1, "capacity_m3_ha": 300.0, "initial_m3_ha": 50.0},
            r"curve 'stock-minimum' needs key 'min_viable_m3_ha'",
        ),
        (
            {"curve": "stock-logistic", "r": 0.1, "capacity_m3_ha": 1e300, "initial_m3_ha": 5.0},
            r"capacity_m3_ha = 1e\+300: must be > 0 and <= 100000",
        ),
        (
            {"curve": "stock-depensation", "r": 0.0, "capacity_m3_ha": 300.0, "initial_m3_ha": 5.0},
            r"r = 0.0: must be > 0",
        ),
        (
            {"curve": "stock-depensation", "r": 0.1, "capacity_m3_ha": 300.0, "initial_m3_ha": 0},
            r"initial_m3_ha = 0: must be > 0",
        ),
        (
            {"curve": "stock-depensation", "r": 0.1, "capacity_m3_ha": 300.0, "initial_m3_ha": 350},
            r"initial_m3_ha = 350 must be in \(0, capacity_m3_ha = 300\]",
        ),
        (
            {
                "curve": "stock-depensation",
                "r": 0.1,
                "capacity_m3_ha": 300.0,
                "initial_m3_ha": 5.0,
                "min_viable_m3_ha": 2.0,
            },
            r"key 'min_viable_m3_ha' does not apply to curve 'stock-depensation'",
        ),
        ({"curve": "schumacher", "a": 500.0}, r"curve 'schumacher' needs key 'b'"),
        (
            {"min_harvest_age": None, "min_harvest_economic": True},
            r"min_harvest_economic = true needs \[economics\] discount_rate",
        ),
        ({"min_harvest_mai_share": 1.5}, r"min_harvest_mai_share = 1.5: must be > 0 and <= 1"),
        (
            {"products": {"ages": [40, 80], "saw": [0.2, 0.5], "pulp": [0.8, 0.6]}},
            r"shares at age 80 add up to 1.1, not 1",
        ),
    ],
)
def test_curve_parameters_out_of_domain(tmp_path, species, match):
    # Bad input of the growth issue: each named with its key and value.
    raw = scenario_dict(tmp_path / "x.gpkg")
    pine = raw["species"]["pine"]
    if species.get("curve", "chapman-richards") != "chapman-richards":
        for key in ("a", "k", "c"):
            pine.pop(key)
    pine.update({k: v for k, v in species.items() if v is not None})
    for k, v in species.items():
        if v is None:
            pine.pop(k)
    with pytest.raises(ScenarioError, match=match):
        load_scenario(write_scenario(tmp_path / "s.toml", raw))


def test_discount_rate_must_be_positive(tmp_path):
    raw = scenario_dict(tmp_path / "x.gpkg", economics={"discount_rate": 0.0})
    with pytest.raises(ScenarioError, match=r"\[economics\] discount_rate = 0.0: must be > 0"):
        load_scenario(write_scenario(tmp_path / "s.toml", raw))


def test_site_class_table_from_toml_and_csv(tmp_path):
    raw = scenario_dict(tmp_path / "x.gpkg")
    raw["species"]["pine"] = {
        "curve": "table",
        "ages": [20, 40, 60],
        "site_classes_m": [16.0, 22.0],
        "volumes_m3_ha": [[10, 60, 140], [30, 120, 240]],
        "min_harvest_age": 40,
    }
    scn = load_scenario(write_scenario(tmp_path / "a.toml", raw))
    pine = scn.species["pine"]
    assert pine.volumes_m3_ha == ((10, 60, 140), (30, 120, 240))
    assert (pine.site_index_min_m, pine.site_index_max_m) == (16.0, 22.0)
    (tmp_path / "t.csv").write_text(
        "site_index_m,age_years,volume_m3_ha\n"
        "16,20,10\n16,40,60\n16,60,140\n"
        "22,20,30\n22,40,120\n22,60,240\n"
    )
    raw["species"]["pine"] = {"curve": "table", "table_csv": "t.csv", "min_harvest_age": 40}
    from_csv = load_scenario(write_scenario(tmp_path / "b.toml", raw)).species["pine"]
    assert from_csv.volumes_m3_ha == pine.volumes_m3_ha
    assert from_csv.site_classes_m == (16.0, 22.0)


def test_unknown_section_and_species_key(tmp_path):
    raw = scenario_dict(tmp_path / "x.gpkg")
    raw["flows"] = {"band": 0.1}
    with pytest.raises(ScenarioError, match=r"unknown section 'flows'; did you mean 'flow'"):
        load_scenario(write_scenario(tmp_path / "a.toml", raw))
    raw = scenario_dict(tmp_path / "x.gpkg")
    raw["species"]["pine"]["ages"] = [10, 20]
    with pytest.raises(ScenarioError, match=r"\[species.pine\] key 'ages' does not apply"):
        load_scenario(write_scenario(tmp_path / "b.toml", raw))


def test_table_curve_checks(tmp_path):
    raw = scenario_dict(tmp_path / "x.gpkg")
    raw["species"]["pine"] = {
        "curve": "table",
        "ages": [10, 30, 20],
        "volumes_m3_ha": [1, 2, 3],
        "min_harvest_age": 20,
    }
    with pytest.raises(ScenarioError, match="ages must increase strictly"):
        load_scenario(write_scenario(tmp_path / "a.toml", raw))
    raw["species"]["pine"] = {"curve": "table", "table_csv": "missing.csv", "min_harvest_age": 2}
    with pytest.raises(ScenarioError, match="missing.csv: yield table file not found"):
        load_scenario(write_scenario(tmp_path / "b.toml", raw))
    (tmp_path / "t.csv").write_text("age_years,volume_m3_ha\n10,5\n20,x\n")
    raw["species"]["pine"]["table_csv"] = "t.csv"
    with pytest.raises(ScenarioError, match=r"t.csv, line 3: .*'x'"):
        load_scenario(write_scenario(tmp_path / "c.toml", raw))


def test_overrides_reach_any_key(tmp_path):
    path = write_scenario(tmp_path / "s.toml", scenario_dict(tmp_path / "x.gpkg"))
    scn = load_scenario(
        path,
        overrides=[
            "flow.band=0.15",
            "species.pine.k=0.05",
            "scenario.name=sensitivity one",
            "harvest.max_area_ha_per_period=40",
        ],
    )
    assert scn.flow.band == 0.15
    assert scn.species["pine"].k == 0.05
    assert scn.scenario.name == "sensitivity one"
    assert scn.harvest.max_area_ha_per_period == 40.0
    with pytest.raises(ScenarioError, match=r"unknown \[flow\] key 'bnd'"):
        load_scenario(path, overrides=["flow.bnd=0.1"])
    with pytest.raises(ScenarioError, match="expected KEY=VALUE"):
        load_scenario(path, overrides=["flow.band"])


def test_inventory_path_is_relative_to_scenario(tmp_path):
    (tmp_path / "sub").mkdir()
    raw = scenario_dict(Path("stands.gpkg"))
    scn = load_scenario(write_scenario(tmp_path / "sub" / "s.toml", raw))
    assert scn.inventory.path == (tmp_path / "sub" / "stands.gpkg").resolve()


def _rendered_default(spec) -> str:
    """How docs/scenario.md writes a key's default."""
    if spec.required:
        return "required"
    d = spec.default
    if d is None or d == ():
        return "none"
    if isinstance(d, bool):
        return "true" if d else "false"
    if isinstance(d, str):
        return f'`"{d}"`'
    return f"{d:g}"


def _docs_rows(section: str) -> dict[str, list[str]]:
    """The key rows (key -> cells) of the docs' part for a section: from its heading to the
    next heading of its level or above."""
    text = (ROOT / "docs" / "scenario.md").read_text(encoding="utf-8")
    name = section.replace("species.*", "species.<CODE>")
    head = re.search(rf"^(#+) .*`\[{{1,2}}{re.escape(name)}\]{{1,2}}`.*$", text, re.M)
    assert head, f"docs/scenario.md has no heading for [{name}]"
    level = len(head[1])
    rest = text[head.end() :]
    stop = re.search(rf"^#{{1,{level}}} ", rest, re.M)
    part = rest[: stop.start()] if stop else rest
    rows = {}
    for line in part.splitlines():
        m = re.match(r"^\| `([a-z_0-9]+)` \|(.*)\|$", line)
        if m:
            rows[m[1]] = [c.strip() for c in m[2].split("|")]
    return rows


def test_docs_state_every_key_with_its_default_and_unit():
    # Each key is stated once, in config (type, unit, default, doc, check); docs/scenario.md
    # has a row for it under its section whose unit and default agree with the code (a
    # default may be followed by words in parentheses).
    problems = []
    for section, keys in KEYS.items():
        rows = _docs_rows(section)
        for key, spec in keys.items():
            cells = rows.get(key)
            if cells is None:
                problems.append(f"{section}.{key}: no row")
                continue
            _, unit, default, _ = cells[0], cells[1], cells[2], cells[3:]
            want = _rendered_default(spec)
            if unit != spec.unit:
                problems.append(f"{section}.{key}: unit {unit!r}, code says {spec.unit!r}")
            if default != want and not default.startswith(want + " ("):
                problems.append(f"{section}.{key}: default {default!r}, code says {want!r}")
    assert not problems, "\n".join(problems)


def test_docs_state_every_numeric_range():
    # The table of docs/scenario.md "Checks on every value" states, for each numeric key, the
    # range outside which a value is an error and the usual range outside which it warns;
    # each row must read exactly as the ranges in config.KEYS.
    text = (ROOT / "docs" / "scenario.md").read_text(encoding="utf-8")
    for section, keys in KEYS.items():
        for key, ks in keys.items():
            if ks.kind not in ("int", "float", "floats", "volumes"):
                continue
            err = ks.check.text() if isinstance(ks.check, Range) and ks.check.text() else "finite"
            usual = f"{ks.usual.range.text()} ({ks.usual.why})" if ks.usual else ""
            row = f"| `{section.replace('species.*', 'species.<CODE>')}.{key}` | {err} | {usual} |"
            row = row.replace("|  |", "| |")
            assert row in text, row


def test_every_number_is_finite_and_in_range(tmp_path):
    # TOML allows nan and inf; no scenario number may be either (the keys' own ranges aside).
    for key, value in [
        ("flow.band", "nan"),
        ("flow.targets_m3", "[1.0, inf]"),
        ("species.pine.a", "inf"),
        ("report.age_class_years", "[nan]"),
    ]:
        raw = scenario_dict(tmp_path / "x.gpkg")
        path = write_scenario(tmp_path / "s.toml", raw)
        with pytest.raises(ScenarioError, match="finite"):
            load_scenario(path, overrides=[f"{key}={value}"])


def test_unusual_values_warn_and_usual_ones_do_not(tmp_path):
    raw = scenario_dict(tmp_path / "x.gpkg")
    path = write_scenario(tmp_path / "s.toml", raw)
    assert load_scenario(path).warnings == ()
    scn = load_scenario(path, overrides=["economics.discount_rate=0.5", "species.pine.a=40000"])
    assert scn.warnings == (
        "--set economics.discount_rate=0.5: [economics] discount_rate = 0.5: 0.5 is unusual: "
        "usually >= 0 and <= 0.15 (real rates of 2% to 8% are common practice)",
        "--set species.pine.a=40000: [species.pine] a = 40000: 40000 is unusual: usually >= 0 "
        "and <= 3000 (the largest stand volumes recorded are a few thousand m3/ha, from memory)",
    )
    assert "warnings" not in scn.to_dict()  # found by the run, not set by the user


def test_max_npv_needs_prices_and_a_rate(tmp_path):
    raw = scenario_dict(tmp_path / "x.gpkg", flow={"objective": "max-npv"})
    with pytest.raises(ScenarioError, match=r"max-npv' needs \[economics\] discount_rate"):
        load_scenario(write_scenario(tmp_path / "a.toml", raw))
    raw["economics"] = {"discount_rate": 0.03}
    with pytest.raises(
        ScenarioError,
        match=r"needs price_per_m3 for every species; missing "
        r"for: pine",
    ):
        load_scenario(write_scenario(tmp_path / "b.toml", raw))


def test_choices_come_from_the_registries_that_own_them():
    # One registry per kind of choice: curve families (growth.curves.FAMILIES), flow policies
    # and priority rules (yieldscape.policies); the scenario's keys offer exactly those.
    from yieldscape.growth.curves import FAMILIES
    from yieldscape.policies import FLOW_POLICIES, PRIORITIES

    assert KEYS["species.*"]["curve"].choices == tuple(FAMILIES)
    assert KEYS["flow"]["policy"].choices == tuple(FLOW_POLICIES)
    assert KEYS["harvest"]["priority"].choices == tuple(PRIORITIES)


def _units_scenario(tmp_path, units=None, partitions=None, unit_field="OWNER"):
    raw = scenario_dict(tmp_path / "x.gpkg")
    if unit_field:
        raw["inventory"]["fields"]["unit"] = unit_field
    if units is not None:
        raw["units"] = units
    if partitions is not None:
        raw["partitions"] = partitions
    return write_scenario(tmp_path / "s.toml", raw)


def test_units_and_partitions_load_with_their_keys(tmp_path):
    scn = load_scenario(
        _units_scenario(
            tmp_path,
            [
                {"name": "north", "ending_stock": 0.9},
                {"name": "south", "policy": "targets", "targets_m3": [10.0] * 10},
            ],
            [{"name": "old", "where": "AGE > 100", "min_share": 0.2, "max_m3": 5000}],
        )
    )
    assert scn.inventory.fields.unit == "OWNER"
    assert [(u.name, u.policy, u.ending_stock) for u in scn.units] == [
        ("north", None, 0.9),
        ("south", "targets", None),
    ]
    (part,) = scn.partitions
    assert (part.min_share, part.max_share, part.max_m3) == (0.2, None, 5000.0)


@pytest.mark.parametrize(
    ("units", "partitions", "unit_field", "match"),
    [
        ([{"name": "a"}], None, None, r"\[\[units\]\] needs \[inventory.fields\] unit"),
        ([{"name": "a"}, {"name": "a"}], None, "OWNER", r"name = 'a' is given twice"),
        ([{"name": "a", "band": 1.2}], None, "OWNER", r"\[units #1 'a'\] band = 1.2: must be"),
        ([{"name": "a", "policy": "most"}], None, "OWNER", r"policy = 'most': choose one of"),
        ([{"ending_stock": 1.0}], None, "OWNER", r"missing required key 'name'"),
        (
            [{"name": "a", "policy": "nondeclining"}],
            None,
            "OWNER",
            r"'a': policy = 'nondeclining' is not searched per unit",
        ),
        ([{"name": "a", "policy": "targets"}], None, "OWNER", r"'targets' needs targets_m3"),
        (None, [{"name": "p", "where": "AGE > 1"}], None, r"'p'\] needs a limit"),
        (
            None,
            [{"name": "p", "where": "AGE > 1", "min_share": 0.6, "max_share": 0.4}],
            None,
            r"min_share = 0.6 is above max_share = 0.4",
        ),
        (None, [{"name": "p", "where": "x", "min_m3": -5}], None, r"min_m3 = -5: must be >= 0"),
        (None, {"name": "p"}, None, r"partitions is an array of tables"),
    ],
)
def test_bad_units_and_partitions_are_named(tmp_path, units, partitions, unit_field, match):
    with pytest.raises(ScenarioError, match=match):
        load_scenario(_units_scenario(tmp_path, units, partitions, unit_field))
