"""``yieldscape compare DIR [DIR ...] --out OUT``: the runs side by side."""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

import yieldscape

SHOWN = [
    "run",
    "level_m3_per_year",
    "short_term_m3_per_year",
    "mid_term_m3_per_year",
    "long_term_m3_per_year",
    "ending_stock_ratio",
    "sustainable",
    "differences",
]


def add_parser(sub, common: argparse.ArgumentParser) -> None:  # noqa: ANN001
    p = sub.add_parser(
        "compare",
        parents=[common],
        help="compare runs side by side",
        description="Short-, mid- and long-term harvest levels and key "
        "indicators of each run, differences to the first run and the scenario "
        "keys in which they differ; writes OUT/comparison.csv and "
        "OUT/comparison.png.",
    )
    p.add_argument("runs", nargs="+", metavar="DIR", help="output directories of yieldscape run")
    p.add_argument("--out", required=True, metavar="OUT", help="directory for the comparison")
    p.set_defaults(handler=handle)


def verdict_word(sustainable: bool | None) -> str:
    """A run's verdict in a word ('?' for a run.json without one)."""
    return {True: "yes", False: "no"}.get(sustainable, "?")


def handle(args: argparse.Namespace) -> int:
    table = yieldscape.compare(args.runs, args.out)
    if not args.quiet:
        with pd.option_context("display.width", 140, "display.max_colwidth", 60):
            shown = table[SHOWN].assign(sustainable=table["sustainable"].map(verdict_word))
            print(shown.to_string(index=False, float_format=lambda v: f"{v:,.2f}"))
        out = Path(args.out)
        print(f"wrote {out / 'comparison.csv'} and {out / 'comparison.png'}")
    return 0
