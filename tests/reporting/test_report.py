"""report.html: valid HTML5, self-contained, every figure embedded, the caution present, and
it renders in a real browser (headless Chromium, Debian's package); the figures are PNGs of the
sizes docs/outputs.md gives."""

import base64
import json
import os
import re
import shutil
import struct
import subprocess

import html5lib
import numpy as np
import pytest
from matplotlib.image import imread

from foresight.cli.main import main

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
        report={"markdown": True},
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


def browser() -> str | None:
    found = shutil.which("chromium") or shutil.which("chromium-browser")
    if found is None and os.environ.get("FORESIGHT_REQUIRE_BROWSER"):
        pytest.fail("FORESIGHT_REQUIRE_BROWSER is set but no chromium is installed")
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


def test_report_renders_in_a_real_browser(out, tmp_path):
    exe = browser()
    if exe is None:
        pytest.skip("chromium is not installed (CI installs it and sets FORESIGHT_REQUIRE_BROWSER)")
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
