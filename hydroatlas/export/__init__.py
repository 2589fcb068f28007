"""Writers: rasters (GeoTIFF), vector layers (GeoPackage, GeoJSON), sidecars. No store access here."""
