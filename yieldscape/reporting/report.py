"""The run report: one self-contained HTML page (figures embedded as data URIs, styles inline,
no network resource) and optionally the same content as Markdown.

The content is assembled once as a list of :class:`Section` blocks and rendered twice, so the
two forms cannot drift apart.
"""

from __future__ import annotations

import base64
import html
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from yieldscape.config import Scenario
from yieldscape.policies import flow_policy
from yieldscape.reporting.bound import lp_sentences
from yieldscape.reporting.indicators import Verdict
from yieldscape.reporting.units import UnitOutputs

CAUTION = (
    "These are planning estimates from models, not prescriptions. Yield curves, netdowns and "
    "rules simplify real forests, and a harvest level that is sustainable on paper can still "
    "harm people, places, soils, water and wildlife. Before any decision, defer to local "
    "forest-practice law and regulation and to licensed forest professionals who know the "
    "ground."
)


@dataclass(frozen=True)
class Figure:
    """A figure file of the run with its title and a caption saying how to read it."""

    path: Path
    title: str
    caption: str


@dataclass(frozen=True)
class Table:
    """A table of the report; columns left entirely empty are not shown."""

    frame: pd.DataFrame
    caption: str = ""
    collapsed: bool = False  # shown folded (HTML <details>)
    plain: tuple[str, ...] = ("period", "year", "from", "to", "first failing period")
    mixed: tuple[str, ...] = ("value",)  # columns of different quantities, row by row
    boxed: bool = False  # set off in a box (HTML), as the key numbers are

    def __post_init__(self) -> None:
        frame = self.frame.dropna(axis=1, how="all") if len(self.frame) else self.frame
        object.__setattr__(self, "frame", frame)


@dataclass(frozen=True)
class Items:
    """A titled list of separate points, one item each (the run's warnings)."""

    title: str
    items: tuple[str, ...]


Block = str | Table | Figure | Items


@dataclass
class Section:
    title: str
    blocks: list[Block] = field(default_factory=list)


@dataclass
class ReportData:
    """Everything the report shows; the pipeline fills it from a run."""

    scenario: Scenario
    created_utc: str
    yieldscape_version: str
    inventory: dict[str, Any]
    verdict: Verdict
    wood_flow: pd.DataFrame
    indicators: pd.DataFrame
    netdown: pd.DataFrame
    rotations: pd.DataFrame
    curves: pd.DataFrame
    figures: dict[str, Figure]
    binding: str
    cover: pd.DataFrame | None = None
    breakdown: pd.DataFrame | None = None
    analysis_units: pd.DataFrame | None = None  # area by report year and code
    comparison: pd.DataFrame | None = None
    lp: dict | None = None
    flow_details: dict[str, float] = field(default_factory=dict)  # the flow result's details
    case: tuple[str, dict] | None = None  # a sensitivity case: its name and the keys it sets
    warnings: tuple[str, ...] = ()  # what the run warned of, one sentence each
    by_unit: UnitOutputs | None = None  # management units, partitions, the LP rows' duals


def _decimals(values: pd.Series) -> int:
    """One number of decimals for a whole column: none for whole numbers or large values,
    more for small ones."""
    v = pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64)
    v = v[np.isfinite(v)]
    if not len(v) or np.all(v == np.round(v)):
        return 0
    top = np.abs(v).max()
    return 0 if top >= 1000 else 1 if top >= 10 else 2 if top >= 1 else 3


def _column(values: pd.Series, plain: bool, mixed: bool = False) -> list[str]:
    """A column's cells as text: thousands separators (not for years and periods, ``plain``),
    one precision per column (per cell for a column of ``mixed`` quantities), blanks for
    missing, 'never' for an infinite age."""
    if pd.api.types.is_bool_dtype(values):
        return ["yes" if v else "no" for v in values]
    if not pd.api.types.is_numeric_dtype(values):
        return [
            "" if pd.isna(v) else ("yes" if v else "no") if isinstance(v, bool) else str(v)
            for v in values
        ]
    d = _decimals(values)
    sep = "" if plain else ","
    out = []
    for v in values:
        if pd.isna(v):
            out.append("")
        elif isinstance(v, float) and math.isinf(v):
            out.append("never" if v > 0 else "-inf")
        else:
            places = _decimals(pd.Series([v])) if mixed else d
            out.append(f"{float(v):{sep}.{places}f}")
    return out


