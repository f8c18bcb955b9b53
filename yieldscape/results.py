"""What the library's calls return: a checked inventory, a run, a curves report. The
orchestration (:mod:`yieldscape.pipeline`) fills them and the writer (:mod:`yieldscape.publish`)
writes them; both import this module, and neither imports the other's objects from the
other."""

from __future__ import annotations

from dataclasses import dataclass, field, fields, replace
from pathlib import Path

import geopandas as gpd
import pandas as pd

from yieldscape.growth.rules import SiteSummary
from yieldscape.inventory import CheckReport
from yieldscape.landbase import Netdown
from yieldscape.reporting.indicators import Verdict
from yieldscape.reporting.report import Figure
from yieldscape.reporting.units import UnitOutputs
from yieldscape.schedule.flow import FlowResult


@dataclass(frozen=True)
class CheckResult:
    """A checked inventory with its land base: stands (with netdown columns), report, netdown."""

    stands: gpd.GeoDataFrame
    report: CheckReport
    netdown: Netdown

    def summary(self) -> str:
        lines = [self.report.summary(), "land base netdown (ha):"]
        for row in self.netdown.table.itertuples(index=False):
            step = "" if pd.isna(row.step) else f"{row.step:>2}"
            removed = "" if pd.isna(row.removed_ha) else f"{row.removed_ha:>12,.1f}"
            lines.append(
                f"  {step:>2} {row.label:<30} {removed:>12} {row.percent_of_gross:>6.1f}%"
                f" {row.remaining_ha:>12,.1f}"
            )
        lines += [f"note: {n}" for n in self.netdown.notes]
        return "\n".join(lines)


@dataclass
class RunResult:
    """What a run produced: the tables in memory and where the files went."""

    out_dir: Path | None
    inventory: CheckResult
    flow: FlowResult
    wood_flow: pd.DataFrame
    stands: gpd.GeoDataFrame
    harvests: gpd.GeoDataFrame
    products: pd.DataFrame
    regeneration: pd.DataFrame | None = None  # area regrown from each code into each code
    verdict: Verdict | None = None  # is the flow sustainable, and why
    indicators: pd.DataFrame | None = None  # one row per indicator over the horizon
    timings_s: dict[str, float] = field(default_factory=dict)
    write_harvestable_layer: bool = False
    long_term_sustained_yield: dict[str, float] = field(default_factory=dict)  # m3/year
    openings: pd.DataFrame | None = None  # with spatial rules
    lp: dict | None = None  # the harvest LP: solver, status, objective, gap
    cover: pd.DataFrame | None = None  # cover targets per period
    monte_carlo: pd.DataFrame | None = None  # percentiles over disturbance replicates
    cases: dict[str, RunResult] = field(default_factory=dict)  # sensitivity cases by name
    age_classes: pd.DataFrame | None = None  # area by year, zone and age class
    analysis_units: pd.DataFrame | None = None  # area by year and code grown as
    stand_ages: pd.DataFrame | None = None  # each stand's age at the report years
    harvest_breakdown: pd.DataFrame | None = None  # harvest by period, zone and species
    regulated_hlb_stock_m3: float = float("nan")  # a regulated forest's, harvestable land
    curves: pd.DataFrame | None = None  # the curves report table (per species and site)
    curve_summaries: dict[str, list[SiteSummary]] = field(default_factory=dict)  # by species
    # figures drawn into the output before its write stage (publish.Ahead), by key
    figures_ahead: dict[str, Figure] = field(default_factory=dict)
    log: list[str] = field(default_factory=list)  # the run's log lines (run.log)
    warnings: tuple[str, ...] = ()  # what the run warned of (also in run.log and the report)
    # management units, harvest partitions and the LP's rows with their duals
    by_unit: UnitOutputs = field(default_factory=UnitOutputs)
    # what run.json holds, where the outputs were written where the run was (a sensitivity
    # case written by its own Dask task); None: not written yet
    written: dict | None = None

    @property
    def level_m3_per_year(self) -> float:
        return self.flow.level_m3_per_year


def without_stands(result: RunResult, written: dict) -> RunResult:
    """``result`` without its members of a row per stand or per harvest event (the stand and
    harvest layers, the stand ages, the inventory's stands and geometries, the recorded
    simulation's parts and events), once its outputs (``written``: what its run.json holds)
    are written: what a base run keeps of a sensitivity case written by its own task (its
    tables by period, verdict, indicators and record), a small fraction of its size."""
    inv, sim = result.inventory, result.flow.simulation
    netdown = inv.netdown
    netdown = replace(
        netdown,
        gross_ha=netdown.gross_ha[:0],
        removed_ha=netdown.removed_ha[:, :0],
        harvestable_ha=netdown.harvestable_ha[:0],
        remaining_geometry=netdown.remaining_geometry[:0],
    )
    per_part = {
        f.name: getattr(sim, f.name)[:0]
        for f in fields(sim)
        if f.name.startswith(("event_", "regen_", "final_"))
    }
    return replace(
        result,
        inventory=CheckResult(inv.stands.iloc[:0], inv.report, netdown),
        flow=replace(result.flow, simulation=replace(sim, snapshots={}, **per_part)),
        stands=result.stands.iloc[:0],
        harvests=result.harvests.iloc[:0],
        stand_ages=None,
        written=written,
    )


@dataclass
class CurvesResult:
    """The curves report: the table, its notes, and the files written (if any)."""

    table: pd.DataFrame
    notes: list[str]
    files: list[Path]
