"""Carlson TSI, OECD categories, exceedance flags and the caution text."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from lakefeed.config.lake import Threshold
from lakefeed.extract.trophic import CAUTION, carlson_class, carlson_tsi, class_columns, exceedance_flags, oecd_category


def test_carlson_tsi_check_points() -> None:
    """Carlson (1977), common form as in Carlson & Simpson (1996): Chl 1/10/100 -> 30.60/53.19/75.78."""
    assert carlson_tsi(np.array([1.0, 10.0, 100.0])) == pytest.approx([30.60, 53.19, 75.78], abs=0.005)


def test_carlson_common_form_against_original_form() -> None:
    """Carlson (1977) original algebraic form values: Chl 0.12/0.34/0.94/6.4 ->
    9.7685/19.9855/29.9620/48.7799; the common form used by lakefeed differs by about 0.03."""
    ours = carlson_tsi(np.array([0.12, 0.34, 0.94, 6.4]))
    assert ours == pytest.approx([9.7685, 19.9855, 29.9620, 48.7799], abs=0.05)
    assert np.isnan(carlson_tsi(0.0)) and np.isnan(carlson_tsi(np.nan))


def test_carlson_classes_boundaries() -> None:
    """Carlson & Simpson (1996): < 40, 40-50, 50-70, > 70; a boundary belongs to the upper class."""
    assert carlson_class([39.99, 40.0, 50.0, 69.9, 70.0]).tolist() == [
        "oligotrophic",
        "mesotrophic",
        "eutrophic",
        "eutrophic",
        "hypereutrophic",
    ]


def test_oecd_boundaries_pinned_to_lower_class() -> None:
    """OECD (1982) fixed boundaries (annual mean Chl): 1.0, 2.5, 8, 25 ug/L; lakefeed puts each boundary
    in the lower class, so 8.0 is mesotrophic and 25.0 is eutrophic."""
    x = [0.5, 1.0, 1.01, 2.5, 2.51, 8.0, 8.01, 25.0, 25.01, np.nan]
    assert oecd_category(x).tolist() == [
        "ultra-oligotrophic",
        "ultra-oligotrophic",
        "oligotrophic",
        "oligotrophic",
        "mesotrophic",
        "mesotrophic",
        "eutrophic",
        "eutrophic",
        "hypertrophic",
        None,
    ]


def test_exceedance_flags_at_or_above() -> None:
    """WHO (2003) recreational guidance levels 10 and 50 ug/L as example thresholds."""
    chla = pd.Series([9.99, 10.0, 49.0, 50.0, np.nan])
    flags = exceedance_flags(chla, [Threshold(name="who_low", value=10), Threshold(name="who_moderate", value=50)])
    assert flags["exceeds_who_low"].tolist() == [False, True, True, True, False]
    assert flags["exceeds_who_moderate"].tolist() == [False, False, False, True, False]
    assert exceedance_flags(chla, {"x": 1.0}).columns.tolist() == ["exceeds_x"]


def test_caution_text() -> None:
    assert "local regulations" in CAUTION and "responsible authority" in CAUTION


def test_class_columns_name_their_scheme_and_differ_where_the_schemes_do() -> None:
    """``oecd_class`` applies the OECD (1982) chlorophyll-a boundaries 1 / 2.5 / 8 / 25 mg m-3; ``carlson_class``
    applies Carlson's TSI bands (Carlson 1977; bands < 40, 40-50, 50-70, >= 70 as in Carlson & Simpson 1996) to
    the TSI of the same value. Carlson's table pairs TSI 40 / 50 / 70 with about 2.6 / 7.3 / 56 mg m-3
    chlorophyll-a (from memory), so 2.6 is OECD mesotrophic but Carlson oligotrophic, 8 is OECD mesotrophic but
    Carlson eutrophic, 30 is OECD hypertrophic but Carlson eutrophic; ``trophic_class`` repeats the OECD one."""
    chla = pd.Series([0.5, 2.0, 2.6, 8.0, 30.0, 60.0, np.nan])
    out = class_columns(chla)
    assert out["oecd_class"].tolist() == [
        "ultra-oligotrophic", "oligotrophic", "mesotrophic", "mesotrophic", "hypertrophic", "hypertrophic", None,
    ]  # fmt: skip
    assert out["carlson_class"].tolist() == [
        "oligotrophic", "oligotrophic", "oligotrophic", "eutrophic", "eutrophic", "hypereutrophic", None,
    ]  # fmt: skip
    assert out["trophic_class"].tolist() == out["oecd_class"].tolist()
    assert out["tsi"].to_numpy()[:6] == pytest.approx(9.81 * np.log(chla.to_numpy()[:6]) + 30.6)
    # Carlson's chlorophyll-a at the band limits (from memory of Carlson 1977's table): 2.6, 7.3, 56 mg m-3
    assert carlson_tsi(np.array([2.6, 7.3, 56.0])) == pytest.approx([40.0, 50.0, 70.0], abs=0.2)
