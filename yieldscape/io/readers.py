"""The readers the land-base netdown and the inventory are given: overlay layers and raster
windows over the stands (the pipeline passes these in, so landbase and inventory open no
file themselves)."""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pyproj
import shapely

from yieldscape.config import NetdownStep
from yieldscape.errors import InputError
from yieldscape.io.rasters import RasterData, raster_crs, read_window
from yieldscape.io.vector import read_layer
from yieldscape.zonal import zonal


def _step_name(step: NetdownStep) -> str:
    return f"[[landbase.steps]] #{step.number} {step.label!r}"


def read_overlay(step: NetdownStep, crs: pyproj.CRS) -> gpd.GeoDataFrame:
    """A netdown step's overlay layer in ``crs``, without empty features (their positions in
    the layer kept as the index, for messages)."""
    assert step.layer is not None
    where = _step_name(step)
    try:
        frame, layer = read_layer(step.layer, step.layer_name, "layer_name", "overlay layer")
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from None
    if frame.crs is None:
        raise InputError(f"{where}: {step.layer}, layer {layer!r}: the layer has no CRS")
    frame = frame[~(frame.geometry.is_empty | frame.geometry.isna())]
    return frame.to_crs(crs)


def read_step_raster(
    step: NetdownStep, geoms: np.ndarray, crs: pyproj.CRS
) -> tuple[RasterData | None, np.ndarray]:
    """A netdown step's raster window over the geometries (see :func:`raster_over`)."""
    assert step.raster is not None
    return raster_over(step.raster, step.band, geoms, crs, _step_name(step))


def raster_over(
    path: Path, band: int, geoms: np.ndarray, crs: pyproj.CRS, what: str
) -> tuple[RasterData | None, np.ndarray]:
    """The raster window over the geometries (None where they do not overlap it), and the
    geometries in the raster's CRS."""
    rcrs = raster_crs(path, what)
    in_r = geoms if rcrs == crs else gpd.GeoSeries(geoms, crs=crs).to_crs(rcrs).to_numpy()
    live = in_r[~(shapely.is_empty(in_r) | shapely.is_missing(in_r))]
    if not len(live):
        return None, in_r
    return read_window(path, tuple(shapely.total_bounds(live)), band, what), in_r


def raster_site_index(
    path: Path, band: int, geoms: np.ndarray, crs: pyproj.CRS
) -> tuple[np.ndarray, int]:
    """Site index per stand from a raster by zonal mean (NaN where the raster has none), and
    how many stands it does not cover."""
    what = "inventory.from_raster.site_index"
    raster, in_r = raster_over(path, band, geoms, crs, what)
    if raster is None:
        raise InputError(f"{path}: {what}: the raster does not overlap the stands")
    z = zonal(in_r, raster)
    if not z.covered.any():
        raise InputError(f"{path}: {what}: the raster holds no data over the stands")
    return z.mean, int((~z.covered).sum())
