"""Vector layers into a GeoPackage (pyogrio/GDAL) and GeoJSON."""

from __future__ import annotations

import shutil
from pathlib import Path

from .names import atomic_path


def write_layer(path, layer: str, gdf, *, description: str | None = None) -> Path:
    """Write (replace) one layer of a GeoPackage; other layers in the file are kept.

    ``description`` goes to the layer's GeoPackage description (gpkg_contents). The file is
    changed all at once: a copy is written beside it and moved into place, so an error leaves
    the earlier file as it was.
    """
    import pyogrio

    path = Path(path)
    options = {"DESCRIPTION": description} if description else {}
    with atomic_path(path) as tmp:
        if path.exists():
            shutil.copyfile(path, tmp)
            if layer in {name for name, _ in pyogrio.list_layers(tmp)}:
                options["OVERWRITE"] = "YES"
        pyogrio.write_dataframe(gdf, tmp, layer=layer, driver="GPKG", layer_options=options or None)
    return path


def write_geojson(path, gdf) -> Path:
    """Write a GeoDataFrame as RFC 7946 GeoJSON (WGS 84 longitude/latitude), whole or not at all."""
    import pyogrio

    path = Path(path)
    with atomic_path(path) as tmp:
        pyogrio.write_dataframe(gdf.to_crs(4326), tmp, driver="GeoJSON", layer_options={"RFC7946": "YES"})
    return path
