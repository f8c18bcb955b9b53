"""[[sensitivity]] cases in one run, and `yieldscape compare` on their outputs."""

import io
import json
from contextlib import redirect_stderr, redirect_stdout

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from yieldscape.cli.main import main
from yieldscape.errors import ScenarioError

from helpers import (
    regional_wood_flow,
    scenario_dict,
    squares,
    stand_attrs,
    write_layer,
    write_scenario,
)

# as the sample's cases: a looser ending stock, smaller openings; and a species key
CASES = [
    {"name": "loose", "set": {"flow.ending_stock": 0.2}},
    {"name": "late", "set": {"species.pine.min_harvest_age": 80}},
    {"name": "openings-2ha", "set": {"harvest.max_opening_ha": 2.0}},
    {"name": "banded", "set": {"flow.band": 0.3, "flow.ending_stock": 0.2}},
]


def case_scenario(tmp_path, sensitivity):
    layer = write_layer(tmp_path / "s.gpkg", squares(30), stand_attrs(30, ages=np.arange(30) * 6))
    raw = scenario_dict(
        layer, flow={"ending_stock": 0.5}, harvest={"greenup_years": 20, "max_opening_ha": 3.0}
    )
    raw["sensitivity"] = sensitivity
    return write_scenario(tmp_path / "scn.toml", raw)


@pytest.fixture(scope="module")
def cases_run(tmp_path_factory):
    """The base and its three cases, run once through the command: (out, stdout, stderr)."""
    tmp = tmp_path_factory.mktemp("cases")
    out = tmp / "out"
    stdout, stderr = io.StringIO(), io.StringIO()
    with redirect_stdout(stdout), redirect_stderr(stderr):
        code = main(["run", str(case_scenario(tmp, CASES)), "--out", str(out)])
    assert code == 0, stderr.getvalue()
    return out, stdout.getvalue(), stderr.getvalue()


def test_cases_run_with_the_base_and_compare_names_the_one_difference(cases_run, tmp_path):
    out, _, _ = cases_run
    for name in [case["name"] for case in CASES]:
        assert (out / name / "projection.gpkg").is_file()
        rec = json.loads((out / name / "run.json").read_text())
        assert rec["scenario"]["sensitivity"] == []
    assert (
        main(["compare", str(out), str(out / "loose"), "--out", str(tmp_path / "cmp"), "-q"]) == 0
    )
    table = pd.read_csv(tmp_path / "cmp" / "comparison.csv")
    assert len(table) == 2
    # two runs that differ in one override: that difference and nothing else
    assert table["differences"].iloc[1] == "flow.ending_stock: 0.5 -> 0.2"
    assert pd.isna(table["differences"].iloc[0])
    base = json.loads((out / "run.json").read_text())["flow"]["level_m3_per_year"]
    assert table["diff_level_m3_per_year"].iloc[1] == pytest.approx(
        table["level_m3_per_year"].iloc[1] - base
    )
    assert table["level_m3_per_year"].iloc[1] >= base  # a looser ending stock never lowers it
    with Image.open(tmp_path / "cmp" / "comparison.png") as img:
        assert img.format == "PNG" and img.size[0] >= 1000
    # the docs name every column of the comparison
    from helpers import ROOT

    docs = (ROOT / "docs" / "outputs.md").read_text(encoding="utf-8")
    for col in table.columns:
        assert f"| `{col}` |" in docs, col


def test_a_run_with_cases_logs_no_line_twice_and_names_each_cases_lines(cases_run):
    out, stdout, stderr = cases_run
    cases = [case["name"] for case in CASES]
    lines = stderr.splitlines()
    assert len(lines) == len(set(lines)), [x for x in lines if lines.count(x) > 1]
    # the write of the whole output (the cases' folders included) is logged once
    assert sum("write outputs done" in x for x in lines) == 1
    # one verdict for the base, and one for each case that names it
    verdicts = [x for x in lines if "verdict: " in x]
    assert len(verdicts) == 1 + len(cases)
    assert verdicts[0].startswith("yieldscape: verdict: ")
    for name, line in zip(cases, verdicts[1:], strict=True):
        assert line.startswith(f"yieldscape: case {name!r}: verdict: ")
    # each case's progress on stderr, and its level beside the base's on stdout
    for i, name in enumerate(cases, start=1):
        assert f"sensitivity case {name!r} ({i} of {len(cases)})" in stderr
        assert f"sensitivity case {name!r}: " in stdout
        # a case whose harvest dips below its level (a flow band) says how low, from its table
        (line,) = [x for x in stdout.splitlines() if x.startswith(f"sensitivity case {name!r}: ")]
        wf = regional_wood_flow(out / name / "wood_flow.csv")
        level = json.loads((out / name / "run.json").read_text())["flow"]["level_m3_per_year"]
        low = wf["harvest_m3_per_year"].min()
        said = f"its lowest period {low:,.0f} m3/year (the flow band)"
        assert (said in line) == (low < level * (1 - 1e-6)), line
    # run.log holds the same lines (INFO and above), with a time stamp and a level
    logged = [x.split(" ", 3)[3] for x in (out / "run.log").read_text().splitlines()]
    assert logged == [x.removeprefix("yieldscape: ") for x in lines]
    # each case's own log names it too and holds its verdict once
    own = (out / "late" / "run.log").read_text().splitlines()
    assert sum("verdict: " in x for x in own) == 1
    assert all(" case 'late': " in x for x in own)


