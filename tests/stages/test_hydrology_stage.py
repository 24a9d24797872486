"""The hydrology stage on a network and model outputs kept apart from the sample scenario.

Built here: sub-basins as GeoParquet in EPSG:4326 with other field names (``code`` -> ``to_code``, integer
ids, lake id 9999, 0 = drains elsewhere), the lake in a GeoPackage layer in EPSG:3035, a CF timeSeries
NetCDF with TN in ug L-1 and TP in mmol m-3 (one day absent from the file, one value missing), a long
table of local runoff in L s-1 with a unit column, and samples with a censored value and a duplicate date.
Every number is compared with an independent numpy calculation written here.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import networkx as nx
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from pyproj import Geod
from shapely.geometry import box

from lakefeed.config import load_project
from lakefeed.exceptions import GeometryError, LakefeedError
from lakefeed.stages.hydrology import build_hydrology, catchment_of
from lakefeed.store import Store

X0, Y0 = 500_000, 5_300_000
NET = {  # code: (to_code, (x0, y0, x1, y1) in km from the lake's corner)
    101: (9999, (-3, -1, 0, 2)),
    102: (101, (-6, -1, -3, 2)),
    103: (102, (-9, -1, -6, 2)),
    104: (101, (-3, 2, 0, 5)),
    201: (9999, (2, -1, 5, 2)),
    202: (201, (2, 2, 5, 5)),
    301: (0, (0, 2, 2, 5)),
}
CATCHMENT = ["101", "102", "103", "104", "201", "202"]
DAYS = pd.date_range("2023-01-01", "2023-12-31", freq="D")
P_MOLAR = 30.974  # g mol-1 (IUPAC standard atomic weight of P)


def km_box(x0: float, y0: float, x1: float, y1: float):
    return box(X0 + 1000 * x0, Y0 + 1000 * y0, X0 + 1000 * x1, Y0 + 1000 * y1)


@pytest.fixture(scope="module")
def scenario(tmp_path_factory: pytest.TempPathFactory) -> dict:
    root = tmp_path_factory.mktemp("wren")
    lake = gpd.GeoDataFrame({"label": ["wren"]}, geometry=[km_box(0, 0, 2, 1)], crs="EPSG:32632")
    lake.to_crs("EPSG:3035").to_file(root / "water.gpkg", layer="shore")
    lake.to_file(root / "water.gpkg", layer="notes")
    basins = gpd.GeoDataFrame(
        {"code": list(NET), "to_code": [v[0] for v in NET.values()]},
        geometry=[km_box(*v[1]) for v in NET.values()],
        crs="EPSG:32632",
    ).to_crs("EPSG:4326")
    basins.to_parquet(root / "basins.parquet")
    rng = np.random.default_rng(3)
    n, codes = len(DAYS), [str(c) for c in NET]
    local = {c: np.exp(rng.normal(0, 0.4, n)) for c in codes}
    routed = {c: sum(local[u] for u in codes if c in _path(u)) for c in codes}
    tn = {c: 2.0 * np.exp(rng.normal(0, 0.2, n)) for c in codes}  # mg L-1
    tp = {c: 0.05 * routed[c] ** 0.4 for c in codes}  # mg L-1
    keep = DAYS != pd.Timestamp("2023-03-10")  # a day absent from the file
    q = np.stack([routed[c] for c in codes])
    tp_mmol = np.stack([tp[c] for c in codes]) / P_MOLAR * 1000.0
    tp_mmol[codes.index("201"), DAYS.get_loc(pd.Timestamp("2023-06-02"))] = np.nan
    xr.Dataset(
        {
            "flow": (
                ("basin", "time"),
                q[:, keep],
                {"standard_name": "water_volume_transport_in_river_channel", "units": "m3/s"},
            ),
            "nitrogen": (("basin", "time"), np.stack([tn[c] for c in codes])[:, keep] * 1000.0, {"units": "ug L-1"}),
            "phosphorus": (("basin", "time"), tp_mmol[:, keep], {"units": "mmol m-3"}),
            "basin_code": (("basin",), np.array(codes, dtype=object), {"cf_role": "timeseries_id"}),
        },
        coords={"time": ("time", DAYS[keep], {"standard_name": "time"})},
        attrs={"featureType": "timeSeries"},
    ).to_netcdf(root / "outputs.nc")
    parts = []
    for c in codes:
        for var, vals, unit in (
            ("runoff", local[c] * 1000, "L/s"),
            ("N", tn[c], "mg/L"),
            ("P", tp[c] / P_MOLAR * 1000, "mmol m-3"),
        ):
            parts.append(
                pd.DataFrame(
                    {"date": DAYS.strftime("%Y-%m-%d"), "subbasin": c, "variable": var, "value": vals, "unit": unit}
                )
            )
    pd.concat(parts).to_csv(root / "outputs_long.csv", index=False)
    pos = np.arange(4, n, 12)
    conc = tp["101"][pos] * 1.05
    censored = np.zeros(len(pos), bool)
    censored[1] = True  # reported at its detection limit
    samples = pd.DataFrame(
        {"date": DAYS[pos].strftime("%Y-%m-%d"), "nutrient": "tp", "concentration": conc, "censored": censored}
    )
    extra = samples.iloc[[3]].assign(concentration=conc[3] * 1.5)  # a second sample on the same day
    pd.concat([samples, extra]).to_csv(root / "samples.csv", index=False)
    lab = pd.concat([samples, extra])  # the same samples as a lab writes them: see test_lab_sheet_station
    marks = np.where(lab["censored"], "<", "")
    cells = [f"{m}{c * 1000:.17g}".replace(".", ",") for m, c in zip(marks, lab["concentration"], strict=True)]
    days = pd.to_datetime(lab["date"]).dt.strftime("%d.%m.%Y")
    rows = [f"{d};08:30;{c};lab remark" for d, c in zip(days, cells, strict=True)]
    (root / "lab.csv").write_text("Sampling day;Clock;TP [ug/l];Remarks\n" + "\n".join(rows) + "\n", encoding="cp1252")
    (root / "cfg").mkdir()
    lake_yaml = (
        "id: {id}\nname: Wren Pond\ntimezone: Europe/Vienna\nsources: {src}\n"
        "lake: {{path: ../water.gpkg, layer: shore}}\naois: {{path: ../water.gpkg, layer: shore, id_field: label}}\n"
        "subbasins: {{path: ../basins.parquet, id_field: code, downstream_field: to_code{extra}}}\n"
    )
    (root / "cfg" / "lake-wren.yaml").write_text(lake_yaml.format(id="wren", src="dsg.yaml", extra=', lake_id: "9999"'))
    (root / "cfg" / "lake-local.yaml").write_text(lake_yaml.format(id="local", src="long.yaml", extra=""))
    (root / "cfg" / "dsg.yaml").write_text(
        "hydrology: {format: dsg, path: ../outputs.nc, variables: {tn: nitrogen, tp: phosphorus}}\n"
        "samples:\n  - {id: west, path: ../samples.csv, subbasin: '101', method: interpolation}\n"
    )
    (root / "cfg" / "lab.yaml").write_text(
        "hydrology: {format: dsg, path: ../outputs.nc, variables: {tn: nitrogen, tp: phosphorus}}\n"
        "samples:\n  - {id: west, path: ../lab.csv, subbasin: '101', method: interpolation,\n"
        "     columns: {date: Sampling day, time: Clock, tp: 'TP [ug/l]'}, units: {tp: ug L-1}}\n"
    )
    (root / "cfg" / "lake-lab.yaml").write_text(lake_yaml.format(id="lab", src="lab.yaml", extra=', lake_id: "9999"'))
    (root / "cfg" / "long.yaml").write_text(
        "hydrology: {format: long, path: ../outputs_long.csv, variables: {discharge: runoff, tn: N, tp: P}, "
        "discharge_kind: local}\n"
    )
    stations = (
        "samples:\n  - {id: west, path: ../samples.csv, subbasin: '101', method: interpolation}\n"
        "  - {id: mid, path: ../samples.csv, subbasin: '102', method: interpolation}\n"
        "  - {id: head, path: ../samples.csv, subbasin: '103', method: interpolation}\n"
    )
    (root / "cfg" / "long-stations.yaml").write_text((root / "cfg" / "long.yaml").read_text() + stations)
    stations_lake = lake_yaml.format(id="stations", src="long-stations.yaml", extra="")
    (root / "cfg" / "lake-stations.yaml").write_text(stations_lake)
    return {
        "root": root,
        "local": local,
        "routed": routed,
        "tn": tn,
        "tp": tp,
        "pos": pos,
        "conc": conc,
        "basins": basins,
    }


def _path(code: str) -> list[str]:
    """``code`` and every sub-basin downstream of it (a hand walk, independent of networkx)."""
    out = [code]
    while int(out[-1]) in NET and str(NET[int(out[-1])][0]) in {str(k) for k in NET}:
        out.append(str(NET[int(out[-1])][0]))
    return out


def test_catchment_by_lake_id_and_by_shore(scenario: dict) -> None:
    geod = Geod(ellps="WGS84")  # geodesic area of each member polygon, summed (no union, no projection)
    b = scenario["basins"]
    area = sum(
        abs(geod.geometry_area_perimeter(g)[0]) for g, c in zip(b.geometry, b.code, strict=True) if str(c) in CATCHMENT
    )
    for name, rule in (("lake-wren.yaml", "lake_id"), ("lake-local.yaml", "outlet_in_lake")):
        c = catchment_of(load_project(scenario["root"] / "cfg" / name))
        assert (c.rule, c.direct_inflows, c.subbasin_ids, c.lake_node) == (
            rule,
            ("101", "201"),
            tuple(CATCHMENT),
            "9999",
        )
        assert c.area_km2 == pytest.approx(area / 1e6, rel=1e-9)
        assert c.overlapping == ()


def test_routed_dsg_against_numpy(scenario: dict, tmp_path: Path) -> None:
    store = Store(tmp_path / "store")
    result = build_hydrology(load_project(scenario["root"] / "cfg" / "lake-wren.yaml"), store)
    assert any("2023-03-10 (gap_discharge(101,201)" in w and "2023-06-02 (gap_tp(201))" in w for w in result.warnings)
    assert any("duplicate sample date" in w for w in result.warnings)
    t = store.read_table("hydrology_daily", "wren").assign(date=lambda f: pd.to_datetime(f["date"])).set_index("date")
    assert t.attrs["units"]["tp_load"] == "kg d-1" and t.attrs["units"]["tp_fwmc"] == "mg L-1"
    r, tn, tp = scenario["routed"], scenario["tn"], scenario["tp"]
    q = r["101"] + r["201"]
    expected = {
        "inflow_discharge": q,
        "tn_load": (r["101"] * tn["101"] + r["201"] * tn["201"]) * 86.4,  # m3 s-1 x mg L-1 -> kg d-1 (unit arithmetic)
        "tp_load": (r["101"] * tp["101"] + r["201"] * tp["201"]) * 86.4,
        "tp_fwmc": (r["101"] * tp["101"] + r["201"] * tp["201"]) / q,
        "tn_load_201": r["201"] * tn["201"] * 86.4,
    }
    gaps = {"inflow_discharge": ["2023-03-10"], "tn_load": ["2023-03-10"], "tn_load_201": ["2023-03-10"]}
    for col, values in expected.items():
        missing = gaps.get(col, ["2023-03-10", "2023-06-02"])
        assert t.index[t[col].isna()].strftime("%Y-%m-%d").tolist() == missing, col  # missing, never zero
        ok = t[col].notna().to_numpy()
        np.testing.assert_allclose(t[col].to_numpy()[ok], values[ok], rtol=1e-9, err_msg=col)
    assert t.loc["2023-06-02", "flags"] == "gap_tp(201)"
    # station: interpolated concentration (duplicates averaged, the censored value halved) x flow of 101
    conc = scenario["conc"].copy()
    conc[3] *= 1.25  # mean of c and 1.5 c
    conc[1] *= 0.5  # half the detection limit (documented choice)
    t_days = np.arange(len(DAYS))
    station = np.interp(t_days, scenario["pos"], conc) * r["101"] * 86.4
    got = t["tp_load_station_west"].to_numpy()
    assert np.isnan(got[DAYS.get_loc(pd.Timestamp("2023-03-10"))])
    ok = ~np.isnan(got)
    np.testing.assert_allclose(got[ok], station[ok], rtol=1e-9)


def test_local_long_table_against_numpy(scenario: dict, tmp_path: Path) -> None:
    store = Store(tmp_path / "store")
    build_hydrology(load_project(scenario["root"] / "cfg" / "lake-local.yaml"), store)
    t = store.read_table("hydrology_daily", "local")
    loc, tn = scenario["local"], scenario["tn"]
    np.testing.assert_allclose(t["inflow_discharge"], sum(loc[c] for c in CATCHMENT), rtol=1e-9)  # L s-1 -> m3 s-1
    np.testing.assert_allclose(t["tn_load"], sum(loc[c] * tn[c] for c in CATCHMENT) * 86.4, rtol=1e-9)
    assert (t["flags"] == "").all()


def test_station_flow_routed_from_local_runoff(scenario: dict, tmp_path: Path) -> None:
    """A station on a sub-basin gets the flow at the station: its own and every upstream sub-basin's runoff.

    Independent references: the routed discharge of the scenario (each sub-basin's local runoff summed over
    the sub-basins whose hand-walked downstream path passes it) and networkx ancestors of the station's
    sub-basin in a graph built here from the layer's fields. Nested chain: 103 -> 102 -> 101 <- 104.
    """
    store = Store(tmp_path / "store")
    result = build_hydrology(load_project(scenario["root"] / "cfg" / "lake-stations.yaml"), store)
    t = store.read_table("hydrology_daily", "stations")
    loc, routed = scenario["local"], scenario["routed"]
    graph = nx.DiGraph([(str(k), str(v[0])) for k, v in NET.items()])
    conc = scenario["conc"].copy()
    conc[3] *= 1.25  # duplicates averaged
    conc[1] *= 0.5  # censored: half the detection limit
    interp = np.interp(np.arange(len(DAYS)), scenario["pos"], conc)
    expected_members = {"west": "101+102+103+104", "mid": "102+103", "head": "103"}
    for station, sub in (("west", "101"), ("mid", "102"), ("head", "103")):
        upstream = nx.ancestors(graph, sub)
        flow = loc[sub] + sum(loc[u] for u in upstream)
        np.testing.assert_allclose(flow, routed[sub], rtol=1e-12)  # the two references agree
        np.testing.assert_allclose(t[f"tp_load_station_{station}"], interp * routed[sub] * 86.4, rtol=1e-9)
    stated = store.entry("hydrology_daily", "stations")["metadata"]["station_flow_subbasins"]
    assert stated == "; ".join(f"{k}={v}" for k, v in expected_members.items())
    est = store.read_table("load_estimates", "stations")
    assert est.groupby("station")["flow_subbasins"].unique().map(list).to_dict() == {
        k: [v] for k, v in expected_members.items()
    }
    # the lake inflow of local runoff: every catchment sub-basin's runoff (not only the direct inflows')
    np.testing.assert_allclose(t["inflow_discharge"], routed["101"] + routed["201"], rtol=1e-9)
    assert result.tables["load_estimates"] == len(est)


def test_station_flow_routed_discharge_taken_as_given(scenario: dict, tmp_path: Path) -> None:
    """With routed model discharge the station's flow is its own sub-basin's value, nothing added."""
    store = Store(tmp_path / "store")
    build_hydrology(load_project(scenario["root"] / "cfg" / "lake-wren.yaml"), store)
    assert store.entry("hydrology_daily", "wren")["metadata"]["station_flow_subbasins"] == "west=101"
    assert set(store.read_table("load_estimates", "wren")["flow_subbasins"]) == {"101"}


def test_lab_sheet_station(scenario: dict, tmp_path: Path) -> None:
    """The station's samples as a lab export (';', decimal commas, day-first dates, ug L-1, '<' for the censored
    value, a remarks column) give the same station loads as the clean CSV of the same samples."""
    clean, lab = Store(tmp_path / "clean"), Store(tmp_path / "lab")
    build_hydrology(load_project(scenario["root"] / "cfg" / "lake-wren.yaml"), clean)
    build_hydrology(load_project(scenario["root"] / "cfg" / "lake-lab.yaml"), lab)
    a = clean.read_table("hydrology_daily", "wren")["tp_load_station_west"]
    b = lab.read_table("hydrology_daily", "lab")["tp_load_station_west"]
    assert b.notna().sum() > 300
    np.testing.assert_allclose(b, a, rtol=1e-12)


def test_network_error_names_the_layer_file(scenario: dict, tmp_path: Path) -> None:
    """Regression: a cycle's error named neither the layer file nor its config key."""
    root = tmp_path / "copy"
    root.mkdir()
    for f in ("water.gpkg", "outputs.nc", "samples.csv"):
        (root / f).symlink_to(scenario["root"] / f)
    (root / "cfg").mkdir()
    for f in ("lake-wren.yaml", "dsg.yaml"):
        (root / "cfg" / f).write_text((scenario["root"] / "cfg" / f).read_text())
    b = scenario["basins"].copy()
    b.loc[b["code"] == 101, "to_code"] = 103
    b.to_parquet(root / "basins.parquet")
    with pytest.raises(GeometryError, match=r"basins\.parquet \(config key 'subbasins'.*101 -> 103 -> 102 -> 101"):
        build_hydrology(load_project(root / "cfg" / "lake-wren.yaml"), Store(tmp_path / "store"))
    assert not (tmp_path / "store").exists()


