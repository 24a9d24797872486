"""Lab sheets as labs write them (lakefeed.sources.samples / lab_sheet): each file written here by hand.

References outside lakefeed: dates are checked against ``datetime.strptime`` (Python standard library),
units against a fresh pint registry, molar masses are IUPAC standard atomic weights (N 14.007, P 30.974
g mol-1, from memory). Censored values are the detection limit with ``censored`` true; the load estimators
then take half of it (common practice, as documented in lakefeed.extract.load_estimation).
"""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd
import pint
import pytest

from lakefeed.config import SampleSheet
from lakefeed.exceptions import SourceError
from lakefeed.sources.samples import read_flow, read_samples

UREG = pint.UnitRegistry()


def write(path: Path, text: str, encoding: str = "utf-8") -> Path:
    path.write_text(text, encoding=encoding)
    return path


def by(frame: pd.DataFrame) -> dict[tuple[str, str], tuple[float, bool]]:
    return {
        (n, f"{d:%Y-%m-%d}"): (round(c, 12), bool(z))
        for d, n, c, z in frame[["date", "nutrient", "concentration", "censored"]].itertuples(index=False)
    }


def test_wide_semicolon_decimal_comma_day_first_mapped_columns(tmp_path: Path) -> None:
    """A lab export: own headers, ';' and decimal commas, day-first dates, a time column, a remarks column,
    and '<' values per cell (only that nutrient of that row is censored)."""
    p = write(
        tmp_path / "export.csv",
        "Sampling date;Clock;Point;TP total;TN total;Remarks\n"
        "03.04.2023;09:15;P7;0,042;1,25;\n"
        "17.04.2023;10:40;P7;<0,005;1,10;low flow\n"
        "02.05.2023;08:05;P7;0,031;< 0,5;\n"
        "15.05.2023;14:00;P7;0,050;;tn not measured\n",
        encoding="cp1252",
    )
    sheet = SampleSheet(
        columns={"date": "Sampling date", "time": "Clock", "station": "Point", "tp": "TP total", "tn": "TN total"}
    )
    got = by(read_samples(p, sheet))
    for (_, day), _ in got.items():  # reference: strptime with the lab's day-first format
        assert day in {datetime.strptime(d, "%d.%m.%Y").strftime("%Y-%m-%d") for d in
                       ("03.04.2023", "17.04.2023", "02.05.2023", "15.05.2023")}  # fmt: skip
    assert got == {
        ("tn", "2023-04-03"): (1.25, False),
        ("tn", "2023-04-17"): (1.1, False),
        ("tn", "2023-05-02"): (0.5, True),
        ("tp", "2023-04-03"): (0.042, False),
        ("tp", "2023-04-17"): (0.005, True),
        ("tp", "2023-05-02"): (0.031, False),
        ("tp", "2023-05-15"): (0.05, False),
    }


def test_long_form_honours_a_unit_column_and_units_per_nutrient(tmp_path: Path) -> None:
    """Regression (issue 19): a per-row unit column was ignored, so ug L-1 rows were read as mg L-1."""
    p = write(
        tmp_path / "long.csv",
        "date,nutrient,concentration,unit\n"
        "2023-06-01,TP,42,ug/L\n"
        "2023-06-08,tp,0.05,mg/L\n"
        "2023-06-01,tn,100,umol/L\n"
        "2023-06-08,tn,<5,ug/L\n"
        "2023-06-15,tn,0.9,\n",
    )
    ug = UREG.Quantity(42, "microgram/liter").to("milligram/liter").magnitude
    n_molar = (UREG.Quantity(100, "micromole/liter") * UREG.Quantity(14.007, "gram/mole")).to("milligram/liter")
    got = by(read_samples(p, SampleSheet(units={"tn": "g m-3"})))  # the empty unit cell falls back to 'units'
    assert got[("tp", "2023-06-01")] == (pytest.approx(ug), False)
    assert got[("tp", "2023-06-08")] == (0.05, False)
    assert got[("tn", "2023-06-01")][0] == pytest.approx(n_molar.magnitude)  # 1.4007 mg L-1
    assert got[("tn", "2023-06-08")] == (pytest.approx(0.005), True)
    assert got[("tn", "2023-06-15")] == (pytest.approx(0.9), False)  # g m-3 = mg L-1