def _cells(t: Table) -> list[list[str]]:
    cols = [_column(t.frame[c], c in t.plain, c in t.mixed) for c in t.frame.columns]
    return [list(row) for row in zip(*cols, strict=True)] if cols else []


def _scenario_table(data: ReportData) -> pd.DataFrame:
    s = data.scenario
    info, f, h, d = s.scenario, s.flow, s.harvest, s.disturbance
    end = info.start_year + info.periods * info.period_years
    inv = data.inventory
    rows = [("scenario", info.name)]
    if data.case is not None:
        name, sets = data.case
        rows.append(
            (
                "sensitivity case",
                f"{name}: the base case with " + ", ".join(f"{k} = {v!r}" for k, v in sets.items()),
            )
        )
    rows += [
        (
            "horizon",
            f"{info.start_year} to {end}: {info.periods} periods of "
            f"{info.period_years} years, harvest at the period's {info.harvest_timing}",
        ),
        (
            "stand layer",
            f"{s.inventory.path.name}: {inv['stands']:,} stands, "
            f"{inv['area_ha']:,.0f} ha, {inv['crs']}",
        ),
        (
            "harvestable land base",
            f"{inv['harvestable_ha']:,.0f} ha "
            f"({100 * inv['harvestable_ha'] / inv['area_ha']:.1f}% of the gross area)",
        ),
        (
            "flow policy",
            f"{flow_policy(f.policy).label}"
            + (f", band +/-{100 * f.band:g}%" if f.policy == "even" and f.band else "")
            + (
                f", step-down at most {100 * f.step_down_max:g}% per period"
                if f.policy == "stepdown"
                else ""
            )
            + f"; ending growing stock at least {100 * f.ending_stock:g}% of the initial"
            + ("; schedule from the harvest LP" if f.method == "optimize" else ""),
        ),
        ("harvest order", _harvest_order_text(data)),
        (
            "spatial rules",
            (
                f"green-up {h.greenup_years:g} years, openings up to "
                f"{h.max_opening_ha:g} ha, {h.adjacency} neighbours"
                if h.max_opening_ha
                else f"green-up {h.greenup_years:g} years, no two neighbours ({h.adjacency})"
            )
            if h.spatial
            else "none",
        ),
        (
            "cover targets",
            "; ".join(
                f"{'all zones' if c.zone == '*' else 'zone ' + c.zone}: "
                f"{'older' if c.kind == 'old' else 'younger'} than "
                f"{c.age_years:g} years {'at least' if c.kind == 'old' else 'at most'} "
                f"{100 * c.share:g}%"
                for c in s.cover
            )
            or "none",
        ),
        (
            "disturbance",
            f"{100 * d.annual_rate:g}% a year, stand-replacing"
            + (f"; {d.replicates} random replicates" if d.replicates else "")
            if d.annual_rate
            else "none",
        ),
        (
            "species",
            "; ".join(
                f"{code}: {sp.curve}"
                + (
                    f", net price {sp.price_per_m3:g} per m3 (scenario currency)"
                    if sp.price_per_m3 is not None
                    else ""
                )
                for code, sp in s.species.items()
            ),
        ),
        ("regeneration", _regeneration_text(s)),
        ("thinnings", _thinning_text(s)),
    ]
    if s.overrides:
        rows.append(("overrides (--set)", ", ".join(s.overrides)))
    return pd.DataFrame(rows, columns=["item", "value"])


def _harvest_order_text(data: ReportData) -> str:
    """The priority rule, the LP-guided order where it won, and the area cap."""
    h = data.scenario.harvest
    return (
        f"{h.priority} first"
        + (
            "; the stands the harvest LP cuts by each period ahead of the others (the "
            "LP-guided order, which held the higher level)"
            if _guided_won(data.flow_details)
            else ""
        )
        + (
            f"; at most {h.max_area_ha_per_period:,.0f} ha per period"
            if h.max_area_ha_per_period
            else ""
        )
    )


