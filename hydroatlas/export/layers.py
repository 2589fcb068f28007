"""Vector layers into a GeoPackage (pyogrio/GDAL) and GeoJSON."""

from __future__ import annotations

from pathlib import Path


def write_layer(path, layer: str, gdf) -> Path:
    """Write (replace) one layer of a GeoPackage; other layers in the file are kept."""
    import pyogrio

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    if path.exists() and layer in {name for name, _ in pyogrio.list_layers(path)}:
        pyogrio.write_dataframe(gdf, path, layer=layer, driver="GPKG", layer_options={"OVERWRITE": "YES"})
    else:
        pyogrio.write_dataframe(gdf, path, layer=layer, driver="GPKG", append=path.exists())
    return path
