"""``yieldscape run SCENARIO --out DIR``: the whole projection, outputs written atomically."""

from __future__ import annotations

import argparse

import yieldscape
from yieldscape.parallel import INSTALL, SCHEDULER_ENV, Parallel
from yieldscape.policies import flow_policy
from yieldscape.reporting.bound import lp_sentences


def add_parser(sub, common: argparse.ArgumentParser) -> None:  # noqa: ANN001
    p = sub.add_parser(
        "run",
        parents=[common],
        help="project and schedule; write outputs",
        description="Project the stands, schedule harvests under the flow policy, judge "
        "whether the flow is sustainable, and write report.html, projection.gpkg, the "
        "tables as CSV, figures/, run.json and run.log into DIR (and each [[sensitivity]] "
        "case into DIR/<name>/).",
    )
    p.add_argument("scenario", help="scenario TOML file")
    p.add_argument("--out", required=True, metavar="DIR", help="output directory")
    p.add_argument(
        "--workers",
        type=_whole,
        metavar="N",
        help="run the sensitivity cases and Monte Carlo replicates on a local Dask cluster "
        f"of N processes (needs {INSTALL})",
    )
    p.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="send them to an existing Dask cluster, e.g. tcp://10.0.0.5:8786 (default: "
        f"${SCHEDULER_ENV}; neither: all in this process)",
    )
    p.set_defaults(handler=handle)


def handle(args: argparse.Namespace) -> int:
    scenario = yieldscape.load_scenario(args.scenario, overrides=args.overrides)
    parallel = Parallel.from_options(args.workers, args.scheduler)
    result = yieldscape.run(scenario, args.out, strict=args.strict, parallel=parallel)
    if not args.quiet:
        wf = result.wood_flow
        print(
            f"scenario {scenario.scenario.name!r}: {len(result.stands)} stands, "
            f"{result.inventory.report.area_ha:,.0f} ha, {len(wf)} periods of "
            f"{scenario.scenario.period_years} years"
        )
        what = flow_policy(result.flow.policy).level_label
        print(
            f"{what}: {result.flow.level_m3_per_year:,.0f} m3/year "
            f"({result.flow.level_m3_per_period:,.0f} m3 per period)"
        )
        print(f"limited by: {result.flow.binding}")
        if "spatial_cost_m3_per_period" in result.flow.details:
            cost = (
                result.flow.details["spatial_cost_m3_per_period"] / scenario.scenario.period_years
            )
            big = result.openings["area_ha"].max() if len(result.openings) else 0.0
            print(
                f"spatial rules cost {cost:,.0f} m3/year against the same policy without "
                f"them; largest opening {big:,.1f} ha; no rule is broken"
            )
        lines = lp_sentences(result.lp, result.flow.details, scenario.scenario.period_years)
        for k, line in enumerate(lines):
            print(line if k == 0 else f"  {line}")
        ltsy = result.long_term_sustained_yield
        print(
            f"long-term sustained yield for comparison: {ltsy['at_culmination']:,.0f} m3/year "
            f"at MAI culmination, {ltsy['at_min_harvest_age']:,.0f} m3/year at the minimum "
            "harvest ages (harvestable area x MAI)"
        )
        hlb0, hlb1 = (
            wf["hlb_growing_stock_start_m3"].iloc[0],
            wf["hlb_growing_stock_end_m3"].iloc[-1],
        )
        print(
            f"growing stock: {wf['growing_stock_start_m3'].iloc[0]:,.0f} m3 at start, "
            f"{wf['growing_stock_end_m3'].iloc[-1]:,.0f} m3 at the end; on the harvestable "
            f"land base {hlb0:,.0f} m3 at start, {hlb1:,.0f} m3 at the end ({_change(hlb0, hlb1)})"
        )
        print(f"verdict: {result.verdict.headline} (report.html has the checks)")
        for line in _unit_lines(result):
            print(line)
        for name, case in result.cases.items():
            diff = case.level_m3_per_year - result.level_m3_per_year
            judged = "sustainable" if case.verdict.sustainable else "NOT sustainable"
            low = float(case.wood_flow["harvest_m3_per_year"].min())
            dips = (
                f"; its lowest period {low:,.0f} m3/year (the flow band)"
                if low < case.level_m3_per_year * (1 - 1e-6)
                else ""
            )
            print(
                f"sensitivity case {name!r}: {case.level_m3_per_year:,.0f} m3/year "
                f"({diff:+,.0f} against the base{dips}), {judged}"
            )
        print(
            f"outputs in {result.out_dir}: report.html (open it in a browser), "
            "projection.gpkg (open it in a GIS), the tables as CSV, figures/, run.json, run.log"
        )
        print(
            "These are planning estimates; defer to local forest-practice law and to "
            "licensed professionals."
        )
    return 0


def _whole(text: str) -> int:
    """--workers N as a number; its range is checked with the other settings (Parallel)."""
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None


def _change(start: float, end: float) -> str:
    """The change from start to end in words, e.g. "-28%"."""
    return f"{100 * (end / start - 1):+.0f}%" if start > 0 else "none at start"


def _unit_lines(result: yieldscape.RunResult) -> list[str]:
    """Each management unit's level and verdict, each partition's shares, the costliest rules."""
    out, by = [], result.by_unit
    if by.units is not None:
        for row in by.units.itertuples(index=False):
            judged = "sustainable" if row.sustainable else "NOT sustainable"
            out.append(f"unit {row.unit!r}: {row.level_m3_per_year:,.0f} m3/year, {judged}")
    if by.partitions is not None:
        for name, g in by.partitions.groupby("partition", sort=False):
            out.append(
                f"partition {name!r}: {g['share_of_harvest'].min():.1%} to "
                f"{g['share_of_harvest'].max():.1%} of each period's harvest"
                + ("" if g["holds"].all() else " (a limit is broken)")
            )
    if by.costliest:
        costs = "; ".join(
            f"{r['rule']} {_figure(r['cost_m3_per_year_per_percent'])}" for r in by.costliest
        )
        out.append(f"costliest rules (LP duals, m3/year per 1% looser): {costs}")
    return out


def _figure(value: float) -> str:
    """A figure with thousands separated, two significant digits when small."""
    return f"{value:,.0f}" if abs(value) >= 10 else f"{value:.2g}"
