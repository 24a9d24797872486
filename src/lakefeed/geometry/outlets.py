"""Outlet codes of a sub-basin layer: the downstream values that are not sub-basin ids.

Takes a sub-basin GeoDataFrame (an id field and a downstream-id field) and the lake polygon(s);
returns, for each downstream code that is not a sub-basin id (the lake's code, codes for "drains out
of the area", typos), the sub-basins carrying it and whether any of them reaches the lake (overlaps it
or shares a stretch of shore). Used to tell a user which code to declare as the lake's and which as
the outside's. Also holds the shore-contact rule that :mod:`lakefeed.geometry.network` uses to find
the sub-basins whose outlet lies on the lake. Pure: opens no file.
"""

from __future__ import annotations

from dataclasses import dataclass

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS

__all__ = ["OutletCode", "clean_ids", "metric_frame", "outlet_codes", "reaches_lake"]


@dataclass(frozen=True)
class OutletCode:
    """A downstream value that is not a sub-basin id.

    Attributes
    ----------
    code
        The value as written in the layer (stripped).
    subbasins
        Ids of the sub-basins whose downstream value it is, sorted.
    reaches_lake
        Whether at least one of those sub-basins overlaps the lake or shares a stretch of its shore.
    """

    code: str
    subbasins: tuple[str, ...]
    reaches_lake: bool


def metric_frame(gdf: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """The frame in a metric CRS: its own when projected, else an estimated UTM zone."""
    if gdf.crs is not None and CRS.from_user_input(gdf.crs).is_projected:
        return gdf
    return gdf.to_crs(gdf.estimate_utm_crs())


def reaches_lake(polygons: np.ndarray, lake: shapely.Geometry, tolerance_m: float = 1.0) -> np.ndarray:
    """Which polygons overlap the lake or share a stretch of shore with it (metric CRS, metres).

    Sharing a stretch of shore, not a corner: the polygon's intersection with the lake buffered by
    ``tolerance_m`` covers at least ten tolerance-lengths (``10 * tolerance_m**2`` m2).
    """
    contact = shapely.area(shapely.intersection(polygons, lake.buffer(tolerance_m)))
    return np.asarray(contact >= 10 * tolerance_m**2, dtype=bool)


def clean_ids(values: pd.Series) -> pd.Series:
    """Ids as strings; null stays null. Floats such as 3.0 (from CSV/GPKG) become '3'."""

    def one(v: object) -> str | None:
        if v is None or (isinstance(v, float) and np.isnan(v)):
            return None
        if isinstance(v, float) and v.is_integer():
            return str(int(v))
        return str(v).strip()

    return values.map(one).astype(object)


def outlet_codes(
    subbasins: gpd.GeoDataFrame,
    lake: gpd.GeoDataFrame | gpd.GeoSeries,
    *,
    id_field: str,
    downstream_field: str,
    tolerance_m: float = 1.0,
) -> list[OutletCode]:
    """Every non-empty downstream value of the layer that is not a sub-basin id, sorted by code.

    Parameters
    ----------
    subbasins
        Sub-basin polygons with a CRS and the two fields.
    lake
        Lake polygon(s) with a CRS (any; reprojected).
    id_field, downstream_field
        Field names of the sub-basin id and of the downstream id.
    tolerance_m
        Distance, metres, within which a polygon counts as touching the lake.
    """
    ids, down = clean_ids(subbasins[id_field]), clean_ids(subbasins[downstream_field])
    metric = metric_frame(subbasins)
    lake_geo = lake.geometry if isinstance(lake, gpd.GeoDataFrame) else lake
    lake_poly = shapely.union_all(lake_geo.to_crs(metric.crs).values)
    touching = reaches_lake(metric.geometry.values, lake_poly, tolerance_m)
    out = []
    codes = sorted({d for d in down.dropna() if d and d not in set(ids)})
    for code in codes:
        mask = (down == code).to_numpy()
        out.append(OutletCode(code, tuple(sorted(ids[mask])), bool(touching[mask].any())))
    return out
