"""`yieldscape curves` and `yieldscape fit` on real files."""

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from yieldscape.cli.main import main
from yieldscape.growth import chapman_richards

from helpers import ROOT, scenario_dict, squares, stand_attrs, write_layer, write_scenario

CONTRACT = [
    "species",
    "site_index",
    "culmination_age_years",
    "max_mai_m3_ha_yr",
    "culminated",
    "min_harvest_age_years",
    "faustmann_rotation_years",
    "fisher_rotation_years",
    "lev_per_ha",
    "msy_stock_m3_ha",
    "msy_growth_m3_ha_yr",
]


def test_curves_report_with_two_families(tmp_path, capsys):
    n = 6
    attrs = stand_attrs(
        n,
        ages=60,
        species=["pine", "pine", "pine", "moss", "moss", "moss"],
        site=[16.0, 16.2, 22.0, 18.0, 18.0, 18.0],
    )
    layer = write_layer(tmp_path / "s.gpkg", squares(n), attrs)
    raw = scenario_dict(layer)
    raw["species"]["pine"].update(
        site_index_ref_m=18.0,
        price_per_m3=20.0,
        regen_cost_per_ha=300.0,
        min_harvest_mai_share=0.95,
    )
    raw["species"]["moss"] = {
        "curve": "stock-threshold",
        "r": 0.1,
        "capacity_m3_ha": 300.0,
        "initial_m3_ha": 10.0,
        "min_viable_m3_ha": 20.0,
        "min_harvest_age": 40,
    }
    raw["economics"] = {"discount_rate": 0.03}
    scenario = write_scenario(tmp_path / "scn.toml", raw)
    out = tmp_path / "rep"
    assert main(["curves", str(scenario), "--out", str(out)]) == 0
    captured = capsys.readouterr()
    assert "collapse instead of growing" in captured.err  # S0 = 10 < S_min = 20: it says so
    table = pd.read_csv(out / "curves.csv")
    for col in CONTRACT:
        assert col in table.columns
    pine = table[table["species"] == "pine"]
    assert pine["site_index"].tolist() == [16.0, 22.0]  # rounded to 1 m, one row per value
    assert (pine["fisher_rotation_years"] > pine["faustmann_rotation_years"]).all()
    moss = table[table["species"] == "moss"].iloc[0]
    # MSY of the threshold model (closed form, Clark 1990): larger root of 3S^2-2(K+m)S+mK
    k, m = 300.0, 20.0
    s = (2 * (k + m) + np.sqrt(4 * (k + m) ** 2 - 12 * m * k)) / 6
    assert moss["msy_stock_m3_ha"] == pytest.approx(s)
    assert np.isnan(moss["lev_per_ha"])  # no price: no economics
    for code in ("pine", "moss"):
        with Image.open(out / "figures" / f"curves_{code}.png") as img:
            assert img.format == "PNG" and img.size[0] >= 1000


def test_curves_of_the_sample_region(tmp_path):
    scenario = ROOT / "sample_region" / "scenario.toml"  # wherever the suite is started
    assert main(["curves", str(scenario), "--out", str(tmp_path), "-q"]) == 0
    table = pd.read_csv(tmp_path / "curves.csv")
    docs = (ROOT / "docs" / "outputs.md").read_text(encoding="utf-8")
    for col in table.columns:
        assert f"| `{col}` |" in docs, col
    assert set(table["curve"]) >= {"chapman-richards", "schumacher", "table"}
    assert table["culminated"].all()


def test_fit_round_trip_prints_snippet(tmp_path, capsys):
    ages = np.arange(10, 150, 10.0)
    pd.DataFrame(
        {"age_years": ages, "volume_m3_ha": chapman_richards(ages, 450, 0.03, 2.7)}
    ).to_csv(tmp_path / "p.csv", index=False)
    assert (
        main(["fit", str(tmp_path / "p.csv"), "--model", "chapman-richards", "--species", "pine"])
        == 0
    )
    out = capsys.readouterr().out
    assert "[species.pine]" in out and 'curve = "chapman-richards"' in out
    assert "a = 450" in out and "R2 1.0000" in out


@pytest.mark.parametrize(
    ("content", "pattern"),
    [
        (None, "points file not found"),
        ("age,vol\n1,2\n", "no column 'age_years'"),
        ("age_years,volume_m3_ha\n10,5\n20,abc\n", r"line 3, column 'volume_m3_ha': 'abc'"),
        ("age_years,volume_m3_ha\n10,5\n20,7\n", "2 points cannot fit 3 parameters"),
    ],
)
def test_fit_bad_input(tmp_path, capsys, content, pattern):
    path = tmp_path / "p.csv"
    if content is not None:
        path.write_text(content)
    assert main(["fit", str(path)]) == 2
    assert pattern in capsys.readouterr().err
