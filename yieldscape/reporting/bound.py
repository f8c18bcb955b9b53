"""What the harvest LP beside a run says about the schedule, in words: the bound of the same
problem, how far the schedule is below it and what of that gap is measured, and which cutting
order the run kept. The command line and the report print the same sentences."""

from __future__ import annotations


def lp_sentences(lp: dict | None, details: dict[str, float], period_years: int) -> list[str]:
    """Sentences on the LP of a run (``lp``: run.json's ``lp``; ``details``: the flow result's
    details), or none without an LP."""
    if lp is None:
        return []
    L = float(period_years)
    gap = 100 * lp["gap_of_schedule_to_lp"]
    head = f"harvest LP ({lp['status'].lower()}, {lp['strata']} strata)"
    explained = lp.get("gap_explained")
    if lp.get("objective_name") != "max-level" or explained is None:
        level = lp.get("level_m3_per_period")
        what = (
            f"{level / L:,.0f} m3/year in every period"
            if level is not None
            else f"{lp['total_harvest_m3'] / L:,.0f} m3 per year of the horizon in all"
        )
        out = [f"{head}: {what}; the schedule is {gap:.2f}% below it"]
        if lp.get("leaves_out"):
            out.append(f"the LP leaves out {', '.join(lp['leaves_out'])}; the schedule keeps them")
        return out
    out = [
        f"{head}, the bound of the same problem (the same policy, ending stock, area cap, "
        f"cover and disturbance, aspatial): {lp['level_m3_per_period'] / L:,.0f} m3/year in "
        f"every period; the schedule's lowest period is {gap:.2f}% below it"
    ]
    spatial = explained["spatial_rules_m3_per_period"] / L
    rest = explained["rest_m3_per_period"] / L
    never = details.get("never_cut_harvestable_ha", 0.0)
    if never > 0:
        out.append(
            f"the bound and the search without spatial rules leave the stands larger than "
            f"the maximum opening ({never:,.0f} ha harvestable) uncut, as the rules do"
        )
    if spatial:
        out.append(
            f"of that gap, the spatial rules cost {spatial:,.0f} m3/year (measured: the same "
            f"search without them); the other {rest:,.0f} m3/year is what the LP leaves out "
            "or averages (whole-stand cuts, the cutting order, stands averaged into strata)"
        )
    else:
        out.append(
            f"that gap, {rest:,.0f} m3/year, is what the LP leaves out or averages "
            "(whole-stand cuts, the cutting order, stands averaged into strata)"
        )
    if "lp_guided_level_m3_per_period" in details:
        ordered = details["priority_order_level_m3_per_period"] / L
        guided = details["lp_guided_level_m3_per_period"] / L
        if guided > ordered:
            out.append(
                f"the schedule follows the LP-guided order (the stands the LP cuts by each "
                f"period first, then those it cuts soonest after; its regeneration choices): "
                f"{guided:,.0f} m3/year, "
                f"{guided - ordered:,.0f} more than the priority order's {ordered:,.0f}"
            )
        else:
            out.append(
                f"the schedule follows the priority order: {ordered:,.0f} m3/year, at least "
                f"the LP-guided order's {guided:,.0f}"
            )
    return out
