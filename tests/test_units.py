"""Unit conversions against pint itself (pint as the general-purpose reference library)."""

from __future__ import annotations

import dask.array as da
import numpy as np
import pint
import pytest

from lakefeed.exceptions import SourceError
from lakefeed.units import convert, factor, is_convertible, parse_unit

REF = pint.UnitRegistry()


@pytest.mark.parametrize(
    ("value", "src", "dst", "ref_src", "ref_dst"),
    [
        (293.15, "K", "degC", "kelvin", "degC"),
        (0.0, "degC", "K", "degC", "kelvin"),
        (1.0, "m", "mm", "meter", "millimeter"),
        (86400.0, "J m-2", "MJ m-2", "joule / meter**2", "megajoule / meter**2"),
        (5.0, "ug L-1", "mg L-1", "microgram / liter", "milligram / liter"),
        (5.0, "mg m-3", "ug L-1", "milligram / meter**3", "microgram / liter"),
    ],
)
def test_convert_matches_pint(value: float, src: str, dst: str, ref_src: str, ref_dst: str) -> None:
    got = convert(np.float64(value), src, dst)
    expected = REF.Quantity(value, ref_src).to(ref_dst).magnitude
    assert got == pytest.approx(expected, rel=1e-12)


def test_precipitation_flux_as_water_depth() -> None:
    # 1 kg m-2 of liquid water is 1 mm deep (density 1000 kg m-3, common practice); per second -> per day x 86400
    assert convert(1.0, "kg m-2 s-1", "mm d-1", water_equivalent=True) == pytest.approx(86400.0)
    assert convert(2.5, "kg m-2", "mm", water_equivalent=True) == pytest.approx(2.5)
    with pytest.raises(SourceError):
        convert(1.0, "kg m-2 s-1", "mm d-1")


def test_load_factor_is_86_4() -> None:
    # 1 m3 s-1 x 1 mg L-1 = 1 g s-1 = 86.4 kg d-1 (unit arithmetic; derived with pint here)
    expected = (REF.Quantity(1, "m**3/s") * REF.Quantity(1, "mg/L")).to("kg/day").magnitude
    assert factor("m3 s-1 * mg L-1", "kg d-1") == pytest.approx(expected, rel=1e-12)
    assert expected == pytest.approx(86.4)


def test_w_m2_to_mj_per_day() -> None:
    # FAO-56 Table 3: 1 W m-2 = 0.0864 MJ m-2 d-1
    assert factor("W m-2", "MJ m-2 d-1") == pytest.approx(0.0864)


def test_lazy_input_stays_lazy() -> None:
    x = da.from_array(np.array([273.15, 283.15]), chunks=1)
    y = convert(x, "K", "degC")
    assert isinstance(y, da.Array)
    np.testing.assert_allclose(y.compute(), [0.0, 10.0])


def test_molar_to_mass_concentration() -> None:
    # 1 mmol m-3 of phosphorus (30.974 g mol-1) = 0.030974 mg L-1
    assert convert(1.0, "mmol m-3", "mg L-1", molar_mass_g_per_mol=30.974) == pytest.approx(0.030974)


def test_bad_units_raise_clear_errors() -> None:
    with pytest.raises(SourceError, match="not understood"):
        parse_unit("furlongs per fortnightz")
    with pytest.raises(SourceError, match="different dimensions"):
        convert(1.0, "K", "m s-1")
    with pytest.raises(SourceError, match="missing"):
        parse_unit(None)
    assert not is_convertible(None, "K")
    assert is_convertible("degC", "K")
