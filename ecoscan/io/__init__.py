"""The I/O edge: rasters, vector layers, coordinate reference systems and atomic outputs.

``raster`` (windows, masks, GeoTIFF), ``vector`` (plots and points as GeoPackage, shapefile,
GeoJSON or CSV), ``crs`` (metric CRS, UTM), ``inputs`` (points and plots read together, in
one CRS) and ``outputs`` (atomic file writes). Nothing here computes a
statistic or draws.
"""