def _guided_won(details: dict[str, float]) -> bool:
    """Whether the run kept the LP-guided order (its level above the priority order's)."""
    guided = details.get("lp_guided_level_m3_per_period")
    ordered = details.get("priority_order_level_m3_per_period")
    return guided is not None and ordered is not None and guided > ordered


def _regeneration_text(s: Scenario) -> str:
    """What each code's clearcuts regrow as, in words."""
    parts = []
    for code, sp in s.species.items():
        r = sp.regenerate_as
        if r is None:
            continue
        if r.kind == "as":
            parts.append(f"{code} regrows as {r.codes[0]}")
        elif r.kind == "split":
            shares = ", ".join(f"{100 * q:g}% {c}" for c, q in zip(r.codes, r.shares, strict=True))
            parts.append(f"{code} regrows as {shares}")
        else:
            parts.append(
                f"{code}: the harvest LP chooses among {', '.join(r.codes)} (the rules take "
                f"{r.codes[0]})"
            )
    return "; ".join(parts) or "each code regrows as itself"


def _thinning_text(s: Scenario) -> str:
    """Each thinned code's thinnings, in words."""
    parts = []
    for code, sp in s.species.items():
        if sp.thinnings:
            each = ", ".join(f"{100 * t.removal_share:g}% at {t.age_years:g}" for t in sp.thinnings)
            parts.append(f"{code}: {each} years (shares of the standing volume)")
        elif sp.thinning_m3_ha is not None and sp.ages is not None:
            ages = [a for a, *r in zip(sp.ages, *sp.thinning_m3_ha, strict=True) if max(r) > 0]
            parts.append(
                f"{code}: the yield table's removals at {', '.join(f'{a:g}' for a in ages)} years"
            )
    return "; ".join(parts) or "none"


ROTATION_HEADERS = {
    "site_index_min": "SI from (m)",
    "site_index_max": "SI to (m)",
    "site_index": "SI (m)",
    "area_ha": "area (ha)",
    "culmination_age_years": "MAI culmination",
    "max_mai_m3_ha_yr": "max MAI",
    "min_harvest_age_years": "min. harvest age",
    "faustmann_rotation_years": "Faustmann rotation",
    "fisher_rotation_years": "single-rotation (Fisher)",
    "lev_per_ha": "LEV per ha",
}

WOOD_FLOW_SHOWN = {
    "period": "period",
    "start_year": "from",
    "end_year": "to",
    "harvest_m3_per_year": "harvest m3/yr",
    "harvest_ha_per_year": "area ha/yr",
    "mean_harvest_age_years": "mean age",
    "harvest_volume_m3_ha": "m3/ha cut",
    "growing_stock_end_m3": "growing stock m3 (end)",
    "hlb_growing_stock_end_m3": "harvestable stock m3 (end)",
    "net_growth_m3_per_year": "net growth m3/yr",
    "meets_policy": "meets policy",
    "discounted_net_revenue": "discounted net revenue",
}


CHECK_SHOWN = {
    "label": "check",
    "holds": "holds",
    "first_failing_period": "first failing period",
    "detail": "detail",
}
INDICATORS_SHOWN = {"label": "indicator", "value": "value", "unit": "unit", "meaning": "meaning"}
NETDOWN_SHOWN = {
    "step": "step",
    "label": "label",
    "removed_ha": "removed (ha)",
    "percent_of_gross": "% of gross",
    "remaining_ha": "remaining (ha)",
    "kind": "kind",
}
CASES_SHOWN = {
    "run": "case",
    "level_m3_per_year": "level m3/yr",
    "short_term_m3_per_year": "short term m3/yr",
    "long_term_m3_per_year": "long term m3/yr",
    "ending_stock_ratio": "ending / initial stock",
    "sustainable": "sustainable",
    "diff_level_m3_per_year": "level against base m3/yr",
    "differences": "differences",
}
BREAKDOWN_SHOWN = {
    "zone": "zone",
    "species": "species",
    "harvest_ha": "area cut (ha)",
    "harvest_m3": "volume cut (m3)",
}


