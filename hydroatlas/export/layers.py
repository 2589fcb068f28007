"""Vector layers into a GeoPackage (pyogrio/GDAL) and GeoJSON."""

from __future__ import annotations

from pathlib import Path


def write_layer(path, layer: str, gdf, *, description: str | None = None) -> Path:
    """Write (replace) one layer of a GeoPackage; other layers in the file are kept.

    ``description`` goes to the layer's GeoPackage description (gpkg_contents).
    """
    import pyogrio

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    options = {"DESCRIPTION": description} if description else {}
    if path.exists() and layer in {name for name, _ in pyogrio.list_layers(path)}:
        options["OVERWRITE"] = "YES"
    pyogrio.write_dataframe(gdf, path, layer=layer, driver="GPKG", layer_options=options or None)
    return path
