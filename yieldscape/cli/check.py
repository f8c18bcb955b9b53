"""``yieldscape check SCENARIO``: every input check, no projection, nothing written."""

from __future__ import annotations

import argparse

import yieldscape


def add_parser(sub, common: argparse.ArgumentParser) -> None:  # noqa: ANN001
    p = sub.add_parser(
        "check",
        parents=[common],
        help="check the scenario and stand layer",
        description="Run all scenario and inventory checks and print a summary "
        "(stands, area by species and age class) without projecting.",
    )
    p.add_argument("scenario", help="scenario TOML file")
    p.set_defaults(handler=handle)


def handle(args: argparse.Namespace) -> int:
    scenario = yieldscape.load_scenario(args.scenario, overrides=args.overrides)
    checked = yieldscape.check(scenario, strict=args.strict)
    print(f"scenario {scenario.scenario.name!r}: checks passed")
    print(checked.summary())
    return 0
