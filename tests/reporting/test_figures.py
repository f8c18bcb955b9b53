"""What the figures say, read back from their matplotlib artists as the real run drew them: the
map's scale bar is as long as its label says (against the UTM scale factor and PROJ's own
projection factors), its north arrow follows the meridian convergence, its axes name easting
and northing; a map in degrees says why it has no scale bar; no identifier leaks into a title.
"""

import math
import re

import numpy as np
import pyproj
import pytest
from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

from yieldscape import sharedwork
from yieldscape.cli.main import main
from yieldscape.reporting import figures

from helpers import scenario_dict, squares, stand_attrs, write_layer, write_scenario

DRAW = ("--set", "report.figures=true")  # tests' scenarios draw none by default


@pytest.fixture
def drawn(monkeypatch):
    """The figures a run draws, by file name, kept open for a look at their artists (all
    drawn in this process: no helper process draws any beside the GeoPackage writes)."""
    monkeypatch.setattr(sharedwork, "FORK", False)
    kept = {}
    save = figures.save

    def keep(fig, path):
        kept[path.name] = fig
        save(fig, path)

    monkeypatch.setattr(figures, "save", keep)
    return kept


def scale_bar(ax) -> tuple[float, str]:
    """The scale bar's length in map units and its label."""
    (bar,) = [a for a in ax.artists if isinstance(a, AnchoredSizeBar)]
    (rect,) = bar.size_bar.get_children()
    return rect.get_width(), bar.txt_label.get_text()


def north(ax) -> float:
    """The north arrow's direction, degrees clockwise from up, from its shaft (tail to tip)."""
    (box,) = [a for a in ax.artists if not isinstance(a, AnchoredSizeBar)]
    (shaft,) = [a for a in box.get_child().get_children() if a.get_gid() == "north_arrow"]
    (x0, x1), (y0, y1) = shaft.get_xdata(), shaft.get_ydata()
    return math.degrees(math.atan2(x1 - x0, y1 - y0))


def metres(label: str) -> float:
    value, unit = re.fullmatch(r"([\d.]+) (m|km)", label).groups()
    return float(value) * (1000 if unit == "km" else 1)


def test_map_of_a_run_has_a_true_scale_bar_a_north_arrow_and_named_axes(small_case, drawn):
    tmp, _, scenario = small_case
    assert main(["run", str(scenario), "--out", str(tmp / "out"), "-q", *DRAW]) == 0
    ax = drawn["harvest_map.png"].axes[0]
    width, label = scale_bar(ax)
    length = metres(label)
    # a round length: 1, 2 or 5 times a power of ten, a tenth to a fifth of the map's width
    assert length / 10 ** math.floor(math.log10(length)) in (1, 2, 5)
    span = np.diff(ax.get_xlim())[0]  # 1000 m: ten 100 m squares in a row
    assert span / 10 <= width <= span / 5
    # the stands lie on the central meridian of UTM zone 33 (15 E, easting 500 000 m), where
    # map lengths are ground lengths times the scale factor 0.9996 (the UTM definition)
    assert width == pytest.approx(length * 0.9996, rel=2e-5)
    assert north(ax) == pytest.approx(0.0, abs=0.01)  # grid north is true north there
    assert ax.get_xlabel() == "easting (m), WGS 84 / UTM zone 33N"
    assert ax.get_ylabel() == "northing (m)"


def test_north_arrow_and_scale_follow_the_projection_off_its_central_meridian(tmp_path, drawn):
    # 240 km west of zone 33's central meridian at 60 N: the meridians lean by several degrees
    crs = pyproj.CRS("EPSG:32633")
    extent = (250_000.0, 270_000.0, 6_700_000.0, 6_720_000.0)
    labels = np.arange(1, 5).reshape(2, 2)
    note = figures.harvest_map_figure(
        tmp_path / "map.png", labels, extent, np.array([1, 2, 0, 1]), 2, np.array([2030, 2040]), crs
    )
    assert note == ""
    ax = drawn["map.png"].axes[0]
    lon, lat = pyproj.Transformer.from_crs(crs, "EPSG:4326", always_xy=True).transform(
        260_000.0, 6_710_000.0
    )
    # PROJ's projection factors at the map's centre (proj_factors): the meridian convergence
    # is the angle from true north to grid north, so true north lies that far the other way
    # from the map's up; lengths along x scale by parallel_scale
    factors = pyproj.Proj(crs).get_factors(lon, lat)
    assert abs(factors.meridian_convergence) > 3
    assert north(ax) == pytest.approx(-factors.meridian_convergence, abs=0.01)
    width, label = scale_bar(ax)
    assert width == pytest.approx(metres(label) * factors.parallel_scale, rel=1e-5)


