"""Vector I/O through pyogrio (GDAL): read a stand layer, write GeoPackage layers and tables."""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import pandas as pd
import pyogrio
from pyogrio.errors import DataLayerError, DataSourceError

from foresight.errors import InventoryError


def read_layer(
    path: Path, layer: str | None, key: str = "inventory.layer", what: str = "stand layer"
) -> tuple[gpd.GeoDataFrame, str]:
    """Read one vector layer of any format GDAL reads; return it with the layer name used.

    ``key`` and ``what`` name the scenario key and the kind of file in messages.
    """
    if not path.exists():
        raise InventoryError(f"{path}: {what} file not found")
    try:
        layers = [str(name) for name in pyogrio.list_layers(path)[:, 0]]
    except (DataSourceError, OSError) as exc:
        raise InventoryError(f"{path}: not a vector file GDAL can read ({exc})") from None
    if not layers:
        raise InventoryError(f"{path}: the file holds no layers")
    if layer is None:
        if len(layers) > 1:
            raise InventoryError(
                f"{path}: the file holds {len(layers)} layers ({', '.join(layers)}); "
                f"name one with {key}"
            )
        layer = layers[0]
    elif layer not in layers:
        raise InventoryError(
            f"{path}: no layer {layer!r} ({key}); the file holds: {', '.join(layers)}"
        )
    try:
        frame = pyogrio.read_dataframe(path, layer=layer, use_arrow=True)
    except (DataSourceError, DataLayerError, OSError) as exc:
        raise InventoryError(f"{path}, layer {layer!r}: cannot be read ({exc})") from None
    if not isinstance(frame, gpd.GeoDataFrame) or frame.geometry.name not in frame:
        raise InventoryError(f"{path}, layer {layer!r}: the layer has no geometry column")
    return frame, layer


def write_gpkg_layer(path: Path, frame: pd.DataFrame, layer: str, spatial: bool = True) -> None:
    """Write (or add) one layer to a GeoPackage; ``spatial=False`` writes an attribute table."""
    if spatial:
        pyogrio.write_dataframe(
            frame, path, layer=layer, driver="GPKG", use_arrow=True, append=path.exists()
        )
    else:
        # A DataFrame without geometry becomes a GeoPackage attribute table
        # (gpkg_contents.data_type = 'attributes').
        pyogrio.write_dataframe(
            pd.DataFrame(frame),
            path,
            layer=layer,
            driver="GPKG",
            use_arrow=True,
            append=path.exists(),
        )