def test_hydrology_of_many_lakes_reads_the_output_once_with_one_lake_tables(small_sample, tmp_path, monkeypatch):
    """Lakes naming one model output: the file is opened once, each lake's tables equal its one-lake run
    (exact), and a lake whose sub-basin layer is missing fails alone."""
    from many_lakes_setup import lake_configs

    import lakefeed.sources.hydrology as hydrology
    from lakefeed.stages.hydrology_group import build_hydrology_many

    files = lake_configs(small_sample, tmp_path, {"tallow": (0, 0, "Europe/Berlin"), "east": (14_000, -7_000, "UTC")})
    broken = lake_configs(small_sample, tmp_path / "b", {"nolayer": (0, 0, "UTC")})["nolayer"]
    (tmp_path / "b" / "geometry" / "nolayer" / "subbasins.gpkg").unlink()
    opened: list[str] = []
    real = hydrology._read_dsg
    monkeypatch.setattr(hydrology, "_read_dsg", lambda path, *a: opened.append(str(path)) or real(path, *a))
    projects = [load_project(f) for f in files.values()] + [load_project(broken)]
    store = Store(tmp_path / "group")
    got = build_hydrology_many(projects, store)
    assert len(opened) == 1
    assert isinstance(got["nolayer"], LakefeedError) and "subbasins.gpkg" in str(got["nolayer"])
    assert not store.has_table("hydrology_daily", "nolayer")
    for lake, f in files.items():
        alone = Store(tmp_path / f"alone-{lake}")
        assert build_hydrology(load_project(f), alone) == got[lake]
        for table in ("hydrology_daily", "load_estimates"):
            pd.testing.assert_frame_equal(
                store.read_table(table, lake), alone.read_table(table, lake), check_exact=True
            )
