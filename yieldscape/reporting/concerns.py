"""Results that pass every check and still deserve a word: a harvest level held well below
what the land grows while stock piles up, and disturbance replicates whose spread shows in
growing stock only. Each function returns the warning's text, or None."""

from __future__ import annotations

import pandas as pd

# Thresholds of judgement (common practice would call either a result to look into)
LOW_SHARE_OF_LTSY = 0.6  # long-term harvest below this share of the long-term sustained yield
STOCK_PILING = 1.5  # harvestable stock ending above this multiple of a regulated forest's


def level_held_down(
    wood_flow: pd.DataFrame,
    ltsy_m3_per_year: float,
    regulated_hlb_stock_m3: float,
    long_term_periods: int,
    binding: str,
) -> str | None:
    """The long-term harvest is well below the long-term sustained yield while the growing
    stock on the harvestable land base ends well above a regulated forest's: the land grows
    more than is cut, so a rule, not growth, holds the level down; name the rule."""
    if ltsy_m3_per_year <= 0 or regulated_hlb_stock_m3 <= 0:
        return None
    k = max(1, min(long_term_periods, len(wood_flow)))
    lt = float(wood_flow["harvest_m3_per_year"].iloc[-k:].mean())
    stock = float(wood_flow["hlb_growing_stock_end_m3"].iloc[-1])
    share, multiple = lt / ltsy_m3_per_year, stock / regulated_hlb_stock_m3
    if share >= LOW_SHARE_OF_LTSY or multiple <= STOCK_PILING:
        return None
    return (
        f"the harvest of the last {k} periods, {lt:,.0f} m3/year, is only {100 * share:.0f}% "
        f"of the long-term sustained yield ({ltsy_m3_per_year:,.0f} m3/year) while the "
        f"growing stock on the harvestable land base ends at {multiple:.1f} times a regulated "
        f"forest's: a rule, not the forest's growth, holds the level down. What stops a "
        f"higher level: {binding}"
    )


def monte_carlo_spread(monte_carlo: pd.DataFrame) -> str | None:
    """Every replicate met every target: the disturbance shows in growing stock only, and the
    harvest band (P10 = P50 = P90) says nothing of risk to the flow."""
    if not len(monte_carlo) or (monte_carlo["shortfall_probability"] > 0).any():
        return None
    spread = monte_carlo["growing_stock_p90_m3"] - monte_carlo["growing_stock_p10_m3"]
    widest = int(spread.to_numpy().argmax())
    return (
        f"every disturbance replicate met the harvest target in every period, so the harvest "
        f"percentiles coincide; the disturbance shows in growing stock only (P10 to P90 up to "
        f"{float(spread.iloc[widest]):,.0f} m3 apart, in period "
        f"{int(monte_carlo['period'].iloc[widest])}; monte_carlo.csv)"
    )