def test_wide_units_per_nutrient(tmp_path: Path) -> None:
    p = write(tmp_path / "w.csv", "date,tp,tn,po4\n2023-01-05,35,1.2,1.0\n")
    got = by(read_samples(p, SampleSheet(units={"tp": "ug L-1", "po4": "mmol m-3"})))
    assert got[("tp", "2023-01-05")][0] == pytest.approx(0.035)
    assert got[("tn", "2023-01-05")][0] == pytest.approx(1.2)  # not named: mg L-1
    p_mass = (UREG.Quantity(1.0, "millimole/meter**3") * UREG.Quantity(30.974, "gram/mole")).to("milligram/liter")
    assert got[("po4", "2023-01-05")][0] == pytest.approx(p_mass.magnitude)


def test_ambiguous_dates_refused_with_both_readings(tmp_path: Path) -> None:
    p = write(tmp_path / "a.csv", "date,concentration\n03/04/2023,0.1\n05/06/2023,0.2\n")
    both = r"'03/04/2023' reads as 2023-04-03 \(day first, date_format '%d/%m/%Y'\) or as 2023-03-04 \(month first"
    with pytest.raises(SourceError, match=r"a\.csv column 'date'.*ambiguous.*" + both):
        read_samples(p)
    got = read_samples(p, SampleSheet(date_format="%d/%m/%Y"))
    assert list(got["date"]) == [datetime.strptime(d, "%d/%m/%Y") for d in ("03/04/2023", "05/06/2023")]
    got = read_samples(p, SampleSheet(date_format="%m/%d/%Y"))
    assert list(got["date"]) == [datetime.strptime(d, "%m/%d/%Y") for d in ("03/04/2023", "05/06/2023")]


def test_automatic_dates_when_one_reading_fits(tmp_path: Path) -> None:
    day_first = write(tmp_path / "d.csv", "date,concentration\n03/04/2023,0.1\n25/04/2023,0.2\n")
    assert [f"{d:%Y-%m-%d}" for d in read_samples(day_first)["date"]] == ["2023-04-03", "2023-04-25"]
    month_first = write(tmp_path / "m.csv", "date,concentration\n03/04/23,0.1\n04/25/23,0.2\n")
    expected = [datetime.strptime(d, "%m/%d/%y") for d in ("03/04/23", "04/25/23")]
    assert list(read_samples(month_first)["date"]) == expected
    same = write(tmp_path / "s.csv", "date,concentration\n04.04.2023,0.1\n")  # both readings agree
    assert f"{read_samples(same)['date'].iloc[0]:%Y-%m-%d}" == "2023-04-04"


def test_excel_workbook_with_a_sheet_name(tmp_path: Path) -> None:
    pytest.importorskip("openpyxl")
    p = tmp_path / "lab.xlsx"
    data = pd.DataFrame(
        {
            "Date": [datetime(2023, 7, 3), datetime(2023, 7, 17)],
            "Time": ["09:30", "11:00"],
            "TP": [0.04, "<0.005"],
            "TN": ["1,3", 1.1],
        }
    )
    with pd.ExcelWriter(p, engine="openpyxl") as xl:
        pd.DataFrame({"note": ["cover page"]}).to_excel(xl, sheet_name="Cover", index=False)
        data.to_excel(xl, sheet_name="Lab export", index=False)
    got = by(read_samples(p, SampleSheet(sheet="Lab export")))
    assert got == {
        ("tn", "2023-07-03"): (1.3, False),
        ("tn", "2023-07-17"): (1.1, False),
        ("tp", "2023-07-03"): (0.04, False),
        ("tp", "2023-07-17"): (0.005, True),
    }
    with pytest.raises(SourceError, match=r"lab\.xlsx: no sheet 'Results'; its sheets are \['Cover', 'Lab export'\]"):
        read_samples(p, SampleSheet(sheet="Results"))
    empty = tmp_path / "empty.xlsx"
    data.iloc[:0].to_excel(empty, sheet_name="Lab export", index=False)
    with pytest.raises(SourceError, match=r"empty\.xlsx: no rows under the header"):
        read_samples(empty)


