"""Every indicator table of a run, recomputed independently from the written output layers.

The run goes through the real CLI on a small layer written with GDAL; the checks rebuild the
forest from the `stands` and `harvests` layers alone (a replay of the cuts, stand by stand, with
the Chapman-Richards formula written out here) and compare with what yieldscape reported.
"""

import json
import math

import numpy as np
import pandas as pd
import pyogrio
import pytest
from scipy.integrate import quad

from yieldscape.cli.main import main

from helpers import scenario_dict, squares, stand_attrs, write_layer, write_scenario

A, K, C = 400.0, 0.03, 3.0  # the pine curve of helpers.scenario_dict
R, DELAY, L, START = 60.0, 3.0, 10, 2030
PRICE, REGEN, RATE = 30.0, 500.0, 0.03
WIDTH = 20.0


def volume(age):
    """Chapman-Richards V = a (1 - exp(-k t))^c (Richards 1959), 0 before age 0."""
    age = np.asarray(age, dtype=float)
    return np.where(age > 0, A * (1 - np.exp(-K * np.maximum(age, 0))) ** C, 0.0)


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("indicators")
    n = 30
    attrs = stand_attrs(n, ages=np.arange(n) * 5.0)
    attrs["ZONE"] = np.array(["east", "west"] * (n // 2), dtype=object)
    attrs["SPP"] = np.array(["pine"] * 20 + ["larch"] * 10, dtype=object)
    layer = write_layer(tmp / "stands.gpkg", squares(n), attrs)
    raw = scenario_dict(
        layer,
        flow={"ending_stock": 0.5},
        economics={"discount_rate": RATE, "compounding": "continuous"},
        report={"age_class_width_years": WIDTH},
        landbase={"steps": [{"label": "retention", "percent": 20}]},
    )
    raw["species"]["pine"].update(
        regen_delay_years=DELAY, price_per_m3=PRICE, regen_cost_per_ha=REGEN
    )
    raw["species"]["larch"] = {**raw["species"]["pine"]}
    scn = write_scenario(tmp / "scenario.toml", raw)
    out = tmp / "out"
    assert main(["run", str(scn), "--out", str(out), "-q"]) == 0
    gpkg = out / "projection.gpkg"
    return {
        "out": out,
        "stands": pyogrio.read_dataframe(gpkg, layer="stands"),
        "harvests": pyogrio.read_dataframe(gpkg, layer="harvests"),
        "wood_flow": pd.read_csv(out / "wood_flow.csv"),
        "record": json.loads((out / "run.json").read_text()),
    }


def replay(stands, harvests):
    """The stand pieces [stand_id, area, birth time, on the harvestable land base] after
    replaying the cuts of ``harvests``: a cut takes area from the piece of the age cut, which
    restarts as a new piece after the regeneration delay."""
    pieces = []
    for row in stands.itertuples():
        pieces.append([row.stand_id, row.harvestable_ha, -row.age_years, True])
        if row.area_ha - row.harvestable_ha > 1e-9:
            pieces.append([row.stand_id, row.area_ha - row.harvestable_ha, -row.age_years, False])
    for cut in harvests.sort_values(["period", "stand_id"]).itertuples():
        t = cut.harvest_year - START
        born = t - cut.age_years
        match = [p for p in pieces if p[0] == cut.stand_id and p[3] and abs(p[2] - born) < 1e-6]
        assert match, f"no piece of stand {cut.stand_id} aged {cut.age_years} at {t}"
        piece = match[0]
        assert piece[1] >= cut.area_ha - 1e-9
        piece[1] -= cut.area_ha
        pieces.append([cut.stand_id, cut.area_ha, t + DELAY, True])
    return pieces


def pieces_at(stands, harvests, year):
    """The pieces at a period boundary: the cuts before ``year`` applied, later ones not."""
    t_year = year - START
    return replay(stands, harvests[harvests["harvest_year"] - START < t_year])


def report_years(wood_flow):
    P = len(wood_flow)
    return sorted({START + L * round(P * q / 4) for q in range(5)})


def test_age_classes_match_a_replay_of_the_layers(run):
    table = pd.read_csv(run["out"] / "age_classes.csv")
    assert sorted(table["year"].unique()) == report_years(run["wood_flow"])
    zone = dict(zip(run["stands"]["stand_id"], run["stands"]["zone"], strict=True))
    for year in table["year"].unique():
        t = year - START
        expect: dict = {}
        for sid, area, born, hlb in pieces_at(run["stands"], run["harvests"], year):
            cls = math.floor(max(t - born, 0.0) / WIDTH) * WIDTH
            key = (zone[sid], cls)
            tot, on = expect.get(key, (0.0, 0.0))
            expect[key] = (tot + area, on + (area if hlb else 0.0))
        got = table[table["year"] == year]
        for (z, cls), (tot, on) in expect.items():
            row = got[(got["zone"] == z) & (got["age_from_years"] == cls)]
            assert len(row) == 1, (year, z, cls)
            assert row["area_ha"].iloc[0] == pytest.approx(tot, abs=1e-9)
            assert row["harvestable_ha"].iloc[0] == pytest.approx(on, abs=1e-9)
        # and nothing reported where the replay has no area
        assert got["area_ha"].sum() == pytest.approx(sum(v[0] for v in expect.values()))


def test_stand_ages_match_the_replay(run):
    ages = pyogrio.read_dataframe(run["out"] / "projection.gpkg", layer="stand_ages")
    start_age = dict(zip(run["stands"]["stand_id"], run["stands"]["age_years"], strict=True))
    for year in report_years(run["wood_flow"]):
        t = year - START
        by_stand: dict = {}
        for sid, area, born, _ in pieces_at(run["stands"], run["harvests"], year):
            if area > 1e-12:
                by_stand.setdefault(sid, []).append((area, max(t - born, 0.0), t - born))
        got = ages[ages["year"] == year].set_index("stand_id")
        for sid, parts in by_stand.items():
            total = sum(a for a, _, _ in parts)
            largest = max(parts, key=lambda p: p[0])
            assert got.loc[sid, "age_years"] == pytest.approx(largest[1])
            assert got.loc[sid, "mean_age_years"] == pytest.approx(
                sum(a * g for a, g, _ in parts) / total
            )
            renewed = sum(a for a, _, raw in parts if raw < start_age[sid] + t - 1e-6)
            assert got.loc[sid, "renewed_share"] == pytest.approx(renewed / total)


def test_growing_stock_on_the_harvestable_land_base_matches_the_replay(run):
    wf = run["wood_flow"]
    for row in wf.itertuples():
        year = row.start_year
        pieces = pieces_at(run["stands"], run["harvests"], year)
        t = year - START
        hlb = sum(a * float(volume(t - b)) for _, a, b, on in pieces if on)
        total = sum(a * float(volume(t - b)) for _, a, b, _ in pieces)
        # the projection tabulates curves (error < 5e-4 m3/ha, docs/methods.md)
        assert row.hlb_growing_stock_start_m3 == pytest.approx(hlb, rel=1e-5)
        assert row.growing_stock_start_m3 == pytest.approx(total, rel=1e-5)
    np.testing.assert_allclose(
        wf["hlb_growing_stock_end_m3"].iloc[:-1], wf["hlb_growing_stock_start_m3"].iloc[1:]
    )


def test_harvest_breakdown_matches_the_harvests_layer(run):
    got = pd.read_csv(run["out"] / "harvest_by_zone_species.csv")
    h = run["harvests"].assign(age_area=lambda d: d["age_years"] * d["area_ha"])
    want = h.groupby(["period", "zone", "species"], as_index=False)[
        ["area_ha", "volume_m3", "age_area"]
    ].sum()
    merged = want.merge(got, on=["period", "zone", "species"], how="outer", validate="1:1")
    assert len(merged) == len(got) == len(want)
    np.testing.assert_allclose(merged["harvest_ha"], merged["area_ha"])
    np.testing.assert_allclose(merged["harvest_m3"], merged["volume_m3"])
    np.testing.assert_allclose(
        merged["mean_harvest_age_years"], merged["age_area"] / merged["area_ha"]
    )
    np.testing.assert_allclose(merged["harvest_m3_per_year"], merged["volume_m3"] / L)
    assert set(got["species"]) == {"pine", "larch"} and set(got["zone"]) == {"east", "west"}


def test_wood_flow_revenue_and_horizon_indicators(run):
    wf, h = run["wood_flow"], run["harvests"]
    ind = pd.read_csv(run["out"] / "indicators.csv").set_index("indicator")["value"]
    # net revenue: price x volume - regeneration cost x area cut, per period
    net = (PRICE * h["volume_m3"] - REGEN * h["area_ha"]).groupby(h["period"]).sum()
    np.testing.assert_allclose(wf.set_index("period").loc[net.index, "net_revenue"], net)
    # present value with continuous discounting from the harvest moment, e^(-r t)
    t = wf["harvest_year"] - START
    np.testing.assert_allclose(
        wf["discounted_net_revenue"], wf["net_revenue"] * np.exp(-RATE * t), rtol=1e-12
    )
    moment = h.groupby("period")["harvest_year"].first() - START
    assert ind["net_present_value"] == pytest.approx(float((net * np.exp(-RATE * moment)).sum()))
    assert ind["total_harvest_m3"] == pytest.approx(h["volume_m3"].sum())
    assert ind["total_harvest_ha"] == pytest.approx(h["area_ha"].sum())
    assert ind["mean_harvest_age_years"] == pytest.approx(
        np.average(h["age_years"], weights=h["area_ha"])
    )
    hv = wf["harvest_m3"].to_numpy()
    drops = 1 - hv[1:] / hv[:-1]
    assert ind["largest_drop"] == pytest.approx(max(drops.max(), 0.0), abs=1e-9)
    assert ind["ending_to_initial_growing_stock"] == pytest.approx(
        wf["growing_stock_end_m3"].iloc[-1] / wf["growing_stock_start_m3"].iloc[0]
    )
    assert ind["harvestable_ha"] == pytest.approx(run["stands"]["harvestable_ha"].sum())
    assert ind["harvestable_ha"] == pytest.approx(0.8 * run["stands"]["area_ha"].sum())
    # a regulated forest on the harvestable land: area x (1/R) x integral_0^R V(t) dt,
    # integrated here with scipy's quad (an independent quadrature)
    mean_v = quad(lambda x: float(volume(x)), 0.0, R)[0] / R
    assert ind["regulated_hlb_growing_stock_m3"] == pytest.approx(
        run["stands"]["harvestable_ha"].sum() * mean_v, rel=1e-6
    )
    assert ind["sustainable"] in (0.0, 1.0)
    # the short, mid and long terms are the same periods compare uses
    assert ind["long_term_m3_per_year"] == pytest.approx(wf["harvest_m3_per_year"].iloc[-2:].mean())


def test_every_indicator_has_a_label_beside_its_name(run):
    table = pd.read_csv(run["out"] / "indicators.csv")
    # the names stay identifiers in their column; the label is words, one per indicator
    assert table["indicator"].str.fullmatch(r"[a-z0-9_]+").all()
    assert table["label"].notna().all() and table["label"].is_unique
    for name, label in zip(table["indicator"], table["label"], strict=True):
        assert label[0].isupper() and "_" not in label, (name, label)
    row = table.set_index("indicator").loc["ltsy_at_culmination_m3_per_year"]
    assert row["label"] == "Long-term sustained yield at MAI culmination"


def test_every_indicator_is_documented(run):
    from helpers import ROOT

    docs = (ROOT / "docs" / "outputs.md").read_text(encoding="utf-8")
    for name in pd.read_csv(run["out"] / "indicators.csv")["indicator"]:
        assert f"| `{name}` |" in docs, name
