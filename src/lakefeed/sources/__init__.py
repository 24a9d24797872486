"""Sources: adapters that open raw inputs and hand back canonical objects.

Takes config models and paths; returns xarray objects (grids, scenes), pandas/geopandas
frames (tables, geometry). The only layer that knows file formats. Must not compute science.
"""
