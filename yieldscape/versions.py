"""Versions of yieldscape and of the libraries whose numbers shape its results."""

from __future__ import annotations

import platform
from importlib.metadata import PackageNotFoundError, version

from yieldscape._version import __version__


def library_versions() -> dict[str, str]:
    """yieldscape, Python, and the geospatial and numerical stack (GDAL, GEOS, PROJ, HiGHS...)."""
    import pyogrio
    import pyproj
    import shapely

    out = {"yieldscape": __version__, "python": platform.python_version()}
    for name in (
        "numpy",
        "pandas",
        "scipy",
        "geopandas",
        "shapely",
        "pyogrio",
        "pyproj",
        "rasterio",
        "highspy",
        "matplotlib",
    ):
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "not installed"
    out["GDAL (pyogrio)"] = pyogrio.__gdal_version_string__
    out["GEOS"] = shapely.geos_version_string
    out["PROJ"] = pyproj.proj_version_str
    return out