def _shown(frame: pd.DataFrame, headers: dict[str, str]) -> pd.DataFrame:
    """The columns of ``headers`` that the frame has, renamed to their headers."""
    return frame[[c for c in headers if c in frame]].rename(columns=headers)


def key_numbers(data: ReportData) -> pd.DataFrame:
    """The numbers a reader needs first, in words: the flow level, the harvestable land base,
    the long-term sustained yield, the ending growing stock against the initial and the
    requirement, the growing stock on the harvestable land base at the start and the end, and
    each sensitivity case's level and verdict."""
    ind = data.indicators.set_index("indicator")["value"]
    f = data.scenario.flow
    policy = flow_policy("optimize" if f.method == "optimize" else f.policy).level_label
    level = float(ind["flow_level_m3_per_year"])
    gross, hlb = float(ind["gross_area_ha"]), float(ind["harvestable_ha"])
    ltsy = float(ind["ltsy_at_culmination_m3_per_year"])
    gs0, gs1 = float(ind["initial_growing_stock_m3"]), float(ind["ending_growing_stock_m3"])
    need = f.ending_stock
    rows = [
        (f"Flow level ({policy})", f"{level:,.0f} m3/year"),
        (
            "Harvestable land base",
            f"{hlb:,.0f} ha, {100 * hlb / gross:.1f}% of the gross {gross:,.0f} ha"
            if gross > 0
            else f"{hlb:,.0f} ha",
        ),
        (
            "Long-term sustained yield",
            f"{ltsy:,.0f} m3/year (harvestable area x maximum MAI); the flow level is "
            f"{100 * level / ltsy:.0f}% of it"
            if ltsy > 0
            else f"{ltsy:,.0f} m3/year (harvestable area x maximum MAI)",
        ),
        (
            "Ending growing stock",
            (
                f"{gs1:,.0f} m3, {100 * gs1 / gs0:.1f}% of the initial {gs0:,.0f} m3"
                if gs0 > 0
                else f"{gs1:,.0f} m3"
            )
            + (f"; at least {100 * need:g}% required" if need > 0 else "; no minimum required"),
        ),
    ]
    wf = data.wood_flow
    if len(wf) and "hlb_growing_stock_start_m3" in wf:
        h0 = float(wf["hlb_growing_stock_start_m3"].iloc[0])
        h1 = float(wf["hlb_growing_stock_end_m3"].iloc[-1])
        rows.append(
            (
                "Growing stock on the harvestable land base",
                f"{h0:,.0f} m3 at the start, {h1:,.0f} m3 at the end"
                + (f" ({100 * (h1 / h0 - 1):+.0f}%)" if h0 > 0 else ""),
            )
        )
    if data.comparison is not None:
        for row in data.comparison.iloc[1:].itertuples(index=False):
            judged = {True: "sustainable", False: "not sustainable"}.get(
                row.sustainable, "verdict unknown"
            )
            rows.append(
                (
                    f"Sensitivity case {row.run}",
                    f"{row.level_m3_per_year:,.0f} m3/year "
                    f"({row.diff_level_m3_per_year:+,.0f} against the base), {judged}",
                )
            )
    return pd.DataFrame(rows, columns=["key number", "value"])


