"""``yieldscape curves SCENARIO [--out DIR]``: the growth-curve report per species and site."""

from __future__ import annotations

import argparse
import sys

import pandas as pd

import yieldscape

SHOWN = {
    "species": "species",
    "site_index": "SI m",
    "culmination_age_years": "MAI age",
    "max_mai_m3_ha_yr": "max MAI",
    "yield_class": "YC",
    "min_harvest_age_years": "min age",
    "faustmann_rotation_years": "Faustmann",
    "fisher_rotation_years": "single",
    "lev_per_ha": "LEV/ha",
    "msy_stock_m3_ha": "MSY stock",
}


def add_parser(sub, common: argparse.ArgumentParser) -> None:  # noqa: ANN001
    p = sub.add_parser(
        "curves",
        parents=[common],
        help="report on the yield curves",
        description="Per species and site index in use: MAI culmination, yield "
        "class, minimum harvest age by each rule, Faustmann and single-rotation "
        "optima, MSY of stock models. Writes DIR/curves.csv and "
        "DIR/figures/curves_<species>.png with --out.",
    )
    p.add_argument("scenario", help="scenario TOML file")
    p.add_argument("--out", metavar="DIR", help="directory for curves.csv and figures/")
    p.add_argument(
        "--site-step",
        type=float,
        default=1.0,
        metavar="M",
        help="round site index to this step for the report rows (default 1 m)",
    )
    p.set_defaults(handler=handle)


def handle(args: argparse.Namespace) -> int:
    if not args.site_step > 0:
        raise yieldscape.InputError(f"--site-step {args.site_step}: must be > 0")
    scenario = yieldscape.load_scenario(args.scenario, overrides=args.overrides)
    report = yieldscape.curves(scenario, args.out, site_step_m=args.site_step)
    for note in report.notes:
        print(f"yieldscape: note: {note}", file=sys.stderr)
    if not args.quiet:
        table = report.table[list(SHOWN)].rename(columns=SHOWN)
        with pd.option_context("display.width", 120, "display.max_rows", 500):
            print(table.to_string(index=False, float_format=lambda v: f"{v:,.1f}", na_rep="-"))
        for path in report.files:
            print(f"wrote {path}")
    return 0
