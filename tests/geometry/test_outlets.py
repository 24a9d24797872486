"""Outlet codes of a sub-basin layer (lakefeed.geometry.outlets): hand-built boxes, answers worked by hand."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import shapely
from shapely.geometry import box

from lakefeed.geometry.outlets import outlet_codes, reaches_lake


def test_codes_with_their_subbasins_and_shore_contact() -> None:
    lake = gpd.GeoSeries([box(0, 0, 1000, 1000)], crs="EPSG:32633")
    subs = gpd.GeoDataFrame(
        {
            "code": [1, 2, 3, 4, 5],
            "to": ["K7", "K7", 1, "SEA", None],
        },
        geometry=[
            box(-500, 0, 0, 1000),  # shares the lake's west shore (1000 m)
            box(1000, 0, 1500, 1000),  # shares the east shore
            box(-1000, 0, -500, 1000),  # drains into 1
            box(3000, 0, 3500, 1000),  # far away, leaves the area
            box(-500, -500, 0, 0),  # touches the lake at a corner only; no downstream
        ],
        crs="EPSG:32633",
    ).to_crs("EPSG:4326")  # geographic: measured in an estimated UTM zone
    codes = outlet_codes(subs, lake, id_field="code", downstream_field="to")
    assert [(c.code, c.subbasins, c.reaches_lake) for c in codes] == [
        ("K7", ("1", "2"), True),
        ("SEA", ("4",), False),
    ]


def test_corner_contact_does_not_reach_the_lake() -> None:
    lake = box(0, 0, 100, 100)
    polys = np.array([box(-10, 0, 0, 100), box(-10, -10, 0, 0), box(50, 50, 60, 60), box(300, 0, 310, 100)])
    assert reaches_lake(polys, lake, 1.0).tolist() == [True, False, True, False]
    assert shapely.area(shapely.intersection(polys[1], lake.buffer(1.0))) < 10  # under ten tolerance-lengths