def sections(data: ReportData) -> list[Section]:
    """The report's content, in reading order. The first screen (one section) holds the
    verdict, the key numbers and the caution, then the run's warnings; the checks and the
    rest follow."""
    v = data.verdict
    out = [_first_screen(data)]
    out.append(
        Section(
            "Checks of the verdict",
            [
                Table(_shown(v.table(), CHECK_SHOWN), "Methods: docs/methods.md, the verdict."),
                *_lp_paragraph(data),
            ],
        )
    )
    rules = _units_section(data)
    if rules is not None:
        out.append(rules)
    flow = _figures("Harvest and growing stock", data, ("harvest_forecast", "growing_stock"))
    if not data.scenario.report.figures:
        flow = Section(flow.title, ["No figures were drawn (report.figures = false)."])
    out.append(flow)
    out.append(Section("Scenario", [Table(_scenario_table(data))]))
    out.append(
        Section(
            "Land base netdown",
            [
                Table(
                    _shown(data.netdown, NETDOWN_SHOWN),
                    "Each step removes only area no earlier step removed.",
                )
            ],
        )
    )
    out.append(_rotations(data))
    out.append(_indicator_tables(data))
    out.append(_structure(data))
    if "monte_carlo" in data.figures:
        out.append(Section("Disturbance risk", [data.figures["monte_carlo"]]))
    if data.comparison is not None:
        out.append(_cases(data))
    curves = _figures("Growth curves", data, [k for k in data.figures if k.startswith("curves_")])
    if curves.blocks:
        out.append(curves)
    out.append(
        Section(
            "About this run",
            [
                f"yieldscape {data.yieldscape_version}, run at {data.created_utc} (UTC). "
                "run.json records the resolved scenario, the checksums of every input file "
                "and the versions of the libraries used.",
                CAUTION,
            ],
        )
    )
    return out


def _first_screen(data: ReportData) -> Section:
    v = data.verdict
    first: list[Block] = [
        v.headline,
        f"What stops a higher level: {v.limited_by}.",
        Table(key_numbers(data), "Key numbers (indicators.csv has them all).", boxed=True),
        CAUTION,
    ]
    if data.warnings:  # after the caution, which the first screen must hold
        first.append(Items("Warnings", tuple(data.warnings)))
    return Section("Verdict", first)


def _lp_paragraph(data: ReportData) -> list[Block]:
    """The harvest LP beside the run, in one paragraph (none without an LP)."""
    said = lp_sentences(data.lp, data.flow_details, data.scenario.scenario.period_years)
    if not said:
        return []
    return ["Against the harvest LP: " + "; ".join(said) + "."]


def _figures(title: str, data: ReportData, keys: Sequence[str]) -> Section:
    """A section of the figures of ``keys`` the run drew, in that order."""
    return Section(title, [data.figures[k] for k in keys if k in data.figures])


def _rotations(data: ReportData) -> Section:
    return Section(
        "Growth curves and rotations",
        [
            Table(
                data.rotations.rename(columns=ROTATION_HEADERS),
                "Per species, area-weighted over the site index values in use "
                "(ages in years, MAI in m3/ha/yr).",
            ),
            Table(
                data.curves.rename(columns=ROTATION_HEADERS),
                "Per species and site index (1 m steps; curves.csv has the same columns).",
                collapsed=True,
            ),
        ],
    )


def _indicator_tables(data: ReportData) -> Section:
    shown = data.wood_flow[[c for c in WOOD_FLOW_SHOWN if c in data.wood_flow]]
    if shown["discounted_net_revenue"].isna().all():
        shown = shown.drop(columns="discounted_net_revenue")
    return Section(
        "Indicators",
        [
            Table(
                _shown(data.indicators, INDICATORS_SHOWN),
                "Over the whole horizon (indicators.csv).",
            ),
            Table(
                shown.rename(columns=WOOD_FLOW_SHOWN),
                "By period, years from and to inclusive (wood_flow.csv has every column).",
            ),
        ],
    )


def _structure(data: ReportData) -> Section:
    forest = _figures("Forest structure", data, ("age_classes", "cover_targets", "harvest_map"))
    if data.breakdown is not None and len(data.breakdown):
        by = (
            data.breakdown.groupby(["zone", "species"], dropna=False)[["harvest_ha", "harvest_m3"]]
            .sum()
            .reset_index()
        )
        forest.blocks.append(
            Table(_shown(by, BREAKDOWN_SHOWN), "Harvest over the horizon by zone and species.")
        )
    units = data.analysis_units
    if units is not None and units["analysis_unit"].nunique() > 1:
        wide = units.pivot(index="year", columns="analysis_unit", values="area_ha").reset_index()
        forest.blocks.append(
            Table(
                wide,
                "Area (ha) by analysis unit at the report years: what the forest grows as, "
                "regeneration included (area_by_analysis_unit.csv).",
            )
        )
    return forest


