"""How big a run may grow, checked before the projection starts.

A run's work grows with stands x periods (every simulated horizon touches each stand part once a
period, and the flow search simulates the horizon a few dozen times) and its GeoTIFFs with the
cells of the grid over the stands. A scenario that asks for far more than one machine can do
(ten thousand one-year periods, a centimetre raster over a region) is stopped here with the
numbers and a way out, instead of running for hours or failing after the projection.
"""

from __future__ import annotations

import math

import geopandas as gpd
import shapely

from yieldscape.config import Scenario
from yieldscape.errors import ScenarioError
from yieldscape.geometry import metres_per_unit, metric_geometries

# 5M stands x 100 periods; measured: 1M stands x 20 periods run end to end in about 100 s
MAX_STAND_PERIODS = 500_000_000
# a GeoTIFF grid of 2e8 cells holds 0.8 GB of stand labels and 0.8 GB per float32 layer
MAX_RASTER_CELLS = 200_000_000


def check_run_size(
    scenario: Scenario, stands: int, extent_m: tuple[float, float], where: str = ""
) -> None:
    """Raise a :class:`ScenarioError` when the run would exceed the limits above.

    ``extent_m`` is the width and height of the stands' bounding box in metres.
    """
    s = scenario.scenario
    runs = 1 + scenario.disturbance.replicates
    size = stands * s.periods * runs
    if size > MAX_STAND_PERIODS:
        what = f"{stands:,} stands x {s.periods} periods" + (
            f" x {runs} horizons (disturbance.replicates + 1)" if runs > 1 else ""
        )
        raise ScenarioError(
            f"{where}[scenario] periods = {s.periods}: {what} = {size:,} stand-periods, more "
            f"than the {MAX_STAND_PERIODS:,} this tool runs; use fewer, longer periods"
            + (" or fewer replicates" if runs > 1 else "")
        )
    cell = scenario.report.raster_cell_m
    if cell:
        w, h = extent_m
        cells = max(1, math.ceil(w / cell)) * max(1, math.ceil(h / cell))
        if cells > MAX_RASTER_CELLS:
            least = math.sqrt(w * h / MAX_RASTER_CELLS)
            raise ScenarioError(
                f"{where}[report] raster_cell_m = {cell:g}: a grid over the stands "
                f"({w / 1000:,.1f} x {h / 1000:,.1f} km) would hold {cells:,} cells, more than "
                f"the {MAX_RASTER_CELLS:,} allowed; use raster_cell_m >= {_round_up(least)}"
            )


def _round_up(x: float) -> str:
    """A round number at least ``x`` (1, 2 or 5 times a power of ten)."""
    power = 10 ** math.floor(math.log10(x))
    step = next(m for m in (1, 2, 5, 10) if m * power >= x)
    return f"{step * power:g}"


def stand_extent_m(stands: gpd.GeoDataFrame, scenario: Scenario) -> tuple[float, float]:
    """Width and height of the stands in metres (only the GeoTIFF size check needs them)."""
    if not scenario.report.raster_cell_m:
        return 0.0, 0.0
    geoms, wcrs = metric_geometries(stands)
    x0, y0, x1, y1 = shapely.total_bounds(geoms)
    return (x1 - x0) * metres_per_unit(wcrs), (y1 - y0) * metres_per_unit(wcrs)
