"""Management units and harvest partitions through ``yieldscape run``: read back from the files
the command writes (issue 14)."""

import json
import re

import numpy as np
import pandas as pd
import pyogrio
import pytest

from yieldscape.cli.main import main

from helpers import (
    assert_outputs_documented,
    scenario_dict,
    squares,
    stand_attrs,
    write_layer,
    write_scenario,
)

N = 160  # 0.25-ha stands, 16 rows of 10: the north unit the first 8 rows, the south the rest
OLD = 80  # the partition: stands older than this at the start


def _attrs(rows=None):
    rng = np.random.default_rng(14)
    attrs = stand_attrs(N, rng.uniform(0, 150, N).round(), site=rng.uniform(14, 24, N).round())
    attrs["OWNER"] = np.where(np.arange(N) < N // 2, "north", "south").astype(object)
    if rows is not None:
        attrs = {k: v[rows] for k, v in attrs.items()}
    return attrs


def _scenario(d, name="scenario.toml", layer=None, unit_field=True, **edits):
    layer = layer or write_layer(d / "stands.gpkg", squares(N, side_m=50.0), _attrs())
    raw = scenario_dict(layer, flow={"policy": "even", "band": 0.0, "ending_stock": 0.5})
    raw["scenario"]["periods"] = 8
    if unit_field:  # else the plain single-flow run
        raw["inventory"]["fields"]["unit"] = "OWNER"
        raw["units"] = [{"name": "south", "ending_stock": 0.8}]  # listed first: unit 0
    for key, value in edits.items():
        if value is None:
            raw.pop(key, None)
        elif isinstance(value, dict) and isinstance(raw.get(key), dict):
            raw[key] = {**raw[key], **value}
        else:
            raw[key] = value
    return write_scenario(d / name, raw)


def _run(scenario, out):
    assert main(["run", str(scenario), "--out", str(out)]) == 0
    wf = pd.read_csv(out / "wood_flow.csv")
    return wf, json.loads((out / "run.json").read_text())


@pytest.fixture(scope="module")
def units_run(tmp_path_factory):
    """Two units sharing an area cap, and a partition: the old stands at most 60% of each
    period's harvest."""
    d = tmp_path_factory.mktemp("units")
    scn = _scenario(
        d,
        harvest={"priority": "oldest", "max_area_ha_per_period": 7.0},
        partitions=[{"name": "old", "where": f"AGE > {OLD}", "max_share": 0.6}],
        report={"figures": True, "markdown": True},
    )
    out = d / "out"
    wf, rec = _run(scn, out)
    return d, out, wf, rec


def test_regional_rows_are_the_sum_of_the_units(units_run):
    _, out, wf, rec = units_run
    assert list(wf["unit"].unique()) == ["region", "south", "north"]  # tables' order first
    region = wf[wf["unit"] == "region"].set_index("period")
    units = wf[wf["unit"] != "region"].groupby("period")
    for col in ("harvest_m3", "harvest_ha", "thinning_m3", "growing_stock_end_m3", "flow_level_m3"):
        np.testing.assert_allclose(units[col].sum(), region[col], rtol=1e-9, err_msg=col)
    mu = pd.read_csv(out / "management_units.csv").set_index("unit")
    assert list(mu.index) == ["south", "north"]
    assert (
        mu.loc["south", "ending_stock_share"] == 0.8
        and mu.loc["north", "ending_stock_share"] == 0.5
    )
    # each unit keeps its own flow (even, band 0) and its own ending stock, from its rows
    for name, rows in wf[wf["unit"] != "region"].groupby("unit"):
        level = mu.loc[name, "level_m3_per_year"] * 10
        assert (rows["harvest_m3"] >= level * (1 - 1e-9)).all()
        gs0, gs1 = rows["growing_stock_start_m3"].iloc[0], rows["growing_stock_end_m3"].iloc[-1]
        assert gs1 >= mu.loc[name, "ending_stock_share"] * gs0 * (1 - 1e-9)
        assert mu.loc[name, "ending_stock_ratio"] == pytest.approx(gs1 / gs0)
        assert mu.loc[name, "sustainable"]
    assert [u["unit"] for u in rec["units"]] == ["south", "north"]
    assert {c["check"] for c in rec["units"][0]["checks"]} >= {"flow_policy_held"}
    # the shared area cap holds for the region, not per unit
    assert (wf.loc[wf["unit"] == "region", "harvest_ha"] <= 7.0 * (1 + 1e-9)).all()
    # the stands layer says each stand's unit
    stands = pyogrio.read_dataframe(out / "projection.gpkg", layer="stands", read_geometry=False)
    assert (stands["unit"] == np.where(stands["stand_id"] <= N // 2, "north", "south")).all()


def test_partition_volumes_from_the_written_events(units_run):
    # Independently of partitions.csv: the events of the stands older than OLD at the start,
    # summed per period from harvest_events and the stands layer, against the 60% maximum.
    _, out, wf, rec = units_run
    gpkg = out / "projection.gpkg"
    stands = pyogrio.read_dataframe(gpkg, layer="stands", read_geometry=False)
    events = pyogrio.read_dataframe(gpkg, layer="harvest_events")
    old = set(stands.loc[stands["age_years"] > OLD, "stand_id"])
    mine = events[events["stand_id"].isin(old)].groupby("period")["volume_m3"].sum()
    parts = pd.read_csv(out / "partitions.csv").set_index("period")
    vol = mine.reindex(parts.index, fill_value=0.0)
    np.testing.assert_allclose(parts["volume_m3"], vol, rtol=1e-9, atol=1e-6)
    region = wf[wf["unit"] == "region"].set_index("period")["harvest_m3"]
    assert (vol <= 0.6 * region * (1 + 1e-7) + 1e-6).all()
    assert parts["holds"].all() and rec["partitions"][0]["holds_every_period"]
    assert vol.sum() > 0  # the partition is cut from, not shut out


def test_constraints_hold_the_lp_rows_and_the_costliest_rules(units_run):
    _, out, wf, rec = units_run
    c = pd.read_csv(out / "constraints.csv")
    assert set(c["kind"]) == {"partition", "ending_stock", "area_cap"}
    text = (out / "constraints.csv").read_text()  # no solver's -0 (an idle row's dual)
    assert not re.search(r"(^|,)-0(\.0*)?(e[+-]?\d+)?(,|$)", text, re.M), text
    assert set(c.loc[c["kind"] == "ending_stock", "unit"]) == {"south", "north"}
    # the LP's rows hold their limits (share rows: the partition's share of the LP's harvest)
    assert (c["activity"] >= c["lower"].fillna(-np.inf) - 1e-6 * c["lower"].abs().fillna(1)).all()
    assert (c["activity"] <= c["upper"].fillna(np.inf) * (1 + 1e-6) + 1e-6).all()
    # costliest_rules: each rule's cost summed over its rows, the three largest, from the CSV
    by = c.groupby("rule")["cost_m3_per_year_per_percent"].sum().sort_values(ascending=False)
    top = by[by > 1e-9].head(3)
    got = rec["costliest_rules"]
    assert [r["rule"] for r in got] == list(top.index)
    np.testing.assert_allclose([r["cost_m3_per_year_per_percent"] for r in got], top, rtol=1e-9)
    # the LP bound per unit is at least the unit's schedule level
    mu = pd.read_csv(out / "management_units.csv")
    assert (mu["lp_level_m3_per_year"] >= mu["level_m3_per_year"] * (1 - 1e-9)).all()
    report = (out / "report.html").read_text(encoding="utf-8")
    assert "Management units and partitions" in report and got[0]["rule"] in report.replace(
        "&#x27;", "'"
    )


def test_optimised_mode_gives_each_unit_its_lp_harvest(tmp_path):
    # flow.method = "optimize" with units: each unit takes its own LP harvest as its targets,
    # all lowered by one factor where the mapped plan misses one (the same share everywhere).
    scn = _scenario(tmp_path, flow={"method": "optimize"})
    wf, rec = _run(scn, tmp_path / "out")
    units = wf[wf["unit"] != "region"]
    assert set(units["unit"]) == {"north", "south"}
    share = units["harvest_m3"] / units["lp_bound_m3"]
    np.testing.assert_allclose(share, 1.0 - rec["flow"]["disaggregation_gap"], rtol=1e-9)
    assert units["meets_policy"].all()
    mu = pd.read_csv(tmp_path / "out" / "management_units.csv").set_index("unit")
    first = units[units["period"] == 1].set_index("unit")["harvest_m3"] / 10
    np.testing.assert_allclose(mu.loc[first.index, "level_m3_per_year"], first, rtol=1e-12)


def test_units_outputs_are_documented(units_run):
    d, out, _, _ = units_run
    assert_outputs_documented(out, d / "stands.gpkg")


def test_units_sharing_no_rule_run_as_their_separate_runs(tmp_path):
    # Issue 14 check: with no shared rule (no cap, cover, spatial rules or partitions) the
    # joint run gives each unit the level of its own run on its stands alone; the LP exactly
    # (to HiGHS's tolerance). The rule-based comparison runs without the LP-guided orders,
    # whose best is chosen for the units' total in the joint run and per unit alone.
    layer = write_layer(tmp_path / "stands.gpkg", squares(N, side_m=50.0), _attrs())
    joint_lp = _run(_scenario(tmp_path, "a.toml", layer), tmp_path / "a")[1]
    rules = {"policy": "even", "band": 0.0, "ending_stock": 0.5, "lp_bound": False}
    joint = _run(_scenario(tmp_path, "b.toml", layer, flow=rules), tmp_path / "b")[1]
    for name, rows, share in (("north", slice(0, N // 2), 0.5), ("south", slice(N // 2, N), 0.8)):
        alone = write_layer(tmp_path / f"{name}.gpkg", squares(N, side_m=50.0)[rows], _attrs(rows))
        flow = {"ending_stock": share}
        lp = _run(_scenario(tmp_path, f"{name}.toml", alone, False, flow=flow), tmp_path / name)[1]
        ru = _run(
            _scenario(
                tmp_path, f"{name}r.toml", alone, False, flow={**rules, "ending_stock": share}
            ),
            tmp_path / f"{name}r",
        )[1]
        unit_lp = {u["unit"]: u for u in joint_lp["units"]}[name]
        assert unit_lp["lp_level_m3_per_year"] == pytest.approx(
            lp["lp"]["level_m3_per_period"] / 10, rel=1e-7
        )
        unit = {u["unit"]: u for u in joint["units"]}[name]
        assert unit["level_m3_per_year"] == pytest.approx(
            ru["flow"]["level_m3_per_year"], rel=1e-12
        )


@pytest.mark.parametrize(
    ("edit", "attrs_edit", "message"),
    [
        (
            {"units": [{"name": "west"}]},
            None,
            r"\[\[units\]\] name = 'west': no stand has that unit in field 'OWNER'",
        ),
        ({}, ("OWNER", 3, "region"), r"the unit name 'region' is kept for the regional total"),
        ({}, ("OWNER", 5, None), r"field 'OWNER': null unit in 1 stands: row 6 \(stand 6\)"),
        (
            {"partitions": [{"name": "p", "where": "COLOUR == 'red'", "min_share": 0.1}]},
            None,
            r"\[\[partitions\]\] 'p'",
        ),
        (  # a minimum no stand can yield: the LP says which partitions can bind
            {"partitions": [{"name": "big", "where": f"AGE > {OLD}", "min_m3": 1e9}]},
            None,
            r"harvest LP is infeasible.*the \[\[partitions\]\] 'big'",
        ),
        (  # ... and the rule-based search names the partition and the period
            {
                "partitions": [{"name": "big", "where": f"AGE > {OLD}", "min_m3": 1e9}],
                "flow": {"lp_bound": False},
            },
            None,
            r"no schedule keeps every partition: in period 1, partition 'big' yields 0 m3",
        ),
        (  # a minimum no stand can give but by cutting nothing
            {
                "partitions": [{"name": "none", "where": "AGE > 9999", "min_share": 0.1}],
                "flow": {"lp_bound": False},
                "unit_field": False,
            },
            None,
            r"\[\[partitions\]\] 'none': no schedule with a harvest keeps them",
        ),
        (
            {"units": [{"name": "south", "policy": "targets", "targets_m3": [100.0, 200.0]}]},
            None,
            r"\[\[units\]\] #1 'south': targets_m3 has 2 values for scenario.periods = 8",
        ),
        (  # one regional flow the same
            {
                "partitions": [{"name": "big", "where": f"AGE > {OLD}", "min_m3": 1e9}],
                "flow": {"lp_bound": False},
                "unit_field": False,
            },
            None,
            r"no schedule keeps every partition: in period 1, partition 'big' yields 0 m3",
        ),
    ],
)
def test_bad_units_input_is_named(tmp_path, capsys, edit, attrs_edit, message):
    attrs = _attrs()
    if attrs_edit is not None:
        key, i, value = attrs_edit
        attrs[key] = attrs[key].copy()
        attrs[key][i] = value
    layer = write_layer(tmp_path / "stands.gpkg", squares(N, side_m=50.0), attrs)
    scn = _scenario(tmp_path, layer=layer, **edit)
    out = tmp_path / "out"
    assert main(["run", str(scn), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert re.search(message, err), err
    assert "Traceback" not in err and not out.exists()


def test_an_ending_stock_cost_agrees_with_a_finite_difference(tmp_path):
    # constraints.csv's cost of one percentage point of a unit's ending stock against the LP
    # bound re-solved with that unit's flow.ending_stock lowered by 0.01 (0.8 -> 0.79): the
    # first-order figure and the difference agree where the basis holds (LP sensitivity).
    base = _run(_scenario(tmp_path, "a.toml"), tmp_path / "a")[1]
    c = pd.read_csv(tmp_path / "a" / "constraints.csv")
    (cost,) = c.loc[
        (c["kind"] == "ending_stock") & (c["unit"] == "south"), "cost_m3_per_year_per_percent"
    ]
    looser = _run(
        _scenario(tmp_path, "b.toml", units=[{"name": "south", "ending_stock": 0.79}]),
        tmp_path / "b",
    )[1]
    gain = (looser["lp"]["level_m3_per_period"] - base["lp"]["level_m3_per_period"]) / 10
    assert cost > 0 and gain == pytest.approx(cost, rel=0.05)


def test_units_with_disturbance_replicates_and_a_layer_field_named_unit(tmp_path):
    # The replicates replay the region's harvest with units too; a layer field whose name is
    # an output column's in another case (GeoPackage names ignore case) is carried renamed.
    attrs = _attrs()
    attrs["Unit"] = np.arange(N)
    layer = write_layer(tmp_path / "stands.gpkg", squares(N, side_m=50.0), attrs)
    scn = _scenario(tmp_path, layer=layer, disturbance={"annual_rate": 0.005, "replicates": 3})
    wf, rec = _run(scn, tmp_path / "out")
    mc = pd.read_csv(tmp_path / "out" / "monte_carlo.csv")
    assert len(mc) == 8 and set(wf["unit"]) == {"region", "north", "south"}
    stands = pyogrio.read_dataframe(
        tmp_path / "out" / "projection.gpkg", layer="stands", read_geometry=False
    )
    assert (stands["input_Unit"] == np.arange(N)).all() and set(stands["unit"]) == {
        "north",
        "south",
    }
