"""``yieldscape fit POINTS.csv --model FAMILY``: fit a yield curve to age/volume points."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from yieldscape.growth.fitting import FAMILIES, fit_curve
from yieldscape.io.tables import read_points


def add_parser(sub, common: argparse.ArgumentParser) -> None:  # noqa: ANN001
    p = sub.add_parser(
        "fit",
        parents=[common],
        help="fit a yield curve to points",
        description="Least-squares fit of a yield curve family to a CSV of "
        "age_years, volume_m3_ha points; prints RMSE, R2, warnings and a "
        "[species] snippet to paste into a scenario.",
    )
    p.add_argument("points", help="CSV with columns age_years and volume_m3_ha")
    p.add_argument("--model", choices=sorted(FAMILIES), default="chapman-richards")
    p.add_argument(
        "--species", default="SPECIES", metavar="CODE", help="species code for the printed snippet"
    )
    p.set_defaults(handler=handle)


def handle(args: argparse.Namespace) -> int:
    ages, volumes = read_points(Path(args.points))
    fit = fit_curve(ages, volumes, args.model)
    for w in fit.warnings:
        print(f"yieldscape: warning: {w}", file=sys.stderr)
    print(f"{fit.model}: {fit.n} points, RMSE {fit.rmse:.4g} m3/ha, R2 {fit.r2:.4f}")
    print(", ".join(f"{k} = {v:.6g}" for k, v in fit.parameters.items()))
    print()
    print(fit.scenario_snippet(args.species))
    return 0