def test_compare_of_the_cases_names_each_cases_change(cases_run, tmp_path):
    out, _, _ = cases_run
    cmp = tmp_path / "cmp"
    runs = [str(out)] + [str(out / case["name"]) for case in CASES]
    assert main(["compare", *runs, "--out", str(cmp), "-q"]) == 0
    table = pd.read_csv(cmp / "comparison.csv")
    assert table["differences"].iloc[1:].tolist() == [
        "flow.ending_stock: 0.5 -> 0.2",
        "species.pine.min_harvest_age: 60.0 -> 80.0",
        "harvest.max_opening_ha: 3.0 -> 2.0",
        "flow.band: 0.0 -> 0.3; flow.ending_stock: 0.5 -> 0.2",
    ]
    # a lower ending stock never lowers the level; smaller openings do not raise it here (the
    # pick is sequential: a law for this forest, not for every forest)
    level = table["level_m3_per_year"].to_numpy()
    assert level[1] >= level[0] >= level[3]
    # the run's own comparison (written with the base) says the same
    own = pd.read_csv(out / "comparison.csv")
    assert list(own.columns) == list(table.columns)  # so the docs check above covers both
    assert own["run"].tolist() == ["base", *(case["name"] for case in CASES)]
    assert own["differences"].iloc[1:].tolist() == table["differences"].iloc[1:].tolist()
    np.testing.assert_allclose(own["level_m3_per_year"], table["level_m3_per_year"])


def test_compare_prints_each_runs_verdict_and_its_figure_names_it(tmp_path, capsys, monkeypatch):
    from yieldscape.reporting import figures

    # a regulated forest (six 10-year classes up to the rotation of 60 years) is sustainable
    # (tests/reporting/test_verdict.py); targets of twice its area-control yield are not
    ages = np.repeat(np.arange(5.0, 60.0, 10.0), 10)
    layer = write_layer(tmp_path / "s.gpkg", squares(len(ages)), stand_attrs(len(ages), ages))
    raw = scenario_dict(layer, scenario={"periods": 12}, flow={"ending_stock": 1.0})
    twice = float(2 * len(ages) / 60 * 400 * (1 - np.exp(-0.03 * 60)) ** 3 * 10)  # m3/period
    raw["sensitivity"] = [
        {"name": "greedy", "set": {"flow.policy": "targets", "flow.targets_m3": [twice] * 12}}
    ]
    scn = write_scenario(tmp_path / "scn.toml", raw)
    out = tmp_path / "out"
    assert main(["run", str(scn), "--out", str(out), "-q"]) == 0
    verdicts = {
        str(d): json.loads((d / "run.json").read_text())["verdict"]["sustainable"]
        for d in (out, out / "greedy")
    }
    assert set(verdicts.values()) == {True, False}, verdicts
    drawn = []
    save = figures.save  # keep each figure for a look at its artists, and write it

    monkeypatch.setattr(figures, "save", lambda fig, path: (drawn.append(fig), save(fig, path)))
    capsys.readouterr()
    assert main(["compare", *verdicts, "--out", str(tmp_path / "cmp")]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert "sustainable" in lines[0].split()
    at = lines[0].split().index("sustainable")
    for line, (run, sustainable) in zip(lines[1:], verdicts.items(), strict=False):
        words = line.split()
        assert words[0] == run and words[at] == ("yes" if sustainable else "no")
    # the figure's legend names each run with its verdict
    (ax,) = drawn[0].axes
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert legend == [
        f"{run} ({'sustainable' if ok else 'not sustainable'})" for run, ok in verdicts.items()
    ]


@pytest.mark.parametrize(
    ("case", "match"),
    [
        ({"name": "bad/name", "set": {"flow.band": 0.1}}, r"name = 'bad/name': use letters"),
        (
            {"name": "x", "set": {"flow.bnd": 0.1}},
            r"\[\[sensitivity\]\] 'x': .*unknown \[flow\] key",
        ),
        ({"name": "x"}, r"set must be a table of dotted keys"),
    ],
)
def test_bad_cases_are_named(tmp_path, case, match):
    from yieldscape import load_scenario

    with pytest.raises(ScenarioError, match=match):
        load_scenario(case_scenario(tmp_path, [case]))


def test_compare_refuses_a_directory_that_is_not_a_run(tmp_path, capsys):
    (tmp_path / "notes").mkdir()
    assert main(["compare", str(tmp_path / "notes"), "--out", str(tmp_path / "c")]) == 2
    assert "not a yieldscape output directory" in capsys.readouterr().err
