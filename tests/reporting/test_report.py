"""report.html: valid HTML5, self-contained, every figure embedded, the caution present, and
it renders in a real browser (headless Chromium, Debian's package); the figures are PNGs of the
sizes docs/outputs.md gives."""

import base64
import html
import json
import os
import re
import shutil
import struct
import subprocess

import html5lib
import numpy as np
import pandas as pd
import pytest
from matplotlib.image import imread

import yieldscape
from yieldscape.cli.main import main
from yieldscape.publish import write_outputs

from helpers import ROOT, scenario_dict, squares, stand_attrs, write_layer, write_scenario

# the caution the project promises in every report (README, "Caution")
CAUTION_WORDS = ("planning estimates", "forest-practice law", "licensed forest professionals")


@pytest.fixture(scope="module")
def out(tmp_path_factory):
    """A run with every optional figure: cover targets, disturbance replicates, a case."""
    tmp = tmp_path_factory.mktemp("report")
    n = 40
    attrs = stand_attrs(n, ages=np.arange(n) * 4.0)
    attrs["ZONE"] = np.array(["east", "west"] * (n // 2), dtype=object)
    layer = write_layer(tmp / "s.gpkg", squares(n), attrs)
    raw = scenario_dict(
        layer,
        flow={"ending_stock": 0.5},
        cover=[{"zone": "east", "older_than_years": 80, "min_share": 0.1}],
        disturbance={"annual_rate": 0.002, "replicates": 5},
        report={"markdown": True, "figures": True},
    )
    raw["sensitivity"] = [{"name": "looser", "set": {"flow.ending_stock": 0.3}}]
    scn = write_scenario(tmp / "scn.toml", raw)
    out = tmp / "out"
    assert main(["run", str(scn), "--out", str(out), "-q"]) == 0
    return out


def documented_sizes() -> dict[str, tuple[int, int]]:
    docs = (ROOT / "docs" / "outputs.md").read_text(encoding="utf-8")
    return {
        m[1]: (int(m[2]), int(m[3]))
        for m in re.finditer(r"^\| `([\w<>]+\.png)` \| (\d+) x (\d+) \|", docs, re.M)
    }


def png_size(data: bytes) -> tuple[int, int]:
    # PNG signature, then the IHDR chunk: width and height as big-endian uint32 (ISO/IEC 15948)
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


def test_report_is_valid_html(out):
    text = (out / "report.html").read_text(encoding="utf-8")
    # strict html5lib raises on any parse error of the WHATWG HTML parsing algorithm
    doc = html5lib.HTMLParser(strict=True, namespaceHTMLElements=False).parse(text)
    assert doc.find("head/title") is not None
    assert doc.find("body").findall(".//section")
    assert text.startswith("<!DOCTYPE html>")


def test_report_needs_no_network(out):
    text = (out / "report.html").read_text(encoding="utf-8")
    doc = html5lib.parse(text, namespaceHTMLElements=False)
    for el in doc.iter():
        for attr in ("src", "href", "action", "srcset", "poster", "data"):
            value = el.get(attr)
            if value is not None:
                assert value.startswith(("data:", "#")), (el.tag, attr, value[:60])
    assert doc.findall(".//script") == [] and doc.findall(".//link") == []
    without_data = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "", text)
    assert not re.search(r"(https?:)?//|url\(|@import", without_data)


def test_every_figure_is_embedded_and_of_its_documented_size(out):
    text = (out / "report.html").read_text(encoding="utf-8")
    embedded = [base64.b64decode(b) for b in re.findall(r"data:image/png;base64,([^\"]+)", text)]
    files = sorted((out / "figures").glob("*.png"))
    names = {p.name for p in files}
    expected = {
        "harvest_forecast.png",
        "growing_stock.png",
        "age_classes.png",
        "cover_targets.png",
        "harvest_map.png",
        "monte_carlo.png",
        "curves_pine.png",
        "comparison.png",
    }
    assert names == expected
    assert sorted(embedded) == sorted(p.read_bytes() for p in files)
    sizes = documented_sizes()
    for p in files:
        key = re.sub(r"^curves_\w+\.png$", "curves_<species>.png", p.name)
        data = p.read_bytes()
        assert len(data) > 10_000, p.name  # a drawn figure, not an empty canvas
        assert png_size(data) == sizes[key], p.name
        img = imread(p)
        assert img[..., :3].std() > 0.05, p.name  # something is drawn on it


def test_report_carries_the_caution_verdict_and_tables(out):
    text = (out / "report.html").read_text(encoding="utf-8")
    for words in CAUTION_WORDS:
        assert words in text
    verdict = json.loads((out / "run.json").read_text())["verdict"]
    assert verdict["headline"] in text
    for section in (
        "Verdict",
        "Scenario",
        "Land base netdown",
        "Growth curves and rotations",
        "Indicators",
        "Sensitivity cases",
    ):
        assert f"<h2>{section}</h2>" in text
    md = (out / "report.md").read_text(encoding="utf-8")
    assert verdict["headline"] in md and CAUTION_WORDS[0] in md
    for p in (out / "figures").glob("*.png"):
        assert f"(figures/{p.name})" in md


def page(path):
    """The report's body parsed with a WHATWG parser, and its sections by title."""
    doc = html5lib.parse(path.read_text(encoding="utf-8"), namespaceHTMLElements=False)
    sections = {sec.find("h2").text: sec for sec in doc.find("body").findall("section")}
    return doc, sections


def cells(table) -> list[list[str]]:
    return [["".join(td.itertext()) for td in tr] for tr in table.findall("./tbody/tr")]


def test_first_screen_verdict_then_key_numbers_then_caution(out):
    doc, sections = page(out / "report.html")
    rec = json.loads((out / "run.json").read_text())
    case = json.loads((out / "looser" / "run.json").read_text())
    assert list(sections)[:2] == ["Verdict", "Checks of the verdict"]
    verdict = sections["Verdict"]
    # in this order: the headline, what stops a higher level, the key numbers, the caution,
    # then the run's warnings (this run has some: its replicates differ in stock only)
    blocks = [(el.tag, el.get("class")) for el in verdict if el.tag != "h2"]
    assert rec["warnings"]
    assert blocks == [
        ("p", "verdict"),
        ("p", None),
        ("div", "wide box"),
        ("p", "caution"),
        ("div", "warnings"),
    ]
    shown = ["".join(li.itertext()) for li in verdict.findall(".//div[@class='warnings']//li")]
    assert shown == rec["warnings"]
    headline, limited, _ = ("".join(p.itertext()) for p in verdict.findall("p"))
    assert headline == rec["verdict"]["headline"]
    assert limited == f"What stops a higher level: {rec['verdict']['limited_by']}."
    # the key numbers against run.json (its flow, inventory and the case's verdict)
    box = verdict.find(".//div[@class='wide box']/table")
    rows = dict(cells(box))
    flow, inv = rec["flow"], rec["inventory"]
    assert rows["Flow level (even flow)"] == f"{flow['level_m3_per_year']:,.0f} m3/year"
    hlb, gross = inv["harvestable_ha"], inv["area_ha"]
    assert rows["Harvestable land base"] == (
        f"{hlb:,.0f} ha, {100 * hlb / gross:.1f}% of the gross {gross:,.0f} ha"
    )
    ltsy = flow["long_term_sustained_yield_m3_per_year"]["at_culmination"]
    assert rows["Long-term sustained yield"].startswith(f"{ltsy:,.0f} m3/year")
    gs0, gs1 = flow["initial_growing_stock_m3"], flow["ending_growing_stock_m3"]
    assert rows["Ending growing stock"] == (
        f"{gs1:,.0f} m3, {100 * gs1 / gs0:.1f}% of the initial {gs0:,.0f} m3; "
        "at least 50% required"  # flow.ending_stock = 0.5 in the fixture
    )
    wf = pd.read_csv(out / "wood_flow.csv")  # the harvestable land base's own stock
    h0, h1 = wf["hlb_growing_stock_start_m3"].iloc[0], wf["hlb_growing_stock_end_m3"].iloc[-1]
    assert rows["Growing stock on the harvestable land base"] == (
        f"{h0:,.0f} m3 at the start, {h1:,.0f} m3 at the end ({100 * (h1 / h0 - 1):+.0f}%)"
    )
    level = case["flow"]["level_m3_per_year"]
    judged = "sustainable" if case["verdict"]["sustainable"] else "not sustainable"
    assert rows["Sensitivity case looser"] == (
        f"{level:,.0f} m3/year ({level - flow['level_m3_per_year']:+,.0f} against the base), "
        f"{judged}"
    )
    # and the caution again at the end
    assert list(sections)[-1] == "About this run"
    assert any(p.get("class") == "caution" for p in sections["About this run"].findall("p"))


def test_checks_and_indicators_appear_by_their_labels(out):
    text = (out / "report.html").read_text(encoding="utf-8")
    md = (out / "report.md").read_text(encoding="utf-8")
    checks = pd.read_csv(out / "verdict.csv")
    assert len(checks) == 5  # with the cover target
    indicators = pd.read_csv(out / "indicators.csv")
    for name, label in [*zip(checks["check"], checks["label"], strict=True)] + [
        *zip(indicators["indicator"], indicators["label"], strict=True)
    ]:
        assert html.escape(label) in text and label in md, label
        if "_" in name:  # an identifier, not a word of the text
            assert name not in text and name not in md, name


def test_sensitivity_table_gives_each_case_its_verdict(out):
    _, sections = page(out / "report.html")
    table = sections["Sensitivity cases"].find(".//table")
    head = ["".join(th.itertext()) for th in table.findall("./thead/tr/th")]
    rows = {row[0]: dict(zip(head, row, strict=True)) for row in cells(table)}
    for name, run_dir in (("base", out), ("looser", out / "looser")):
        sustainable = json.loads((run_dir / "run.json").read_text())["verdict"]["sustainable"]
        assert rows[name]["sustainable"] == ("yes" if sustainable else "no")


def test_warnings_stand_after_the_caution_one_item_each(small_case, tmp_path):
    _, _, scn = small_case
    scenario = yieldscape.load_scenario(scn, overrides=["report.markdown=true"])
    result = yieldscape.run(scenario, None)
    warnings = ("stand 7: a repaired geometry", "3 stands can never be cut <larger> & older")
    result.warnings = warnings  # as the run will fill it
    out = tmp_path / "w"
    out.mkdir()
    write_outputs(result, scenario, out)
    _, sections = page(out / "report.html")
    verdict = sections["Verdict"]
    blocks = [el.get("class") for el in verdict if el.tag != "h2"]
    assert blocks == ["verdict", None, "wide box", "caution", "warnings"]
    items = verdict.findall("./div[@class='warnings']/ul/li")
    assert tuple("".join(li.itertext()) for li in items) == warnings
    md = (out / "report.md").read_text(encoding="utf-8")
    caution = md.index("These are planning estimates")
    at = [md.index(x) for x in ("Key numbers", f"- {warnings[0]}", f"- {warnings[1]}")]
    assert at == sorted(at) and at[0] < caution < at[1]


def browser() -> str | None:
    found = shutil.which("chromium") or shutil.which("chromium-browser")
    if found is None and os.environ.get("YIELDSCAPE_REQUIRE_BROWSER"):
        pytest.fail("YIELDSCAPE_REQUIRE_BROWSER is set but no chromium is installed")
    return found


def chromium(exe: str, tmp_path, *args: str) -> subprocess.CompletedProcess:
    flags = [
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        f"--user-data-dir={tmp_path / 'profile'}",
    ]
    return subprocess.run(
        [exe, *flags, *args], capture_output=True, text=True, timeout=120, check=True
    )


def test_first_screen_fits_a_laptop_window(out, tmp_path):
    exe = browser()
    if exe is None:
        pytest.skip(
            "chromium is not installed (CI installs it and sets YIELDSCAPE_REQUIRE_BROWSER)"
        )
    # where the browser lays out the headline, the key numbers and the caution
    probe = (
        "<script>addEventListener('load', () => { const at = s => "
        "document.querySelector(s).getBoundingClientRect(); document.title = 'LAYOUT ' + "
        "JSON.stringify([at('p.verdict').top, at('div.box').top, at('p.caution').top, "
        "at('p.caution').bottom, innerHeight]); });</script>"
    )
    shown = tmp_path / "page.html"
    shown.write_text(
        (out / "report.html").read_text(encoding="utf-8").replace("</body>", probe + "</body>"),
        encoding="utf-8",
    )
    dom = chromium(
        exe,
        tmp_path,
        "--window-size=1280,800",
        "--virtual-time-budget=10000",
        "--dump-dom",
        shown.as_uri(),
    )
    found = re.search(r"<title>LAYOUT (\[.*?\])</title>", dom.stdout)
    assert found, dom.stdout[:500]
    verdict, box, caution, caution_end, height = json.loads(found[1])
    assert verdict < box < caution and caution_end <= height


def test_report_renders_in_a_real_browser(out, tmp_path):
    exe = browser()
    if exe is None:
        pytest.skip(
            "chromium is not installed (CI installs it and sets YIELDSCAPE_REQUIRE_BROWSER)"
        )
    shot = tmp_path / "shot.png"
    chromium(
        exe,
        tmp_path,
        "--window-size=1200,2400",
        f"--screenshot={shot}",
        (out / "report.html").as_uri(),
    )
    pixels = imread(shot)[..., :3]
    assert pixels.shape[:2] == (2400, 1200)
    ink = (pixels < 0.9).any(axis=2).mean()
    assert ink > 0.05, f"the page is nearly blank ({ink:.1%} of pixels drawn)"
    # The figures loaded: a copy of the page with a probe that, once everything is loaded,
    # writes each image's decoded and rendered width into the title, read from the DOM.
    probe = (
        "<script>addEventListener('load', () => { document.title = 'IMAGES ' + "
        "JSON.stringify([...document.images].map(i => [i.complete, i.naturalWidth, "
        "i.naturalHeight, Math.round(i.getBoundingClientRect().width)])); });</script>"
    )
    page = tmp_path / "page.html"
    page.write_text(
        (out / "report.html").read_text(encoding="utf-8").replace("</body>", probe + "</body>"),
        encoding="utf-8",
    )
    dom = chromium(exe, tmp_path, "--virtual-time-budget=10000", "--dump-dom", page.as_uri())
    found = re.search(r"<title>IMAGES (\[.*?\])</title>", dom.stdout)
    assert found, dom.stdout[:500]
    images = json.loads(found[1])
    files = sorted((out / "figures").glob("*.png"))
    assert len(images) == len(files)
    sizes = sorted(png_size(p.read_bytes()) for p in files)
    assert sorted((w, h) for _, w, h, _ in images) == sizes  # every image decoded
    assert all(done and shown > 300 for done, _, _, shown in images)  # and laid out


def test_without_figures_no_figure_is_written_and_the_report_says_so(small_case):
    # report.figures = false (the tests' own default): no figures/ folder, no image in the
    # page, and the harvest section says why
    tmp, _, scn = small_case
    assert "figures = false" in scn.read_text()
    out = tmp / "out"
    assert main(["run", str(scn), "--out", str(out), "-q"]) == 0
    assert not (out / "figures").exists()
    root, sections = page(out / "report.html")
    assert not root.findall(".//img")
    text = " ".join(" ".join(el.itertext()) for el in sections["Harvest and growing stock"])
    assert "No figures were drawn (report.figures = false)." in text
    assert "figures" not in json.loads((out / "run.json").read_text())["outputs"]
