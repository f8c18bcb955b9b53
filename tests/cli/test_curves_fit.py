"""`yieldscape curves` and `yieldscape fit` on real files."""

import re

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


def test_curves_draw_the_four_stock_shapes(tmp_path, capsys):
    # Issue 16: a scenario with a species on each stock shape; the curves report gives each
    # MSY in closed form and draws the four side by side (figures/stock_shapes.png).
    n = 4
    codes = ["logi", "mini", "thre", "depe"]
    attrs = stand_attrs(n, ages=60, species=codes, site=18.0)
    layer = write_layer(tmp_path / "s.gpkg", squares(n), attrs)
    raw = scenario_dict(layer)
    raw["species"] = {
        code: {
            "curve": f"stock-{shape}",
            "r": 0.1,
            "capacity_m3_ha": 300.0,
            "initial_m3_ha": 10.0,
            "min_harvest_age": 40,
            **({"min_viable_m3_ha": m} if m is not None else {}),
        }
        for code, shape, m in zip(
            codes,
            ["logistic", "minimum", "threshold", "depensation"],
            [None, 30.0, 5.0, None],
            strict=True,
        )
    }
    out = tmp_path / "rep"
    assert main(["curves", str(write_scenario(tmp_path / "scn.toml", raw)), "--out", str(out)]) == 0
    err = capsys.readouterr().err
    assert "mini: the starting stock is below the minimum viable stock" in err  # 10 < m = 30
    assert "thre:" not in err  # 10 > m = 5: grows
    table = pd.read_csv(out / "curves.csv").set_index("species")
    k, r = 300.0, 0.1
    # closed forms (Clark 1990 ch. 1; the issue's): minimum (K + m)/2 and r (K - m)^2 / (4K);
    # depensation 2K/3 and 4rK/27; logistic K/2 and rK/4
    assert table.loc["mini", "msy_stock_m3_ha"] == pytest.approx((k + 30.0) / 2)
    assert table.loc["mini", "msy_growth_m3_ha_yr"] == pytest.approx(r * (k - 30.0) ** 2 / (4 * k))
    assert table.loc["depe", "msy_stock_m3_ha"] == pytest.approx(2 * k / 3)
    assert table.loc["depe", "msy_growth_m3_ha_yr"] == pytest.approx(4 * r * k / 27)
    assert table.loc["logi", "msy_growth_m3_ha_yr"] == pytest.approx(r * k / 4)
    with Image.open(out / "figures" / "stock_shapes.png") as img:
        assert img.format == "PNG" and img.size == (1400, 1000)


@pytest.mark.parametrize(("shape", "m"), [("minimum", 40.0), ("depensation", None)])
def test_fit_recovers_a_stock_shape_from_integrated_points(tmp_path, capsys, shape, m):
    # Points from scipy's RK45 integration of dS/dt = g(S), independent of yieldscape's
    # closed forms and tables; the fit gives back r, K, S0 (and m).
    from scipy.integrate import solve_ivp

    from yieldscape.growth.stock import growth

    r, k, s0 = 0.07, 450.0, 60.0
    t = np.arange(5.0, 200.0, 5.0)
    sol = solve_ivp(
        lambda _, s: growth(s, r, k, m, shape), (0, 200), [s0], t_eval=t, rtol=1e-11, atol=1e-11
    )
    path = tmp_path / "p.csv"
    pd.DataFrame({"age_years": t, "volume_m3_ha": sol.y[0]}).to_csv(path, index=False)
    assert main(["fit", str(path), "--model", f"stock-{shape}", "--species", "moss"]) == 0
    out = capsys.readouterr().out
    got = dict(re.findall(r"^(\w+) = ([-+.\deE]+)$", out, re.M))
    assert float(got["r"]) == pytest.approx(r, rel=1e-3)
    assert float(got["capacity_m3_ha"]) == pytest.approx(k, rel=1e-3)
    assert float(got["initial_m3_ha"]) == pytest.approx(s0, rel=1e-2)
    if m is not None:
        assert float(got["min_viable_m3_ha"]) == pytest.approx(m, rel=1e-2)


def test_fit_of_a_stock_shape_stays_in_the_scenarios_bounds(tmp_path, capsys):
    # Falling points: the best stock curve would start above its capacity, which a scenario
    # rejects; the fit keeps S0 <= K (and m < K), so its snippet always loads.
    path = tmp_path / "p.csv"
    pd.DataFrame(
        {"age_years": [10, 20, 30, 40, 50], "volume_m3_ha": [400, 300, 200, 100, 50]}
    ).to_csv(path, index=False)
    for model in ("stock-depensation", "stock-minimum"):
        assert main(["fit", str(path), "--model", model]) == 0
        got = dict(re.findall(r"^(\w+) = ([-+.\deE]+)$", capsys.readouterr().out, re.M))
        assert float(got["initial_m3_ha"]) <= float(got["capacity_m3_ha"]) * (1 + 1e-12)
