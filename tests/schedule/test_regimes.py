"""Management regimes against published identities and tables: what stands regrow into, and
thinnings, on small forests run through the scenario and the library (no files)."""

import math

import numpy as np
import pytest

import yieldscape

from helpers import scenario_dict, squares, stand_attrs, write_layer, write_scenario


def cr(a: float, k: float, c: float, t: float) -> float:
    """Chapman-Richards written out: V = a (1 - exp(-k t))^c."""
    return a * (1 - math.exp(-k * t)) ** c


def _run(tmp_path, ages, code, **sections):
    """Stands of one species ``code`` aged ``ages``, 1 ha each, under the scenario sections."""
    n = len(ages)
    attrs = stand_attrs(n, ages=np.asarray(ages, float), species=code)
    layer = write_layer(tmp_path / "stands.gpkg", squares(n), attrs)
    units = sections.pop("analysis_units", None)
    raw = scenario_dict(layer, **sections)
    if units:
        raw["inventory"]["analysis_units"] = units
    path = write_scenario(tmp_path / "scenario.toml", raw)
    return yieldscape.run(yieldscape.load_scenario(path), None)


def _species(a, k, c, **rest):
    return {"curve": "chapman-richards", "a": a, "k": k, "c": c, "min_harvest_age": 60, **rest}


def test_conversion_of_a_regulated_forest_follows_area_control(tmp_path):
    # A fully regulated forest on curve N converted to curve M at rotation R = 60: one age
    # class (A / R x L = 1 ha) cut a period, each regrowing on M. The harvest is (A/R) N(R)
    # a period for the first rotation, then (A/R) M(R) (the area-control identity: Davis &
    # Johnson, Forest Management, from memory; Bettinger et al. 2009, Ch. 11).
    result = _run(
        tmp_path,
        [60, 50, 40, 30, 20, 10],
        "natural",
        scenario={"periods": 12, "harvest_timing": "start"},
        species={
            "natural": _species(400.0, 0.03, 3.0, regenerate_as="planted"),
            "planted": _species(520.0, 0.035, 3.0),
        },
        harvest={"max_area_ha_per_period": 1.0},
        flow={"policy": "targets", "targets_m3": [1e9] * 12, "ending_stock": 0.0},
    )
    h = result.wood_flow["harvest_m3"].to_numpy()
    np.testing.assert_allclose(h[:6], cr(400.0, 0.03, 3.0, 60), rtol=1e-6)
    np.testing.assert_allclose(h[6:], cr(520.0, 0.035, 3.0, 60), rtol=1e-6)
    regen = result.regeneration
    assert set(zip(regen["from_species"], regen["to_species"], strict=True)) == {
        ("natural", "planted"),
        ("planted", "planted"),
    }
    np.testing.assert_allclose(regen.groupby("period")["area_ha"].sum(), 1.0)


# Albert, Nagel, Schmidt, Nagel & Spellmann (2021), Eine neue Generation von Ertragstafeln
# fuer Eiche, Buche, Fichte, Douglasie und Kiefer, NW-FVA: Scots pine (Kiefer), yield class I.
# Age, standing volume after thinning V, removals of the 5 years before V_aus, total growth
# GWL and its mean annual increment dGZ (m3/ha). The first removal is all removals up to 25
# (GWL - V at 25), so that standing plus removals so far is the table's total growth.
TABLE = [  # age, V, V_aus, GWL, dGZ
    (25, 107, 49, 156, 6.2),
    (30, 137, 49, 234, 7.8),
    (35, 165, 46, 309, 8.8),
    (40, 191, 44, 379, 9.5),
    (45, 216, 41, 445, 9.9),
    (50, 239, 39, 507, 10.1),
    (55, 261, 37, 566, 10.3),
    (60, 282, 35, 622, 10.4),
    (65, 302, 33, 674, 10.4),
    (70, 321, 31, 725, 10.4),
    (75, 340, 30, 773, 10.3),
    (80, 357, 28, 818, 10.2),
]


def managed_pine():
    ages = [r[0] for r in TABLE]
    first = TABLE[0][3] - TABLE[0][1]  # GWL - V at the first age: the removals up to it
    return {
        "curve": "table",
        "ages": ages,
        "volumes_m3_ha": [r[1] for r in TABLE],
        "thinning_m3_ha": [first] + [r[2] for r in TABLE[1:]],
        "min_harvest_age": 60,
    }


def test_managed_yield_table_total_growth_and_its_culmination():
    # The code's gross curve is standing plus removals so far: the table's total growth GWL
    # (to the table's rounding of 1 m3/ha), and MAI of total yield culminates where dGZ does,
    # at 60-70 years with 10.4 m3/ha/yr.
    cfg = yieldscape.config.parse_scenario(
        scenario_dict("x.gpkg", species={"pine": managed_pine()})
    ).species["pine"]
    curve = cfg.yield_curve()
    ages = np.array([r[0] for r in TABLE], float)
    gross = curve.volume_m3_ha(ages, np.zeros(len(ages)))
    np.testing.assert_allclose(gross, [r[3] for r in TABLE], atol=2.0)
    mai = gross / ages
    assert ages[mai.argmax()] in (60, 65, 70)
    assert mai.max() == pytest.approx(10.4, abs=0.06)


