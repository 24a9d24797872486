"""De-accumulation of accumulated reanalysis fields into per-step amounts.

Takes an ``xarray.DataArray`` with a ``time`` dimension (a grid or zonal series, numpy- or
dask-backed) and the declared accumulation kind (:class:`lakefeed.config.sources.Accumulation`):

- ``none``: values are per-step already (returned unchanged);
- ``per_step``: total over the step ending at the stamp (returned, noise clipped);
- ``since_reset``: running total since ``reset_hour`` UTC; the value stamped at the reset hour
  is the total of the previous period. The increment of the step ending at ``t`` is
  ``v(t) - v(t - step)``, except when ``t - step`` is the reset hour: then it is ``v(t)``.
  Example (1 mm every hour, reset 00 UTC): 1, 2, ..., 23 at 01..23 UTC and 24 at 00 UTC of the
  next day give 24 x 1 mm (a naive difference gives -23 mm at 01 UTC).

Returns a :class:`Deaccumulated` holding the lazy increments (same units, per step), a lazy
count of values clipped to zero as packing noise (-tolerance <= increment < 0) and a lazy
per-step indicator of increments below -tolerance, which contradict the declared kind;
:meth:`Deaccumulated.check` raises :class:`ExtractError` naming the variable and the first
offending time. Steps whose predecessor is missing (gaps, start of record) are NaN.

Must not: compute dask arrays itself (``check`` computes only what the caller asks), open files.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd
import xarray as xr

from lakefeed.exceptions import ExtractError

__all__ = ["Deaccumulated", "deaccumulate", "step_of"]

#: Relative tolerance of a running total (float32 resolution is ~6e-8).
RTOL = 1e-6


@dataclass(frozen=True)
class Deaccumulated:
    """Result of :func:`deaccumulate` (all arrays lazy when the input was)."""

    increments: xr.DataArray
    n_clipped: xr.DataArray
    bad_steps: xr.DataArray
    name: str
    kind: str

    def check(self, *, bad_steps: Any = None, n_clipped: Any = None) -> int:
        """Raise if the data contradict the declared kind; return the number of clipped values.

        Pass already computed ``bad_steps``/``n_clipped`` (e.g. from one ``dask.compute`` with the
        zonal means) to avoid computing them again.
        """
        bad = np.asarray(self.bad_steps.values if bad_steps is None else bad_steps, dtype=bool)
        if bad.any():
            t = pd.Timestamp(self.bad_steps["time"].values[int(np.argmax(bad))])
            raise ExtractError(
                f"variable {self.name!r}: declared accumulation {self.kind!r} but the increment ending {t} UTC is "
                "negative beyond packing noise; check weather.accumulation in sources.yaml (kind and reset_hour)"
            )
        return int(np.asarray(self.n_clipped.values if n_clipped is None else n_clipped))


def step_of(time: np.ndarray) -> np.timedelta64:
    """The regular time step (most common difference) of a time axis."""
    t = np.asarray(time, dtype="datetime64[ns]")
    if t.size < 2:
        return np.timedelta64(1, "h").astype("timedelta64[ns]")
    d, counts = np.unique(np.diff(t), return_counts=True)
    return d[np.argmax(counts)]


def deaccumulate(
    data: xr.DataArray,
    *,
    kind: Literal["none", "since_reset", "per_step"],
    reset_hour: int = 0,
    tolerance: float | None = None,
    name: str | None = None,
    time_dim: str = "time",
) -> Deaccumulated:
    """Per-step amounts from an accumulated field (units unchanged: amount per step).

    Parameters
    ----------
    data
        Values with a UTC ``time`` dimension, in the file's units (e.g. m, J m-2).
    kind, reset_hour
        Declared accumulation (reset hour in UTC).
    tolerance
        Absolute packing noise in data units (negative increments down to ``-tolerance`` are
        clipped to zero and counted). Default: ``attrs['packing_step']`` (the scale_factor of
        packed data) plus 1e-6 of the previous running total.
    name
        Variable name for messages (default ``data.name``).
    """
    label = str(name or data.name or "?")
    if kind == "none":
        no_bad = xr.DataArray(np.zeros(data.sizes[time_dim], bool), dims=time_dim, coords={time_dim: data[time_dim]})
        return Deaccumulated(data, xr.DataArray(0), no_bad, label, kind)
    if kind not in ("since_reset", "per_step"):
        raise ExtractError(f"variable {label!r}: unknown accumulation kind {kind!r}")
    packing = float(data.attrs.get("packing_step", 0.0) or 0.0) if tolerance is None else float(tolerance)
    time = np.asarray(data[time_dim].values, dtype="datetime64[ns]")
    step = step_of(time)
    tcoord = {time_dim: data[time_dim]}
    if kind == "per_step":
        inc = data
        tol = packing * 1.01 + RTOL * abs(data)
    else:
        start = time - step
        restart = pd.DatetimeIndex(start).hour == reset_hour
        restart &= (pd.DatetimeIndex(start).minute == 0) & (pd.DatetimeIndex(start).second == 0)
        contiguous = np.r_[False, np.diff(time) == step]
        restart_da = xr.DataArray(restart, dims=time_dim, coords=tcoord)
        prev = data.shift({time_dim: 1})
        diff = data - prev
        ok = xr.DataArray(restart | contiguous, dims=time_dim, coords=tcoord)
        inc = xr.where(restart_da, data, diff).where(ok)
        tol = packing * 1.01 + RTOL * abs(xr.where(restart_da, 0.0, prev))
    negative = inc < 0
    noise = negative & (inc >= -tol)
    bad = negative & ~noise
    other = [d for d in data.dims if d != time_dim]
    bad_steps = bad.any(dim=other) if other else bad
    n_clipped = noise.sum()
    out = xr.where(noise, 0.0, inc).astype(data.dtype if data.dtype.kind == "f" else np.float64)
    out.attrs = dict(data.attrs)
    out.name = data.name
    return Deaccumulated(out, n_clipped, bad_steps, label, kind)
