"""Reading per-sub-basin model outputs (DSG NetCDF, wide CSV, long table) and tributary samples."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pint
import pytest
import xarray as xr

from lakefeed.config import HydrologySource
from lakefeed.exceptions import LakefeedWarning, SourceError
from lakefeed.sources.hydrology import read_hydrology
from lakefeed.sources.samples import read_flow, read_samples

DAYS = pd.date_range("2024-01-01", periods=4, freq="D")
IDS = ["SB1", "SB2", "SB3"]
Q = np.array([[1.0, 2.0, 3.0], [1.5, 2.5, 3.5], [2.0, 3.0, 4.0], [2.5, 3.5, 4.5]])
TN = np.full((4, 3), 1500.0)  # ug L-1 in the files below


def write_dsg(path: Path, *, tn_units: str | None = "ug L-1", q: np.ndarray = Q) -> Path:
    ds = xr.Dataset(
        {
            "discharge": (
                ("station", "time"),
                q.T,
                {"standard_name": "water_volume_transport_in_river_channel", "units": "m3 s-1"},
            ),
            "tn": (("station", "time"), TN.T, {"units": tn_units} if tn_units else {}),
        },
        coords={"time": DAYS, "station_id": (("station",), np.array(IDS, dtype=object), {"cf_role": "timeseries_id"})},
        attrs={"featureType": "timeSeries"},
    )
    ds.to_netcdf(path)
    return path


def test_dsg_units_converted(tmp_path: Path) -> None:
    src = HydrologySource(format="dsg", path=str(write_dsg(tmp_path / "h.nc")), nutrients=["tn"])
    data = read_hydrology(src, subbasin_ids=["SB2", "SB1"])
    assert list(data["discharge"].columns) == ["SB2", "SB1"]
    np.testing.assert_allclose(data["discharge"]["SB2"], Q[:, 1])
    np.testing.assert_allclose(data["tn"].to_numpy(), 1.5)  # 1500 ug L-1 = 1.5 mg L-1
    assert data["tn"].index.name == "date" and len(data["tn"]) == 4


def test_dsg_found_by_standard_name(tmp_path: Path) -> None:
    path = write_dsg(tmp_path / "h.nc")
    with xr.open_dataset(path) as ds:
        ds.load().rename({"discharge": "q_routed"}).to_netcdf(tmp_path / "renamed.nc")
    src = HydrologySource(format="dsg", path=str(tmp_path / "renamed.nc"), nutrients=[])
    assert read_hydrology(src)["discharge"].shape == (4, 3)


def test_wide_csv_mmol_with_molar_mass(tmp_path: Path) -> None:
    frame = pd.DataFrame({"date": DAYS.strftime("%Y-%m-%d"), "SB1": [10.0] * 4, "SB2": [20.0] * 4})
    frame.to_csv(tmp_path / "tp.csv", index=False)
    pd.DataFrame({"date": DAYS.strftime("%Y-%m-%d"), "SB1": Q[:, 0], "SB2": Q[:, 1]}).to_csv(
        tmp_path / "q.csv", index=False
    )
    src = HydrologySource(
        format="wide_csv",
        files={"discharge": str(tmp_path / "q.csv"), "tp": str(tmp_path / "tp.csv")},
        units={"discharge": "m3 s-1", "tp": "mmol m-3"},
        nutrients=["tp"],
    )
    data = read_hydrology(src)
    # 10 mmol m-3 of P x 30.974 g mol-1 = 0.30974 mg L-1 (pint as the reference)
    ureg = pint.UnitRegistry()
    expected = (ureg.Quantity(10.0, "mmol/m**3") * ureg.Quantity(30.974, "g/mol")).to("mg/L").magnitude
    np.testing.assert_allclose(data["tp"]["SB1"], expected, rtol=1e-12)
    assert expected == pytest.approx(0.30974)


def test_long_table_with_gap(tmp_path: Path) -> None:
    rows = [
        {"date": d, "subbasin": s, "variable": "discharge", "value": 1.0}
        for d in DAYS.delete(2).strftime("%Y-%m-%d")
        for s in ("SB1", "SB2")
    ]
    rows += [{"date": d, "subbasin": "SB1", "variable": "tn", "value": 2.0} for d in DAYS.strftime("%Y-%m-%d")]
    pd.DataFrame(rows).to_parquet(tmp_path / "long.parquet")
    src = HydrologySource(
        format="long", path=str(tmp_path / "long.parquet"), units={"discharge": "m3/s", "tn": "mg/L"}, nutrients=["tn"]
    )
    data = read_hydrology(src)
    q = data["discharge"]
    assert len(q) == 4 and q.iloc[2].isna().all()  # the missing day is added as NaN, never 0
    assert data["tn"]["SB1"].tolist() == [2.0] * 4


# ----------------------------------------------------------------------------- bad input


def test_missing_subbasin_id(tmp_path: Path) -> None:
    src = HydrologySource(format="dsg", path=str(write_dsg(tmp_path / "h.nc")), nutrients=["tn"])
    with pytest.raises(SourceError, match=r"sub-basin id\(s\) \['SB9'\] missing"):
        read_hydrology(src, subbasin_ids=["SB1", "SB9"])


def test_unit_missing(tmp_path: Path) -> None:
    src = HydrologySource(format="dsg", path=str(write_dsg(tmp_path / "h.nc", tn_units=None)), nutrients=["tn"])
    with pytest.raises(SourceError, match=r"'tn' has no unit.*hydrology.units.tn"):
        read_hydrology(src)
    pd.DataFrame({"date": ["2024-01-01"], "SB1": [1.0]}).to_csv(tmp_path / "q.csv", index=False)
    csv = HydrologySource(format="wide_csv", files={"discharge": str(tmp_path / "q.csv")}, nutrients=[])
    with pytest.raises(SourceError, match="'discharge' has no unit"):
        read_hydrology(csv)


def test_wrong_unit_dimension(tmp_path: Path) -> None:
    path = write_dsg(tmp_path / "h.nc", tn_units="m3 s-1")
    with pytest.raises(SourceError, match=r"'tn'.*cannot convert"):
        read_hydrology(HydrologySource(format="dsg", path=str(path), nutrients=["tn"]))


def test_negative_values(tmp_path: Path) -> None:
    q = Q.copy()
    q[1, 2] = -0.5
    src = HydrologySource(format="dsg", path=str(write_dsg(tmp_path / "h.nc", q=q)), nutrients=[])
    with pytest.raises(SourceError, match=r"negative discharge.*SB3 on 2024-01-02: -0.5"):
        read_hydrology(src)


# ----------------------------------------------------------------------------- samples and flow


def test_samples_long_single_and_wide(tmp_path: Path) -> None:
    (tmp_path / "long.csv").write_text(
        "date,nutrient,concentration,censored\n2024-01-02,tn,2.0,False\n2024-01-02,tp,0.025,True\n"
    )
    got = read_samples(tmp_path / "long.csv")
    assert got["nutrient"].tolist() == ["tn", "tp"] and got["censored"].tolist() == [False, True]
    (tmp_path / "single.csv").write_text("date,concentration\n2024-01-03,50\n")
    got = read_samples(tmp_path / "single.csv", units="ug L-1", name="tp")
    assert got.iloc[0]["concentration"] == pytest.approx(0.05) and got.iloc[0]["nutrient"] == "tp"
    (tmp_path / "wide.csv").write_text("date,tn,tp\n2024-01-03,2.5,0.1\n")
    assert read_samples(tmp_path / "wide.csv")["nutrient"].tolist() == ["tn", "tp"]


def test_duplicate_sample_dates_averaged_with_warning(tmp_path: Path) -> None:
    (tmp_path / "s.csv").write_text("date,concentration,censored\n2024-01-02,1.0,false\n2024-01-02,3.0,true\n")
    with pytest.warns(LakefeedWarning, match=r"duplicate sample date.*averaged"):
        got = read_samples(tmp_path / "s.csv")
    assert len(got) == 1 and got.iloc[0]["concentration"] == 2.0 and not got.iloc[0]["censored"]


def test_bad_samples(tmp_path: Path) -> None:
    (tmp_path / "neg.csv").write_text("date,concentration\n2024-01-02,-1.0\n")
    with pytest.raises(SourceError, match=r"negative concentration.*2024-01-02"):
        read_samples(tmp_path / "neg.csv")
    (tmp_path / "flag.csv").write_text("date,concentration,censored\n2024-01-02,1.0,maybe\n")
    with pytest.raises(SourceError, match="censored"):
        read_samples(tmp_path / "flag.csv")
    with pytest.raises(SourceError, match="file not found"):
        read_samples(tmp_path / "none.csv")


def test_flow_record(tmp_path: Path) -> None:
    (tmp_path / "f.csv").write_text("date,discharge\n2024-01-01,1.0\n2024-01-03,3.0\n")
    q = read_flow(tmp_path / "f.csv")
    assert len(q) == 3 and np.isnan(q.iloc[1])
    (tmp_path / "neg.csv").write_text("date,discharge\n2024-01-01,-1.0\n")
    with pytest.raises(SourceError, match="negative discharge"):
        read_flow(tmp_path / "neg.csv")
    (tmp_path / "dup.csv").write_text("date,discharge\n2024-01-01,1.0\n2024-01-01,2.0\n")
    with pytest.raises(SourceError, match="duplicate dates"):
        read_flow(tmp_path / "dup.csv")


def test_misspelt_concentration_column_is_an_error_when_required(tmp_path: Path) -> None:
    """Regression: `conc` instead of `concentration` was read silently as the wide form (nutrient 'conc')."""
    (tmp_path / "s.csv").write_text("date,conc,censored\n2024-01-02,1.0,false\n")
    with pytest.raises(SourceError, match=r"no 'concentration' column.*\['date', 'conc', 'censored'\]"):
        read_samples(tmp_path / "s.csv", require_concentration=True)
    assert read_samples(tmp_path / "s.csv")["nutrient"].tolist() == ["conc"]  # the wide form, when allowed


def test_duplicate_warning_names_dates_only_in_the_single_form(tmp_path: Path) -> None:
    """Regression: the single form's duplicates were named 'concentration 2024-01-02'."""
    (tmp_path / "s.csv").write_text("date,concentration\n2024-01-02,1.0\n2024-01-02,3.0\n")
    with pytest.warns(LakefeedWarning, match=r"\(\['2024-01-02'\]\)"):
        read_samples(tmp_path / "s.csv")
    (tmp_path / "l.csv").write_text("date,nutrient,concentration\n2024-01-02,tp,1.0\n2024-01-02,tp,3.0\n")
    with pytest.warns(LakefeedWarning, match=r"\(\['tp 2024-01-02'\]\)"):
        read_samples(tmp_path / "l.csv")
