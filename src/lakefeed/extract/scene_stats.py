"""AOI statistics of one scene: masking rules and summary statistics (pure numpy / shapely).

Takes the pixels of one AOI in one scene (1-D arrays of chlorophyll-a in mg m-3, quality flags,
relative uncertainty) and returns the AOI's statistics (the AOIs' inward shoreline buffer is
:func:`lakefeed.geometry.zones.shore_buffered`). Must not open files.

Rules, in order: nodata and non-finite values; bad quality (configured bits or values; with none
configured, any non-zero flag is bad: 0 means clear); values outside the valid range. The valid
fraction is the number of valid pixels over all pixels whose centre lies in the shore-buffered
AOI (pixels beyond the scene edge count as not valid).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = ["STAT_COLUMNS", "aoi_statistics", "valid_mask"]

#: Statistic columns returned by :func:`aoi_statistics` (values in the scene's units, mg m-3;
#: ``cv``, ``valid_fraction`` and ``uncertainty`` dimensionless).
STAT_COLUMNS = ["median", "mean", "p10", "p90", "std", "cv", "n_valid", "valid_fraction", "uncertainty"]


def valid_mask(
    values: np.ndarray,
    quality: np.ndarray | None = None,
    *,
    nodata: float | None = None,
    bad_bits: Sequence[int] = (),
    bad_values: Sequence[int] = (),
    valid_range: tuple[float, float] | None = None,
) -> np.ndarray:
    """Boolean mask of valid pixels.

    Parameters
    ----------
    values
        Chlorophyll-a (mg m-3).
    quality
        Quality flags of the same shape (integers; NaN = unknown, counted bad), or None.
    nodata
        No-data value of ``values``; non-finite values are always invalid.
    bad_bits, bad_values
        Quality bits (0 = least significant) and whole flag values that make a pixel bad. With both
        empty, any non-zero flag is bad.
    valid_range
        Inclusive (low, high) of plausible values, in the units of ``values``.
    """
    values = np.asarray(values)
    ok = np.isfinite(values)
    if nodata is not None and np.isfinite(nodata):
        ok &= values != nodata
    if quality is not None:
        q = np.asarray(quality)
        known = np.isfinite(q) if q.dtype.kind == "f" else np.ones(q.shape, dtype=bool)
        qi = np.where(known, q, 0).astype(np.int64)
        ok &= known
        if not bad_bits and not bad_values:
            ok &= qi == 0
        else:
            if bad_bits:
                bitmask = int(np.bitwise_or.reduce([1 << int(b) for b in bad_bits]))
                ok &= (qi & bitmask) == 0
            if bad_values:
                ok &= ~np.isin(qi, np.asarray(bad_values, dtype=np.int64))
    if valid_range is not None:
        low, high = valid_range
        with np.errstate(invalid="ignore"):
            ok &= (values >= low) & (values <= high)
    return ok


def aoi_statistics(
    values: np.ndarray,
    quality: np.ndarray | None = None,
    uncertainty: np.ndarray | None = None,
    *,
    n_outside: int = 0,
    nodata: float | None = None,
    bad_bits: Sequence[int] = (),
    bad_values: Sequence[int] = (),
    valid_range: tuple[float, float] | None = None,
) -> dict[str, float]:
    """Statistics of one AOI in one scene.

    Parameters
    ----------
    values, quality, uncertainty
        1-D arrays of the pixels whose centre lies in the AOI: chlorophyll-a (mg m-3), quality flags,
        relative 1-sigma uncertainty (fraction). ``quality`` and ``uncertainty`` may be None.
    n_outside
        AOI pixels beyond the scene edge (not read; counted as not valid).
    nodata, bad_bits, bad_values, valid_range
        Masking rules, see :func:`valid_mask`.

    Returns
    -------
    dict with :data:`STAT_COLUMNS`: median, mean, p10, p90 (numpy's linear-interpolation
    percentiles), std (population, ddof=0), all mg m-3; cv = std / mean; n_valid; valid_fraction
    (valid pixels / AOI pixels); uncertainty = mean relative uncertainty of the valid pixels (NaN
    without a band). With no valid pixel the value statistics are NaN.
    """
    values = np.asarray(values)
    n_total = values.size + int(n_outside)
    ok = valid_mask(values, quality, nodata=nodata, bad_bits=bad_bits, bad_values=bad_values, valid_range=valid_range)
    v = values[ok].astype(np.float64)
    n = int(v.size)
    out: dict[str, float] = {
        "n_valid": n,
        "valid_fraction": n / n_total if n_total else 0.0,
    }
    if n == 0:
        out.update(dict.fromkeys(["median", "mean", "p10", "p90", "std", "cv", "uncertainty"], np.nan))
        return out
    p10, p50, p90 = np.percentile(v, [10, 50, 90])
    mean = float(v.mean())
    std = float(v.std())
    out.update(median=float(p50), mean=mean, p10=float(p10), p90=float(p90), std=std)
    out["cv"] = std / mean if mean > 0 else np.nan
    if uncertainty is None:
        out["uncertainty"] = np.nan
    else:
        u = np.asarray(uncertainty, dtype=np.float64)[ok]
        u = u[np.isfinite(u) & (u >= 0)]
        out["uncertainty"] = float(u.mean()) if u.size else np.nan
    return out
