"""The library calls of the commands beside ``run``: :func:`curves` (the curves report of a
scenario) and :func:`compare` (runs side by side), over :func:`yieldscape.pipeline.check`
and the writers."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from yieldscape.config import Scenario
from yieldscape.errors import OutputError
from yieldscape.io.outputs import check_files_dir, read_run
from yieldscape.pipeline import check
from yieldscape.publish import RUN_JSON, write_comparison, write_curves
from yieldscape.reporting.compare import comparison_table
from yieldscape.reporting.curves import curves_table
from yieldscape.reporting.curves import notes as curve_notes
from yieldscape.results import CurvesResult
from yieldscape.runlog import Timer


def curves(
    scenario: Scenario, out_dir: str | Path | None = None, site_step_m: float = 1.0
) -> CurvesResult:
    """Per species and site value in use: culmination, rules, rotations; CSV and figures
    (written beside whatever ``out_dir`` holds, see :func:`yieldscape.publish.write_curves`)."""
    out = Path(out_dir) if out_dir is not None else None
    if out is not None:
        check_files_dir(out)
    inventory = check(scenario)
    with Timer().stage("curves report"):
        table, summaries = curves_table(scenario, inventory.stands, site_step_m)
    files = write_curves(out, scenario, table, summaries) if out is not None else []
    return CurvesResult(table, curve_notes(table), files)


def compare(run_dirs: list[str | Path], out_dir: str | Path) -> pd.DataFrame:
    """Compare yieldscape runs: ``OUT/comparison.csv`` (one row per run) and the overlay
    figure ``OUT/comparison.png``."""
    out = Path(out_dir)
    check_files_dir(out)
    if (out / RUN_JSON).exists():
        raise OutputError(
            f"--out {out}: holds a yieldscape run ({RUN_JSON}), whose own comparison.csv the "
            "comparison would replace; choose another directory"
        )
    runs = []
    for d in map(Path, run_dirs):
        rec, wf = read_run(d)
        runs.append((str(d), rec, wf))
    table = comparison_table(runs)
    write_comparison(out, table, runs)
    return table
