"""Raster input and output through rasterio: read the window of a band over given bounds,
write a one-band GeoTIFF."""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyproj
import rasterio
import rasterio.crs
import rasterio.windows
from affine import Affine
from rasterio.errors import RasterioIOError

from yieldscape.errors import InputError


@dataclass(frozen=True)
class RasterData:
    """One band over a window: values as float64 with nodata as NaN, its grid and CRS."""

    path: Path
    values: np.ndarray
    transform: Affine
    crs: pyproj.CRS
    full_bounds: tuple[float, float, float, float]  # of the whole file, in its CRS

    @property
    def cell_area(self) -> float:
        return abs(self.transform.a * self.transform.e - self.transform.b * self.transform.d)


def raster_crs(path: Path, what: str) -> pyproj.CRS:
    """The CRS of a raster file; a raster without one is an input error."""
    try:
        with rasterio.open(path) as src:
            crs = src.crs
    except RasterioIOError:
        raise InputError(f"{path}: {what}: raster not found or not readable") from None
    if crs is None:
        raise InputError(
            f"{path}: {what}: the raster has no CRS; assign one (e.g. with "
            "gdal_edit.py -a_srs) so it can be placed over the stands"
        )
    return pyproj.CRS.from_user_input(crs.to_wkt())


def read_window(
    path: Path, bounds: tuple[float, float, float, float], band: int, what: str
) -> RasterData | None:
    """Read ``band`` over ``bounds`` (in the raster's CRS); None if they do not overlap."""
    crs = raster_crs(path, what)
    with rasterio.open(path) as src:
        if not 1 <= band <= src.count:
            raise InputError(f"{path}: {what}: band {band} asked for, the raster has {src.count}")
        full = tuple(src.bounds)
        x0, y0, x1, y1 = bounds
        if x1 <= full[0] or x0 >= full[2] or y1 <= full[1] or y0 >= full[3]:
            return None
        win = rasterio.windows.from_bounds(
            max(x0, full[0]), max(y0, full[1]), min(x1, full[2]), min(y1, full[3]), src.transform
        )
        # every cell the bounds touch: rasterio 1.4's round_lengths rounds to the nearest
        # (whatever its op) and after round_offsets forgets the shifted start, so a bounds
        # edge in the middle of a cell lost that last row or column
        r0, c0 = math.floor(win.row_off), math.floor(win.col_off)
        r1, c1 = math.ceil(win.row_off + win.height), math.ceil(win.col_off + win.width)
        win = rasterio.windows.Window(c0, r0, c1 - c0, r1 - r0).intersection(
            rasterio.windows.Window(0, 0, src.width, src.height)
        )
        data = src.read(band, window=win, masked=True)
        values = np.ma.filled(data.astype(np.float64), np.nan)
        return RasterData(path, values, src.window_transform(win), crs, full)  # type: ignore


def write_geotiff(
    path: Path,
    values: np.ndarray,
    transform: Affine,
    crs: pyproj.CRS,
    nodata: float,
    description: str,
) -> None:
    """One band, DEFLATE-compressed and tiled, with its nodata value and a band description."""
    profile = {
        "driver": "GTiff",
        "height": values.shape[0],
        "width": values.shape[1],
        "count": 1,
        "dtype": values.dtype.name,
        "crs": rasterio.crs.CRS.from_wkt(crs.to_wkt()),
        "transform": transform,
        "nodata": nodata,
        "compress": "deflate",
        "tiled": True,
        "blockxsize": 256,
        "blockysize": 256,
    }
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(values, 1)
        dst.set_band_description(1, description)
