"""Which stands can ever be cut: a stand on the harvestable land base whose minimum harvest
age lies beyond the oldest age the curves are followed to (``growth.max_age_years``), or whose
rule can never be met (an infinite age, e.g. a volume the curve never reaches), holds area and
volume no schedule can use. The run warns of them, so that a slip in a rule (a minimum harvest
age of 5,000 years) does not pass in silence."""

from __future__ import annotations

import numpy as np

from yieldscape.projection import CurveSet, StandArrays


def never_cut(stands: StandArrays, max_age_years: float) -> np.ndarray:
    """Stands with harvestable area whose minimum harvest age is beyond ``max_age_years``."""
    area = stands.cuttable_ha
    return (area > 0) & ~(stands.min_harvest_age <= max_age_years)


def never_cut_warnings(stands: StandArrays, curves: CurveSet, max_age_years: float) -> list[str]:
    """One line naming, per species, the stands that can never be cut (see above)."""
    mask = never_cut(stands, max_age_years)
    if not mask.any():
        return []
    area = stands.cuttable_ha
    parts = []
    for i, code in enumerate(curves.codes):  # per species
        mine = mask & (stands.species_idx == i)
        if not mine.any():
            continue
        ages = stands.min_harvest_age[mine]
        rule = (
            "its harvest age rule is never met within growth.max_age_years"
            if np.isinf(ages).all()
            else f"minimum harvest age {_span(ages[np.isfinite(ages)])} years"
        )
        n, ha = int(mine.sum()), float(area[mine].sum())
        parts.append(f"{code}: {n} stands, {ha:,.1f} ha ({rule})")
    cut_ha, total = float(area[mask].sum()), float(area.sum())
    return [
        f"{int(mask.sum())} stands ({cut_ha:,.1f} ha, {100 * cut_ha / total:.1f}% of the "
        f"harvestable land base) can never be cut: their minimum harvest age lies beyond "
        f"growth.max_age_years = {max_age_years:g}; " + "; ".join(parts)
    ]


def _span(values: np.ndarray) -> str:
    lo, hi = float(values.min()), float(values.max())
    return f"{lo:,.0f}" if round(lo) == round(hi) else f"{lo:,.0f} to {hi:,.0f}"


def larger_than_opening(harvestable_ha: np.ndarray, max_opening_ha: float) -> np.ndarray:
    """Stands whose harvestable area alone is larger than the maximum opening: the opening
    rule never lets them be cut (none under the unit restriction, ``max_opening_ha = 0``)."""
    if max_opening_ha <= 0:
        return np.zeros(len(harvestable_ha), dtype=bool)
    return harvestable_ha > max_opening_ha * (1 + 1e-9)


def too_large_for_openings(harvestable_ha: np.ndarray, max_opening_ha: float) -> list[str]:
    """A warning when stands are larger than the maximum opening: they are never cut (the
    tool does not split a stand into several cut blocks)."""
    big = larger_than_opening(harvestable_ha, max_opening_ha)
    if not big.any():
        return []
    return [
        f"harvest.max_opening_ha = {max_opening_ha:g}: {int(big.sum())} stands "
        f"({float(harvestable_ha[big].sum()):.0f} ha harvestable) are larger and will never be "
        "cut; raise it or split those stands"
    ]


def collapse_warnings(curves: CurveSet) -> list[str]:
    """A warning per stock-growth code that starts below its minimum viable stock: its stands
    collapse after a harvest instead of regrowing."""
    return [
        f"species {code}: initial_m3_ha is below min_viable_m3_ha, so its stands collapse "
        "after harvest instead of regrowing"
        for code, curve in zip(curves.codes, curves.curves, strict=True)
        if getattr(curve, "collapses", False)
    ]