def test_station_column_keeps_this_stations_rows(tmp_path: Path) -> None:
    own = write(tmp_path / "o.csv", "date,Station,tp\n2023-01-02,A1,0.1\n2023-01-02,B2,0.2\n2023-01-09,B2,0.3\n")
    assert read_samples(own, station_hint="B2")["concentration"].tolist() == [0.2, 0.3]  # the config id
    p = write(tmp_path / "s.csv", "date,site,tp\n2023-01-02,A1,0.1\n2023-01-02,B2,0.2\n2023-01-09,B2,0.3\n")
    assert read_samples(p, SampleSheet(columns={"station": "site"}, station_code="A1"))["concentration"].tolist() == [
        0.1
    ]
    with pytest.raises(SourceError, match=r"column 'site' holds stations \['A1', 'B2'\]; say which"):
        read_samples(p, SampleSheet(columns={"station": "site"}))
    with pytest.raises(SourceError, match=r"holds stations \['A1', 'B2'\], not 'C3'"):
        read_samples(p, SampleSheet(columns={"station": "site"}), station="C3")
    # the same sheet with its station column not mapped: refused, never two stations mixed into one series
    with pytest.raises(SourceError, match=r"column 'site' looks like a station column and holds \['A1', 'B2'\]"):
        read_samples(p)
    one = write(tmp_path / "one.csv", "date,Site ID,tp\n2023-01-02,A1,0.1\n2023-01-09,A1,0.3\n")
    one_station = read_samples(one, SampleSheet(columns={"tp": "tp"}))  # one station: nothing to mix
    assert one_station["concentration"].tolist() == [0.1, 0.3]


@pytest.mark.parametrize(
    ("text", "sheet", "match"),
    [
        ("date,concentration\n", {}, r"bad\.csv: no rows under the header \(columns \['date', 'concentration'\]\)"),
        ("", {}, r"bad\.csv: the file is empty"),
        (
            "Datum;TP\n01.02.2023;0,1\n",
            {"columns": {"date": "Date"}},
            r"no column 'Date' for 'date'; its columns are \['Datum', 'TP'\]; name the column",
        ),
        (
            "date,tp,tn\n2023-01-02,0.1,0.2\n",
            {"columns": {"tp": "TP", "tn": "TN total"}},
            r"no column 'TN total' for 'tn'",
        ),
        ("date,tp\n2023-01-02,n.d.\n", {}, r"column 'tp'.*not numbers: row 2: 'n\.d\.'.*'<0\.005'"),
        ("date,tp\n2023-01-02,>2\n", {}, r"column 'tp'.*above the measuring range are not read: row 2: '>2'"),
        ("date;tp\n2023-01-02;1.234,5\n", {}, r"column 'tp'.*comma that is not a decimal mark here: row 2: '1\.234,5'"),
        ('date,tp\n2023-01-02,"0,5"\n', {}, r"comma that is not a decimal mark.*decimal: ','"),
        ("date,tp\n2023-01-02,0.1\n", {"units": "bogus"}, r"nutrient 'tp' in unit 'bogus'.*not understood"),
        ("date,tp\n2023-01-02,0.1\n", {"units": "m3 s-1"}, r"nutrient 'tp' in unit 'm3 s-1'"),
        ("date,tp\n2023-01-02,0.1\n", {"units": {"tpp": "ug L-1"}}, r"'units' names nutrient\(s\) \['tpp'\]"),
        ("date,time,tp\n2023-01-02,25:10,0.1\n", {}, r"column 'time'.*not clock times: row 2: '25:10'"),
        (
            "date,tp\n31.02.2023,0.1\n",
            {"date_format": "%d.%m.%Y"},
            r"column 'date'.*not dates \(date_format '%d\.%m\.%Y'\): row 2: '31\.02\.2023'",
        ),
        ("date,tp\n2023-01-02,0.1\nsoon,0.2\n", {}, r"column 'date'.*cannot tell the date format of row 3: 'soon'"),
        ("date,nutrient,concentration\n2023-01-02,tp,\n", {}, r"concentration\(s\) or nutrient name\(s\) missing"),
        ("date,tp,censored\n2023-01-02,0.1,perhaps\n", {}, r"column 'censored' has values \['perhaps'\]"),
    ],
)
def test_bad_sheets_name_file_column_and_fix(tmp_path: Path, text: str, sheet: dict, match: str) -> None:
    p = write(tmp_path / "bad.csv", text)
    with pytest.raises(SourceError, match=match):
        read_samples(p, SampleSheet(**sheet))


def test_mapping_both_forms_is_a_config_error() -> None:
    with pytest.raises(ValueError, match="map either 'concentration'"):
        SampleSheet(columns={"concentration": "value", "tp": "TP"})


def test_flow_record_with_semicolons_and_decimal_commas(tmp_path: Path) -> None:
    p = write(tmp_path / "q.csv", "date;discharge\n2023-01-01;1,5\n2023-01-03;2,25\n")
    q = read_flow(p)
    assert q.iloc[0] == 1.5 and np.isnan(q.iloc[1]) and q.iloc[2] == 2.25
