"""The verdict: a regulated forest is sustainable, a forest liquidated by a too-high target is
not, and the report names the period where it fails.

The regulated forest is the area-control case (Bettinger, Boston, Siry & Grebner 2009, Forest
Management and Planning, Ch. 11; Davis & Johnson, Forest Management): equal area in each age
class up to the rotation R yields (A/R) V(R) a year for ever. The liquidated forest is all old
growth asked for more than it can give; the period where it fails is worked out below from the
Chapman-Richards formula alone.
"""

import json

import numpy as np
import pandas as pd
import pytest

from yieldscape.cli.main import main

from helpers import scenario_dict, squares, stand_attrs, write_layer, write_scenario

A, K, C, R, L = 400.0, 0.03, 3.0, 60, 10


def volume(age):
    return A * (1 - np.exp(-K * age)) ** C  # Chapman-Richards (Richards 1959)


def run(tmp_path, ages, **sections):
    layer = write_layer(tmp_path / "s.gpkg", squares(len(ages)), stand_attrs(len(ages), ages))
    raw = scenario_dict(layer, **sections)
    raw["species"]["pine"]["regen_delay_years"] = 0
    scn = write_scenario(tmp_path / "scn.toml", raw)
    out = tmp_path / "out"
    assert main(["run", str(scn), "--out", str(out), "-q"]) == 0
    verdict = pd.read_csv(out / "verdict.csv")
    return out, verdict, json.loads((out / "run.json").read_text())["verdict"]


def test_a_regulated_forest_is_sustainable(tmp_path):
    # six 10-year classes of 10 ha, the oldest reaching R = 60 at the first harvest moment
    ages = np.repeat(np.arange(5.0, 60.0, 10.0), 10)
    out, table, verdict = run(
        tmp_path,
        ages,
        scenario={"periods": 12},
        flow={"policy": "even", "band": 0.0, "ending_stock": 1.0},
    )
    wf = pd.read_csv(out / "wood_flow.csv")
    # area control: (A / R) V(R) per year
    assert wf["harvest_m3_per_year"].to_numpy() == pytest.approx(len(ages) / R * volume(R))
    assert verdict["sustainable"] is True
    assert table["holds"].all(), table
    assert verdict["headline"].startswith("Sustainable")
    html = (out / "report.html").read_text(encoding="utf-8")
    assert verdict["headline"] in html and "Not sustainable" not in html


def test_a_forest_liquidated_by_a_too_high_target_is_not_and_the_period_is_named(tmp_path):
    n = 100
    ages = np.full(n, 100.0)  # 100 ha of old growth, nothing younger
    target = 25 * volume(105.0)  # 25 ha at the first harvest moment, every period
    # By hand: period p cuts target / V(age at its harvest moment) hectares of old growth
    # (ages 105, 115, ...); regrowth cut in period 1 reaches R only in period 7. The first
    # period whose old growth left cannot meet the target is where it fails.
    need = target / volume(100.0 + L * np.arange(6) + L / 2)
    expected = int(np.argmax(np.cumsum(need) > n * (1 + 1e-12))) + 1
    assert 2 <= expected <= 6
    out, table, verdict = run(
        tmp_path,
        ages,
        scenario={"periods": 10},
        flow={"policy": "targets", "targets_m3": [float(target)] * 10, "ending_stock": 0.0},
    )
    assert verdict["sustainable"] is False
    # verdict.csv keeps the check's name and adds its label, which the headline uses
    assert list(table.columns) == ["check", "holds", "first_failing_period", "detail", "label"]
    failed = table.loc[~table["holds"], "label"].tolist()
    assert "Flow policy held" in failed
    for label in failed:
        assert label[0].lower() + label[1:] in verdict["headline"]
    for label in table.loc[table["holds"], "label"]:
        assert label[0].lower() + label[1:] not in verdict["headline"]
    policy = table.set_index("check").loc["flow_policy_held"]
    assert not policy["holds"]
    assert policy["first_failing_period"] == expected
    assert f"first in period {expected}" in policy["detail"]
    wf = pd.read_csv(out / "wood_flow.csv")
    assert wf["meets_policy"].tolist() == [p < expected for p in range(1, 11)]
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "Not sustainable" in html and f"first in period {expected}" in html


def test_the_yield_check_without_a_long_term_sustained_yield_gives_no_share():
    # no harvestable growth (LTSY 0): the check compares amounts, a share of 0 would be "inf%"
    from yieldscape.reporting.indicators import _ltsy_check

    wf = pd.DataFrame({"harvest_m3_per_year": [5.0, 0.0, 0.0]})
    none = _ltsy_check(wf, 2, 0.0)
    assert none.holds and "inf" not in none.detail and "against" in none.detail
    some = _ltsy_check(pd.DataFrame({"harvest_m3_per_year": [0.0, 3.0, 1.0]}), 2, 0.0)
    assert not some.holds and "2 m3/year" in some.detail and "inf" not in some.detail
    assert some.period == 2  # the first of the last two periods over it
    half = _ltsy_check(wf, 3, 10.0 / 3)  # mean 5/3 of 10/3: 50%
    assert half.holds and "50% of" in half.detail
