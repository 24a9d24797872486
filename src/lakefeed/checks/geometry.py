"""Cheap checks of the lake polygon, the areas of interest and the sub-basin network.

Takes a :class:`~lakefeed.config.LakeConfig`; reads its three layers through
:func:`lakefeed.sources.vectors.read_layer` (which checks file, CRS, emptiness, polygons and
ids, and repairs invalid polygons with a warning) and returns one
:class:`~lakefeed.checks.CheckResult` per finding plus the layers it read, for the grid
checks. Must not write anything.

AOIs must lie inside the lake: an AOI may stick out by at most :data:`AOI_OUTSIDE_TOLERANCE`
of its own area (digitising slivers along the shore); more is a problem naming the AOI and
how much lies outside.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass

import geopandas as gpd
import shapely

from lakefeed.checks._result import CheckResult, failed, passed, skipped, warned
from lakefeed.checks.catchment import check_subbasin_network
from lakefeed.checks.network import NetworkReport
from lakefeed.config import LakeConfig
from lakefeed.exceptions import LakefeedError, LakefeedWarning
from lakefeed.geometry.network import Catchment
from lakefeed.sources.vectors import read_layer

__all__ = ["AOI_OUTSIDE_TOLERANCE", "Layers", "check_aois_inside", "check_geometry"]

#: Largest fraction of an AOI's area that may lie outside the lake polygon (0.1 %).
AOI_OUTSIDE_TOLERANCE = 1e-3


@dataclass
class Layers:
    """The layers the geometry checks could read (None where reading failed)."""

    lake: gpd.GeoDataFrame | None = None
    aois: gpd.GeoDataFrame | None = None
    subbasins: gpd.GeoDataFrame | None = None
    network: NetworkReport | None = None
    traced: Catchment | None = None

    def catchment(self, id_field: str) -> gpd.GeoDataFrame | None:
        """Sub-basins draining into the lake (all of them when that cannot be told)."""
        if self.subbasins is None:
            return None
        if self.traced is not None:
            return self.subbasins[self.subbasins[id_field].isin(set(self.traced.subbasin_ids))]
        return self.subbasins

    def catchment_ids(self, id_field: str) -> list[str]:
        """Ids of the sub-basins draining into the lake (all ids when that cannot be told)."""
        gdf = self.catchment(id_field)
        return [] if gdf is None else gdf[id_field].astype(str).tolist()


def _read(
    name: str, read: Callable[[], gpd.GeoDataFrame], describe: Callable[[gpd.GeoDataFrame], str]
) -> tuple[list[CheckResult], gpd.GeoDataFrame | None]:
    """Read a layer; problems and repair warnings become result lines."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", LakefeedWarning)
        try:
            gdf = read()
        except LakefeedError as err:
            return [failed(name, str(err))], None
        except Exception as err:  # a library choking on a corrupt file
            return [failed(name, f"{type(err).__name__}: {err}", "is the file a readable vector layer?")], None
    out = [
        warned(name, str(w.message), "fix the polygon in the source file, or accept the repair")
        for w in caught
        if issubclass(w.category, LakefeedWarning)
    ]
    for w in caught:  # re-emit anything that is not ours
        if not issubclass(w.category, LakefeedWarning):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    out.insert(0, passed(name, describe(gdf)))
    return out, gdf


def _metric(gdf: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """The layer in a metric CRS (its own if projected, else a UTM zone)."""
    return gdf if gdf.crs.is_projected else gdf.to_crs(gdf.estimate_utm_crs())


def _area_km2(gdf: gpd.GeoDataFrame) -> float:
    return float(_metric(gdf).area.sum()) / 1e6


def check_aois_inside(
    aois: gpd.GeoDataFrame,
    lake: gpd.GeoDataFrame,
    *,
    id_field: str,
    tolerance: float = AOI_OUTSIDE_TOLERANCE,
    where: str = "",
) -> list[CheckResult]:
    """Each AOI must lie inside the lake polygon, up to ``tolerance`` (fraction of its area).

    Areas are computed in the lake's CRS when projected, else in a UTM zone (m2). ``where`` (e.g. the
    AOI file and config key) prefixes each problem message.
    """
    lake_m = _metric(lake)
    shape = shapely.union_all(lake_m.geometry.values)
    aois_m = aois.to_crs(lake_m.crs)
    area = aois_m.area.to_numpy()
    outside = shapely.difference(aois_m.geometry.values, shape)
    out_area = shapely.area(outside)
    frac = out_area / area
    bad = frac > tolerance
    if not bad.any():
        worst = float(frac.max()) if len(frac) else 0.0
        return [passed("AOIs inside lake", f"all {len(aois)} AOIs inside the lake (largest part outside {worst:.3%})")]
    out = []
    for aoi, f, a in zip(aois_m[id_field][bad], frac[bad], out_area[bad], strict=True):
        out.append(
            failed(
                "AOIs inside lake",
                f"{where}AOI {aoi!r}: {f:.1%} of its area ({a / 1e4:.2f} ha) lies outside the lake polygon "
                f"(tolerance {tolerance:.1%})",
                "clip the AOI to the lake polygon, or fix the lake polygon",
            )
        )
    return out


def _describe(kind: str, id_field: str | None = None) -> Callable[[gpd.GeoDataFrame], str]:
    def describe(gdf: gpd.GeoDataFrame) -> str:
        crs = gdf.crs.to_string() if gdf.crs.to_epsg() is None else f"EPSG:{gdf.crs.to_epsg()}"
        ids = f" ({', '.join(gdf[id_field].astype(str).tolist()[:8])})" if id_field else ""
        return f"{len(gdf)} {kind}{ids}, {crs}, {_area_km2(gdf):.2f} km2"

    return describe


def check_geometry(lake: LakeConfig) -> tuple[list[CheckResult], Layers]:
    """Check the lake polygon, the AOIs (and that they lie in the lake) and the sub-basin network."""
    results: list[CheckResult] = []
    layers = Layers()
    res, layers.lake = _read(
        "lake polygon",
        lambda: read_layer(lake.lake, what="lake polygon", key="lake.path"),
        _describe("polygon(s)"),
    )
    results += res
    res, layers.aois = _read(
        "areas of interest",
        lambda: read_layer(lake.aois, what="areas of interest", id_field=lake.aois.id_field, key="aois.path"),
        _describe("AOI(s)", lake.aois.id_field),
    )
    results += res
    if layers.lake is not None and layers.aois is not None:
        results += check_aois_inside(
            layers.aois,
            layers.lake,
            id_field=lake.aois.id_field,
            where=f"{lake.aois.path} (config key 'aois', field {lake.aois.id_field!r}): ",
        )
    else:
        results.append(skipped("AOIs inside lake", "needs both the lake polygon and the AOIs"))
    sb = lake.subbasins
    res, layers.subbasins = _read(
        "sub-basins",
        lambda: read_layer(sb, what="sub-basins", id_field=sb.id_field, key="subbasins.path"),
        _describe("sub-basin(s)"),
    )
    results += res
    if layers.subbasins is None:
        results.append(skipped("sub-basin network", "needs the sub-basin layer"))
        return results, layers
    res, layers.network, layers.traced = check_subbasin_network(layers.subbasins, layers.lake, sb)
    results += res
    return results, layers
