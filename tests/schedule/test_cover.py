"""Cover targets hold in every period, checked from the written output layers."""

import numpy as np
import pandas as pd
import pyogrio
import pytest

import yieldscape
from yieldscape.cli.main import main

from helpers import scenario_dict, squares, stand_attrs, write_layer, write_scenario

N, L, OFF = 40, 10, 5


def reconstruct_old_share(stands, harvests, periods, age_limit, zone=None):
    """Old-forest share after each period's cut, rebuilt stand by stand from the layers."""
    shares = []
    sel = stands if zone is None else stands[stands["zone"] == zone]
    total = sel["area_ha"].sum()
    parts = {r.stand_id: [(r.area_ha, r.age_years)] for r in sel.itertuples()}
    for p in range(1, periods + 1):
        old = 0.0
        cut = harvests[harvests["period"] == p]
        for sid in parts:
            todo = cut[cut["stand_id"] == sid]
            left = float(todo["area_ha"].sum())
            nxt, now = [], []
            for area, age in sorted(parts[sid], key=lambda x: -x[1]):  # oldest cut first
                take = min(area, left) if age + OFF >= todo["age_years"].min() - 1e-6 else 0.0
                left -= take
                if area - take > 1e-9:
                    now.append((area - take, age + OFF))
                    nxt.append((area - take, age + L))
                if take > 0:
                    now.append((take, 0.0))
                    nxt.append((take, L - OFF))
            old += sum(a for a, g in now if g >= age_limit - 1e-9)
            parts[sid] = nxt
        shares.append(old / total)
    return np.array(shares)


def test_old_forest_retention_holds_in_the_outputs(tmp_path):
    ages = np.r_[np.full(20, 150.0), np.full(20, 10.0)]  # half old, half young
    attrs = stand_attrs(N, ages=ages)
    attrs["ZONE"] = np.array(["east"] * 20 + ["west"] * 20, dtype=object)
    layer = write_layer(tmp_path / "s.gpkg", squares(N), attrs)
    raw = scenario_dict(layer, scenario={"periods": 6}, flow={"ending_stock": 0.0})
    raw["cover"] = [
        {"zone": "*", "older_than_years": 120, "min_share": 0.3},
        {"zone": "east", "younger_than_years": 20, "max_share": 0.5},
    ]
    out = tmp_path / "out"
    assert (
        main(["run", str(write_scenario(tmp_path / "c.toml", raw)), "--out", str(out), "-q"]) == 0
    )
    gpkg = out / "projection.gpkg"
    stands = pyogrio.read_dataframe(gpkg, layer="stands", read_geometry=False)
    harvests = pyogrio.read_dataframe(gpkg, layer="harvests", read_geometry=False)
    cover = pd.read_csv(out / "cover.csv")
    assert cover["met"].all()
    old = reconstruct_old_share(stands, harvests, 6, 120)
    assert np.all(old >= 0.3 - 1e-9)
    reported = cover[cover["zone"] == "*"]["share"].to_numpy()
    np.testing.assert_allclose(old, reported, rtol=1e-9)
    # without the target the scheduler would take more of the old forest in period 1 (the
    # library's run, in memory: the reference needs no files)
    raw.pop("cover")
    fh = yieldscape.run(yieldscape.load_scenario(write_scenario(tmp_path / "f.toml", raw)), None)
    fh = fh.harvests
    assert (
        fh[fh["period"] == 1]["area_ha"].sum() > harvests[harvests["period"] == 1]["area_ha"].sum()
    )


@pytest.mark.parametrize(
    ("cover", "match"),
    [
        (
            {"zone": "*", "older_than_years": 100, "min_share": 1.5},
            r"min_share = 1.5: must be >= 0 and <= 1",
        ),
        ({"zone": "*", "older_than_years": 100}, r"needs both older_than_years and min_share"),
        (
            {"zone": "*", "older_than_years": 100, "min_share": 0.2, "max_share": 0.3},
            r"needs either older_than_years",
        ),
    ],
)
def test_bad_cover_targets_are_named(tmp_path, cover, match):
    from yieldscape import load_scenario
    from yieldscape.errors import ScenarioError

    raw = scenario_dict(tmp_path / "x.gpkg")
    raw["cover"] = [cover]
    with pytest.raises(ScenarioError, match=match):
        load_scenario(write_scenario(tmp_path / "s.toml", raw))