UNITS_SHOWN = {
    "unit": "unit",
    "policy": "policy",
    "band": "band",
    "ending_stock_share": "ending stock share",
    "level_m3_per_year": "level m3/yr",
    "lp_level_m3_per_year": "its LP bound m3/yr",
    "ending_stock_ratio": "ending / initial stock",
    "sustainable": "sustainable",
    "limited_by": "limited by",
}


def _units_section(data: ReportData) -> Section | None:
    """Each management unit's flow and verdict, each partition's shares, and the three rules
    that cost the most level (None where the run has no units, partitions or LP rows)."""
    u = data.by_unit
    if u is None or (u.units is None and u.partitions is None and not u.costliest):
        return None
    blocks: list[Block] = []
    if u.units is not None:
        blocks.append(
            Table(
                _shown(u.units, UNITS_SHOWN),
                "Each management unit's own flow and verdict (the region's checks on the "
                "unit's wood flow; management_units.csv, wood_flow.csv by unit).",
            )
        )
        blocks += [
            f"Unit {n}: {v.statement}" for n, v in zip(u.units["unit"], u.verdicts, strict=True)
        ]
    if u.partitions is not None:
        by = u.partitions.groupby("partition", sort=False)
        table = pd.DataFrame(
            {
                "partition": list(by.groups),
                "least share %": 100 * by["share_of_harvest"].min().to_numpy(),
                "largest share %": 100 * by["share_of_harvest"].max().to_numpy(),
                "limits": [_limits(g) for _, g in by],
                "volume m3": by["volume_m3"].sum().to_numpy(),
                "holds in every period": by["holds"].all().to_numpy(),
            }
        )
        blocks.append(
            Table(
                table, "Each partition's share of the period's harvest (partitions.csv by period)."
            )
        )
    if u.costliest:
        rows = pd.DataFrame(u.costliest)[["rule", "cost_m3_per_year_per_percent"]]
        blocks.append(
            Table(
                rows.rename(columns={"cost_m3_per_year_per_percent": "m3/yr per 1% looser"}),
                f"The {len(rows)} rules that cost the LP bound the most level, from its dual "
                "values: the level (m3/year) the bound gains, to first order, from loosening "
                "each rule by one percentage point (a share: flow.ending_stock, min_share, "
                "max_share) or by 1% (an amount), summed over the rule's periods; what a rule "
                "costs the schedule can differ (constraints.csv lists every row).",
            )
        )
    return Section("Management units and partitions", blocks)


def _limits(rows: pd.DataFrame) -> str:
    """A partition's limits in words, from its partitions.csv rows."""
    first = rows.iloc[0]
    words = [
        f"{what} {100 * first[key]:g}%"
        for key, what in (("min_share", "at least"), ("max_share", "at most"))
        if pd.notna(first[key])
    ]
    return ", ".join(words) or "amounts (partitions.csv)"


def _cases(data: ReportData) -> Section:
    assert data.comparison is not None
    block: list[Block] = [
        Table(
            _shown(data.comparison, CASES_SHOWN),
            "The base case and each [[sensitivity]] case, with its verdict.",
        )
    ]
    if "comparison" in data.figures:
        block.append(data.figures["comparison"])
    return Section("Sensitivity cases", block)


STYLE = """
body { font-family: sans-serif; max-width: 60em; margin: 2em auto; padding: 0 1em;
       color: #111; line-height: 1.45; }
h1 { font-size: 1.6em; } h2 { font-size: 1.25em; border-bottom: 1px solid #999;
       margin-top: 2em; }
table { border-collapse: collapse; margin: 0.8em 0; font-size: 0.85em; }
th, td { border: 1px solid #bbb; padding: 0.2em 0.5em; vertical-align: top; }
th { background: #eee; text-align: left; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
caption { caption-side: top; text-align: left; font-style: italic; padding: 0.2em 0; }
figure { margin: 1em 0; } figure img { max-width: 100%; height: auto; border: 1px solid #ddd; }
figcaption { font-size: 0.9em; }
.caution { border: 2px solid #333; padding: 0.6em 1em; background: #f4f4f4; }
.verdict { font-size: 1.05em; font-weight: bold; }
.box table { border: 2px solid #333; font-size: 0.95em; }
.box th { display: none; }
.box td:first-child { font-weight: bold; }
.warnings { border-left: 4px solid #333; padding: 0.1em 1em; background: #f4f4f4; }
.warnings p { margin: 0.4em 0; }
.wide { overflow-x: auto; }
"""


