"""Trophic state and threshold flags for chlorophyll-a (pure numpy/pandas).

Takes chlorophyll-a in mg m-3 (= ug L-1) and returns Carlson's trophic state index with its class, the
OECD (1982) trophic category and exceedance flags of user-defined thresholds. Must not open files.

These classes and flags inform only: see :data:`CAUTION`, which the CLI and the report print beside
them.

- Carlson (1977, Limnol. Oceanogr. 22) index in its common form TSI = 9.81 ln(Chl) + 30.6 (as in
  Carlson & Simpson 1996), with the classes < 40 oligotrophic, 40-50 mesotrophic, 50-70 eutrophic,
  > 70 hypereutrophic; a boundary value belongs to the upper class (40 is mesotrophic).
- OECD (1982) fixed boundaries for the annual mean: ultra-oligotrophic <= 1.0, oligotrophic <= 2.5,
  mesotrophic <= 8, eutrophic <= 25, hypertrophic > 25 (mg m-3). The published table shares each
  boundary between neighbouring classes; lakefeed pins every boundary to the LOWER class, continuing
  the "<=" of the first two classes: 8.0 is mesotrophic, 25.0 is eutrophic. Applied to a daily value,
  the category describes that value, not the lake's annual state.
- Exceedance: a value exceeds a threshold when it is at or above it (``chla >= value``).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

import numpy as np
import pandas as pd

__all__ = [
    "CARLSON_CLASSES",
    "CAUTION",
    "OECD_BOUNDARIES",
    "OECD_CLASSES",
    "UNSCREENED",
    "carlson_class",
    "carlson_tsi",
    "class_columns",
    "exceedance_flags",
    "oecd_category",
]

#: Printed and stored wherever trophic classes or chlorophyll-a thresholds are shown.
CAUTION = (
    "Trophic classes and chlorophyll-a thresholds inform only; bathing and drinking-water decisions "
    "follow local regulations and the responsible authority."
)

#: ``flags`` entry of a day whose value no outlier rule could examine: its classes and exceedances are computed
#: but may come from an undetected outlier scene.
UNSCREENED = "unscreened"

#: OECD (1982) fixed boundaries on chlorophyll-a (mg m-3); each boundary belongs to the lower class.
OECD_BOUNDARIES = (1.0, 2.5, 8.0, 25.0)
OECD_CLASSES = ("ultra-oligotrophic", "oligotrophic", "mesotrophic", "eutrophic", "hypertrophic")
#: Carlson & Simpson (1996) TSI classes; each boundary belongs to the upper class.
CARLSON_BOUNDARIES = (40.0, 50.0, 70.0)
CARLSON_CLASSES = ("oligotrophic", "mesotrophic", "eutrophic", "hypereutrophic")


def carlson_tsi(chla: np.ndarray | pd.Series | float) -> np.ndarray | pd.Series | float:
    """Carlson's trophic state index from chlorophyll-a (mg m-3): ``9.81 ln(Chl) + 30.6``.

    Non-positive or missing values give NaN.
    """
    c = np.asarray(chla, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        tsi = np.where(c > 0, 9.81 * np.log(np.where(c > 0, c, 1.0)) + 30.6, np.nan)
    if isinstance(chla, pd.Series):
        return pd.Series(tsi, index=chla.index, name="tsi")
    return float(tsi) if np.ndim(tsi) == 0 else tsi


def _classes(x: np.ndarray, bounds: tuple[float, ...], names: tuple[str, ...], *, right: bool) -> np.ndarray:
    x = np.asarray(x, dtype=float)
    idx = np.digitize(x, bounds, right=right)
    out = np.asarray(names, dtype=object)[idx]
    return np.where(np.isfinite(x), out, None)


def carlson_class(tsi: np.ndarray | pd.Series) -> np.ndarray:
    """Carlson & Simpson (1996) class of a TSI value (object array; None where TSI is NaN)."""
    return _classes(np.asarray(tsi), CARLSON_BOUNDARIES, CARLSON_CLASSES, right=False)


def oecd_category(chla: np.ndarray | pd.Series) -> np.ndarray:
    """OECD (1982) trophic category of chlorophyll-a values (mg m-3); boundaries in the lower class.

    Examples
    --------
    >>> oecd_category([1.0, 2.5, 8.0, 8.01, 25.0, 25.1]).tolist()
    ['ultra-oligotrophic', 'oligotrophic', 'mesotrophic', 'eutrophic', 'eutrophic', 'hypertrophic']
    """
    x = np.asarray(chla, dtype=float)
    with np.errstate(invalid="ignore"):
        x = np.where(x >= 0, x, np.nan)
    return _classes(x, OECD_BOUNDARIES, OECD_CLASSES, right=True)


def class_columns(chla: pd.Series) -> pd.DataFrame:
    """``tsi``, ``oecd_class``, ``carlson_class`` and the deprecated ``trophic_class`` of chlorophyll-a values.

    ``oecd_class`` applies the OECD (1982) boundaries to chlorophyll-a (mg m-3); ``carlson_class`` applies
    Carlson's TSI bands to ``tsi`` (Carlson 1977; bands as in Carlson & Simpson 1996). The two schemes
    differ: 8 mg m-3 is OECD mesotrophic but Carlson eutrophic (TSI 51.0). ``trophic_class`` repeats
    ``oecd_class`` for one release (deprecated: it named no scheme).
    """
    tsi = carlson_tsi(pd.to_numeric(chla, errors="coerce").astype(float).to_numpy())
    oecd = oecd_category(np.asarray(chla, dtype=float))
    return pd.DataFrame(
        {"tsi": tsi, "oecd_class": oecd, "carlson_class": carlson_class(tsi), "trophic_class": oecd}, index=chla.index
    )


def exceedance_flags(chla: pd.Series, thresholds: Mapping[str, float] | Iterable[object]) -> pd.DataFrame:
    """One boolean column ``exceeds_<name>`` per threshold: ``chla >= value`` (mg m-3).

    ``thresholds``: mapping name -> value, or objects with ``name`` and ``value`` (config Threshold).
    Missing values never exceed.
    """
    items = list(thresholds.items() if isinstance(thresholds, Mapping) else ((t.name, t.value) for t in thresholds))  # type: ignore[attr-defined]
    names = [name for name, _ in items]
    if len(set(names)) < len(names):
        twice = sorted({n for n in names if names.count(n) > 1})
        raise ValueError(f"threshold names {twice} occur more than once; give each threshold its own name")
    c = pd.to_numeric(chla, errors="coerce").astype(float)
    return pd.DataFrame({f"exceeds_{name}": (c >= float(value)).fillna(False) for name, value in items}, index=c.index)
