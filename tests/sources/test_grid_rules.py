"""The shared grid rules: physical bounds, gaps, per-file units (lakefeed.sources.grid_rules)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from lakefeed.exceptions import SourceError
from lakefeed.sources.grid_rules import BOUNDS, TOA_IRRADIANCE_W_M2, GridPart, check_bounds, role_problems, time_gaps

T = pd.date_range("2024-06-01", periods=6, freq="h").values
PARTS = [
    GridPart(Path("may.nc"), T[0], T[2], {"t2m": {"units": "K"}}),
    GridPart(Path("june.nc"), T[3], T[5], {"t2m": {"units": "m"}}),
]


def test_top_of_atmosphere_bound() -> None:
    # total solar irradiance 1361 W m-2 (Kopp & Lean 2011, from memory) x 1.033 at perihelion (FAO-56 Eq. 23)
    assert TOA_IRRADIANCE_W_M2 == pytest.approx(1405.9, abs=0.1)
    assert BOUNDS["shortwave_radiation"].hi == TOA_IRRADIANCE_W_M2
    assert (BOUNDS["air_temperature"].lo, BOUNDS["air_temperature"].hi) == (-90.0, 60.0)


def test_bounds_name_file_time_and_cell() -> None:
    lows = np.array([5.0, 6.0, 7.0, 5.0, 5.0, 5.0])
    highs = np.array([9.0, 9.0, 9.0, 9.0, 276.85, 9.0])
    with pytest.raises(SourceError) as err:
        check_bounds(
            "air_temperature", lows, highs, T, step_hours=1.0, parts=PARTS, label="grid", source_name="t2m",
            locate=lambda i, which: (47.9, 8.8, highs[i]),
        )  # fmt: skip
    msg = str(err.value)
    assert "weather grid june.nc: air_temperature is 276.85 degC at 2024-06-01 04:00:00 UTC" in msg
    assert "47.9000 N, 8.8000 E" in msg and "-90..60 degC" in msg
    check_bounds(  # within bounds: nothing raised
        "air_temperature", lows, np.full(6, 59.9), T, step_hours=1.0, parts=PARTS, label="grid", source_name="t2m",
        locate=lambda i, which: (0.0, 0.0, 0.0),
    )  # fmt: skip


def test_precipitation_bound_scales_with_the_step() -> None:
    lows, highs = np.zeros(6), np.full(6, 1000.0)  # 1000 mm in a 3-hour step is within 3 x 400 mm
    check_bounds("precipitation", lows, highs, T, step_hours=3.0, parts=PARTS, label="g", source_name="tp",
                 locate=lambda i, w: (0.0, 0.0, 0.0))  # fmt: skip
    with pytest.raises(SourceError, match="per 1 h step"):
        check_bounds("precipitation", lows, highs, T, step_hours=1.0, parts=PARTS, label="g", source_name="tp",
                     locate=lambda i, w: (0.0, 0.0, 1000.0))  # fmt: skip


def test_every_file_units_checked() -> None:
    problems, each = role_problems("air_temperature", "t2m", PARTS, units={}, accumulation=None)
    assert each == ["K", "m"]
    ((what, fix),) = problems
    assert what.startswith("weather grid june.nc: variable 't2m' (air_temperature) has units 'm'")
    assert "weather.units.air_temperature" in fix
    # declared by the file's variable name: applies to every file
    problems, each = role_problems("air_temperature", "t2m", PARTS, units={"t2m": "K"}, accumulation=None)
    assert problems == [] and each == ["K", "K"]


def test_gaps_are_named_not_refused() -> None:
    t = np.delete(T, 3)
    (note,) = time_gaps(t, PARTS)
    assert "1 time step(s) missing between 2024-06-01 02:00:00 and 2024-06-01 04:00:00" in note
    assert "may.nc and june.nc" in note
