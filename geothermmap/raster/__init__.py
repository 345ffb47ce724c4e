"""Raster I/O and alignment (rasterio): the layer between physics and orchestration."""