def test_a_map_in_degrees_has_no_scale_bar_and_the_caption_says_so(tmp_path, drawn):
    # twenty stands of about 1 ha (0.002 degrees of longitude at 60 N is about 111 m)
    n = 20
    geoms = squares(n, side_m=0.002, x0=15.0, y0=60.0)
    layer = write_layer(tmp_path / "s.gpkg", geoms, stand_attrs(n, np.arange(n) * 5), "EPSG:4326")
    scn = write_scenario(tmp_path / "scn.toml", scenario_dict(layer))
    assert main(["run", str(scn), "--out", str(tmp_path / "out"), "-q", *DRAW]) == 0
    ax = drawn["harvest_map.png"].axes[0]
    assert not [a for a in ax.artists if isinstance(a, AnchoredSizeBar)]
    assert north(ax) == 0.0
    assert ax.get_xlabel() == "longitude (degrees), WGS 84"
    assert ax.get_ylabel() == "latitude (degrees)"
    report = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert "No scale bar: the layer&#x27;s CRS is geographic (degrees)." in report


def test_a_cover_target_over_all_zones_is_titled_so(small_case, drawn):
    tmp, layer, _ = small_case
    raw = scenario_dict(layer, cover=[{"zone": "*", "older_than_years": 80, "min_share": 0.1}])
    scn = write_scenario(tmp / "cover.toml", raw)
    assert main(["run", str(scn), "--out", str(tmp / "out"), "-q", *DRAW]) == 0
    titles = [ax.get_title(loc="left") for ax in drawn["cover_targets.png"].axes]
    assert titles[0].startswith("all zones: ") and not any("*" in t for t in titles)


def every_figure(small_case):
    """The small case with a cover target and disturbance replicates: every figure drawn."""
    tmp, layer, _ = small_case
    raw = scenario_dict(
        layer,
        cover=[{"zone": "*", "older_than_years": 80, "min_share": 0.1}],
        disturbance={"annual_rate": 0.002, "replicates": 3},
    )
    return tmp, write_scenario(tmp / "all.toml", raw)


def test_no_identifier_in_any_title_label_or_legend(small_case, drawn):
    tmp, scn = every_figure(small_case)
    assert main(["run", str(scn), "--out", str(tmp / "out"), "-q", *DRAW]) == 0
    assert len(drawn) >= 7
    for name, fig in drawn.items():
        texts = [t.get_text() for t in fig.findobj(lambda a: hasattr(a, "get_text"))]
        for text in texts:
            # snake_case names and a lone '*' are the program's, not the reader's words
            assert not re.search(r"\b[a-z]+_[a-z_]+\b|(^|\s)\*", text), (name, text)


def test_figures_drawn_beside_the_geopackage_are_the_ones_drawn_alone(small_case, monkeypatch):
    # the helper process and this one share the figures (yieldscape.sharedwork): the same
    # files, pixel for pixel (read back by Pillow), and the report lists them in the same order
    from PIL import Image

    tmp, scn = every_figure(small_case)
    assert main(["run", str(scn), "--out", str(tmp / "shared"), "-q", *DRAW]) == 0
    monkeypatch.setattr(sharedwork, "FORK", False)
    assert main(["run", str(scn), "--out", str(tmp / "alone"), "-q", *DRAW]) == 0
    names = sorted(p.name for p in (tmp / "alone" / "figures").iterdir())
    assert len(names) >= 7
    assert sorted(p.name for p in (tmp / "shared" / "figures").iterdir()) == names
    for name in names:
        alone = np.asarray(Image.open(tmp / "alone" / "figures" / name))
        shared = np.asarray(Image.open(tmp / "shared" / "figures" / name))
        assert alone.shape == shared.shape and (alone == shared).all(), name

    def order(run: str) -> list[str]:
        html = (tmp / run / "report.html").read_text()
        return re.findall(r'figures/([\w.]+\.png)"', html)

    assert order("shared") == order("alone") and len(order("alone")) == len(names)
