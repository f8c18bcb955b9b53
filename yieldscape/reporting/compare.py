"""Scenario comparison: short-, mid- and long-term harvest levels and key indicators per run,
their differences to the first run, and the scenario keys in which the runs differ."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from yieldscape.reporting.figures import SIZES, finish_time_chart, period_steps, plt
from yieldscape.reporting.indicators import term_rows

IGNORED = ("overrides", "sensitivity", "source")  # provenance, not assumptions


def flatten(d: Any, prefix: str = "") -> dict[str, Any]:
    """Dotted keys of a nested scenario dict (lists kept whole)."""
    out: dict[str, Any] = {}
    if isinstance(d, dict):
        for k, v in d.items():
            if not prefix and k in IGNORED:
                continue
            out.update(flatten(v, f"{prefix}.{k}" if prefix else str(k)))
    else:
        out[prefix] = d
    return out


def comparison_table(runs: list[tuple[str, dict, pd.DataFrame]]) -> pd.DataFrame:
    """One row per run: levels, indicators, differences to the first run, differing keys."""
    rows = []
    first_keys = flatten(runs[0][1]["scenario"])
    for name, rec, wf in runs:
        terms = {
            f"{term}_m3_per_year": float(wf["harvest_m3_per_year"].iloc[span].mean())
            for term, span in term_rows(len(wf)).items()
        }
        keys = flatten(rec["scenario"])
        diffs = [
            f"{k}: {first_keys.get(k)!r} -> {keys.get(k)!r}"
            for k in sorted(set(first_keys) | set(keys))
            if first_keys.get(k) != keys.get(k)
        ]
        flow = rec["flow"]
        ltsy = flow.get("long_term_sustained_yield_m3_per_year", {})
        lp = rec.get("lp") or {}
        rows.append(
            {
                "run": name,
                "scenario": rec["scenario"]["scenario"]["name"],
                "policy": flow["policy"],
                "level_m3_per_year": flow["level_m3_per_year"],
                **terms,
                "total_harvest_m3": float(wf["harvest_m3"].sum()),
                "ending_stock_ratio": flow["ending_growing_stock_m3"]
                / flow["initial_growing_stock_m3"]
                if flow["initial_growing_stock_m3"] > 0
                else np.nan,  # bare land at the start, as indicators.ending_to_initial_...
                "harvestable_ha": rec["inventory"].get("harvestable_ha", np.nan),
                "ltsy_m3_per_year": ltsy.get("at_culmination", np.nan),
                "lp_gap": lp.get("gap_of_schedule_to_lp", np.nan),
                "sustainable": (rec.get("verdict") or {}).get("sustainable"),
                "differences": "; ".join(diffs),
            }
        )
    table = pd.DataFrame(rows)
    for col in (
        "level_m3_per_year",
        "short_term_m3_per_year",
        "mid_term_m3_per_year",
        "long_term_m3_per_year",
        "total_harvest_m3",
    ):
        table[f"diff_{col}"] = table[col] - table[col].iloc[0]
    return table


def comparison_figure(path: Path, runs: list[tuple[str, dict, pd.DataFrame]]) -> None:
    """The harvest forecasts of all runs on one set of axes (greyscale line styles), each
    labelled with its verdict."""
    styles = ["-", "--", ":", "-.", (0, (5, 1)), (0, (3, 1, 1, 1))]
    fig, ax = plt.subplots(figsize=SIZES["chart"], layout="constrained")
    for k, (name, rec, wf) in enumerate(runs):
        sustainable = (rec.get("verdict") or {}).get("sustainable")
        verdict = {True: "sustainable", False: "not sustainable"}.get(sustainable)
        grey = 0.6 * k / max(len(runs) - 1, 1)
        ax.step(
            *period_steps(wf, "harvest_m3_per_year"),
            where="post",
            color=str(grey),
            ls=styles[k % len(styles)],
            lw=1.6,
            label=f"{name} ({verdict})" if verdict else name,
        )
    finish_time_chart(fig, ax, path, "harvest (m3/year)", "Harvest forecasts of the runs")
