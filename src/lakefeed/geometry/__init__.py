"""Geometry: zones, the shoreline buffer, the sub-basin network and catchment, exact cell weights.

Takes GeoDataFrames and grid coordinates; returns GeoDataFrames, graphs and sparse weights. Must not open
files or import Prefect (docs/architecture.md, "Folders").
"""