def test_regulated_forest_on_a_managed_table_yields_final_cut_plus_removals(tmp_path):
    # A regulated forest of 12 one-hectare classes, 5-year periods, rotation R = 60: every
    # period one class is clearcut and each younger class is thinned once. The steady-state
    # harvest is (A / R) x (clearcut volume + removals up to R) per year, which is the total
    # growth at R: GWL(60) = 622 m3/ha in the table (Albert et al. 2021), 622 m3 a period.
    result = _run(
        tmp_path,
        list(range(60, 0, -5)),
        "pine",
        scenario={"periods": 14, "period_years": 5, "harvest_timing": "start"},
        species={"pine": managed_pine()},
        harvest={"max_area_ha_per_period": 1.0},
        flow={"policy": "targets", "targets_m3": [1e9] * 14, "ending_stock": 0.0},
    )
    wf = result.wood_flow
    steady = wf.iloc[1:]  # from period 2: existing stands had the thinnings of their age
    np.testing.assert_allclose(steady["harvest_m3"], 622.0, rtol=1e-9)
    np.testing.assert_allclose(steady["final_harvest_m3"], 282.0 + 35.0, rtol=1e-9)
    np.testing.assert_allclose(steady["thinning_m3"], 622.0 - 317.0, rtol=1e-9)
    np.testing.assert_allclose(wf["harvest_m3"], wf["final_harvest_m3"] + wf["thinning_m3"])
    assert (result.harvests["treatment"] == "thinning").sum() > 0


def test_share_thinnings_keep_the_mass_balance(tmp_path):
    # Thinnings of 25% at 30 and 20% at 45 years, clearcut at 60: under the constant-increment
    # assumption (Langsaeter 1941, from memory; Assmann 1970) final felling plus removals is
    # the curve's volume at the clearcut age.
    a, k, c = 450.0, 0.035, 3.0
    thinned = _species(
        a,
        k,
        c,
        thinnings=[
            {"age_years": 30, "removal_share": 0.25},
            {"age_years": 45, "removal_share": 0.2},
        ],
    )
    result = _run(
        tmp_path,
        [20],
        "pine",
        scenario={"periods": 5, "harvest_timing": "start"},
        species={"pine": thinned},
        flow={"policy": "targets", "targets_m3": [1e9] * 5, "ending_stock": 0.0},
    )
    wf = result.wood_flow
    r1 = 0.25 * cr(a, k, c, 30)
    r2 = 0.2 * (cr(a, k, c, 45) - r1)
    np.testing.assert_allclose(wf["thinning_m3"], [0, r1, 0, r2, 0], rtol=1e-6, atol=1e-9)
    assert wf["final_harvest_m3"].iloc[4] == pytest.approx(cr(a, k, c, 60) - r1 - r2, rel=1e-6)
    assert wf["harvest_m3"].sum() == pytest.approx(cr(a, k, c, 60), rel=1e-6)


def test_a_split_and_a_choice_regrow_as_stated(tmp_path):
    # A split regrows in its shares; a choice regrows, under the rules, as its first option.
    result = _run(
        tmp_path,
        [70, 70],
        "mixed",
        scenario={"periods": 2},
        species={
            "mixed": _species(400.0, 0.03, 3.0, regenerate_as={"pine": 0.75, "birch": 0.25}),
            "pine": _species(450.0, 0.03, 3.0, regenerate_as=["birch", "pine"]),
            "birch": _species(300.0, 0.05, 2.5),
        },
        flow={"policy": "targets", "targets_m3": [1e9, 0.0], "ending_stock": 0.0},
    )
    regen = result.regeneration.set_index(["from_species", "to_species"])["area_ha"]
    assert regen.to_dict() == pytest.approx({("mixed", "birch"): 0.5, ("mixed", "pine"): 1.5})
    units = result.analysis_units
    at_end = units[units["year"] == units["year"].max()].set_index("analysis_unit")["area_ha"]
    assert at_end.to_dict() == pytest.approx({"birch": 0.5, "mixed": 0.0, "pine": 1.5})


def test_analysis_units_take_the_first_matching_rule(tmp_path):
    # Stands of one species on two curves: the young ones (planted, say) on a better one.
    result = _run(
        tmp_path,
        [10, 20, 70, 80],
        "pine",
        analysis_units=[
            {"where": "AGE < 15", "species": "pine_young"},
            {"where": "AGE < 50", "species": "pine_managed"},
        ],
        species={
            "pine": _species(400.0, 0.03, 3.0),
            "pine_young": _species(420.0, 0.03, 3.0),
            "pine_managed": _species(500.0, 0.035, 3.0),
        },
    )
    assert list(result.stands["analysis_unit"]) == ["pine_young", "pine_managed", "pine", "pine"]
    assert list(result.stands["species"]) == ["pine"] * 4
