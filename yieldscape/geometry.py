"""Geometry helpers every layer shares: repair, and a metre-based CRS for distances.

Repair is one rule for every layer read, stands and land-base overlays alike.
An invalid geometry (a self-intersecting ring, a bow-tie) is repaired with
``shapely.make_valid`` (the GEOS "structure" of OGC validity), keeping only the parts of the
input's own dimension (a repaired polygon may gain stray lines or points, which carry no
area), or rejected when the user asks for strictness. Either way the caller says how many were
repaired and where, so the user can mend the source.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pyproj
import shapely


def invalid_mask(geoms: np.ndarray) -> np.ndarray:
    """Geometries that are present, non-empty and not valid by OGC rules."""
    present = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    out = np.zeros(len(geoms), dtype=bool)
    out[present] = ~shapely.is_valid(geoms[present])
    return out


def repair(geoms: np.ndarray, invalid: np.ndarray) -> np.ndarray:
    """A copy of ``geoms`` with the ``invalid`` ones made valid, keeping the parts of each
    input's own dimension (polygons stay polygonal, lines linear); empty where none is left."""
    out = geoms.copy()
    idx = np.flatnonzero(invalid)
    if not len(idx):
        return out
    dims = shapely.get_dimensions(geoms[idx])
    fixed = shapely.make_valid(geoms[idx])
    for j, (geom, dim) in enumerate(zip(fixed, dims, strict=True)):  # the few repaired only
        parts = shapely.get_parts(shapely.get_parts(geom))
        same = parts[shapely.get_dimensions(parts) == dim]
        out[idx[j]] = shapely.union_all(same) if len(same) else shapely.GeometryCollection()
    return out


def work_crs(crs: pyproj.CRS, geoms: np.ndarray) -> pyproj.CRS:
    """A metre-based CRS for buffers: the layer's own if projected, else a local LAEA."""
    if not crs.is_geographic:
        return crs
    x0, y0, x1, y1 = shapely.total_bounds(geoms)
    return pyproj.CRS.from_proj4(
        f"+proj=laea +lat_0={(y0 + y1) / 2} +lon_0={(x0 + x1) / 2} +ellps=WGS84 +units=m"
    )


def metric_geometries(frame: gpd.GeoDataFrame) -> tuple[np.ndarray, pyproj.CRS]:
    """The frame's geometries in its metre-based work CRS (see :func:`work_crs`), and that
    CRS."""
    crs = pyproj.CRS.from_user_input(frame.crs)
    geoms = frame.geometry.to_numpy()
    wcrs = work_crs(crs, geoms)
    return (geoms if wcrs == crs else frame.geometry.to_crs(wcrs).to_numpy()), wcrs


def metres_per_unit(crs: pyproj.CRS) -> float:
    return crs.axis_info[0].unit_conversion_factor if crs.axis_info else 1.0