def _title(data: ReportData) -> str:
    title = f"yieldscape report: {data.scenario.scenario.name}"
    return title if data.case is None else f"{title}, sensitivity case {data.case[0]}"


def _html_table(t: Table) -> str:
    frame = t.frame
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in frame.columns)
    numeric = [pd.api.types.is_numeric_dtype(frame[c]) for c in frame.columns]
    body = "".join(
        "<tr>"
        + "".join(
            f'<td class="num">{html.escape(c)}</td>' if num else f"<td>{html.escape(c)}</td>"
            for c, num in zip(row, numeric, strict=True)
        )
        + "</tr>"
        for row in _cells(t)
    )
    cap = f"<caption>{html.escape(t.caption)}</caption>" if t.caption else ""
    cls = "wide box" if t.boxed else "wide"
    table = (
        f'<div class="{cls}"><table>{cap}<thead><tr>{head}</tr></thead>'
        f"<tbody>{body}</tbody></table></div>"
    )
    if t.collapsed:
        return f"<details><summary>{html.escape(t.caption or 'table')}</summary>{table}</details>"
    return table


def _html_figure(fig: Figure) -> str:
    data = base64.b64encode(fig.path.read_bytes()).decode("ascii")
    return (
        f'<figure><img src="data:image/png;base64,{data}" alt="{html.escape(fig.title)}" '
        f'data-file="figures/{html.escape(fig.path.name)}">'
        f"<figcaption><strong>{html.escape(fig.title)}.</strong> "
        f"{html.escape(fig.caption)}</figcaption></figure>"
    )


def html_report(data: ReportData) -> str:
    """The report as one HTML5 document with everything embedded."""
    parts = []
    for sec in sections(data):
        parts.append(f"<section><h2>{html.escape(sec.title)}</h2>")
        for i, block in enumerate(sec.blocks):
            if isinstance(block, Table):
                parts.append(_html_table(block))
            elif isinstance(block, Figure):
                parts.append(_html_figure(block))
            elif isinstance(block, Items):
                items = "".join(f"<li>{html.escape(i)}</li>" for i in block.items)
                parts.append(
                    f'<div class="warnings"><p><strong>{html.escape(block.title)}</strong></p>'
                    f"<ul>{items}</ul></div>"
                )
            else:
                cls = (
                    ' class="caution"'
                    if block == CAUTION
                    else ' class="verdict"'
                    if sec.title == "Verdict" and i == 0
                    else ""
                )
                parts.append(f"<p{cls}>{html.escape(block)}</p>")
        parts.append("</section>")
    title = _title(data)
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"<title>{html.escape(title)}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n"
        f"<h1>{html.escape(title)}</h1>\n" + "\n".join(parts) + "\n</body>\n</html>\n"
    )


def _md_escape(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def markdown_report(data: ReportData) -> str:
    """The same report as Markdown; figures are linked from ``figures/``."""
    lines = [f"# {_title(data)}", ""]
    for sec in sections(data):
        lines += [f"## {sec.title}", ""]
        for block in sec.blocks:
            if isinstance(block, Table):
                if block.caption:
                    lines += [f"*{block.caption}*", ""]
                cols = [str(c) for c in block.frame.columns]
                lines.append("| " + " | ".join(_md_escape(c) for c in cols) + " |")
                lines.append("|" + "---|" * len(cols))
                for row in _cells(block):
                    lines.append("| " + " | ".join(_md_escape(c) for c in row) + " |")
                lines.append("")
            elif isinstance(block, Figure):
                lines += [
                    f"![{block.title}](figures/{block.path.name})",
                    "",
                    f"*{block.title}.* {block.caption}",
                    "",
                ]
            elif isinstance(block, Items):
                lines += [f"**{block.title}**", ""]
                lines += [f"- {_md_escape(i)}" for i in block.items] + [""]
            else:
                lines += [block, ""]
    return "\n".join(lines)
