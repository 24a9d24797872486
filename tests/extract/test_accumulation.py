"""De-accumulation of reanalysis amounts: reference test vector, noise clipping, mis-declared kinds."""

from __future__ import annotations

import dask
import dask.array as da
import numpy as np
import pandas as pd
import pytest
import xarray as xr

from lakefeed.exceptions import ExtractError
from lakefeed.extract.accumulation import deaccumulate


def _since_reset(days: int = 3, per_hour: float = 1.0) -> xr.DataArray:
    """1 mm every hour stored as 1..23 at 01..23 UTC and 24 at 00 UTC of the next day."""
    t = pd.date_range("2024-05-01 01:00", periods=24 * days, freq="h")
    hours = np.where(t.hour == 0, 24, t.hour).astype(float)
    return xr.DataArray(hours * per_hour, dims="time", coords={"time": t}, name="precip", attrs={"units": "mm"})


def test_reference_vector_gives_one_mm_every_hour():
    """Accumulated reanalysis fields (common practice): de-accumulated it is 24 x 1 mm."""
    acc = _since_reset()
    res = deaccumulate(acc, kind="since_reset", reset_hour=0)
    np.testing.assert_array_equal(res.increments.values, np.ones(acc.size))
    naive = acc.diff("time")
    assert naive.sel(time="2024-05-02 01:00").item() == -23  # what a naive difference gives
    assert res.check() == 0


def test_daily_sum_of_increments_equals_value_at_next_reset():
    """Increments summed over stamps 01..23 UTC of d plus 00 UTC of d+1 equal the value at the reset."""
    rng = np.random.default_rng(3)
    t = pd.date_range("2024-05-01 01:00", periods=24 * 4, freq="h")
    inc = rng.gamma(0.3, 1.0, t.size) * (rng.random(t.size) < 0.4)
    day = (t - pd.Timedelta("1h")).floor("D")
    running = pd.Series(inc, index=t).groupby(day).cumsum().to_numpy()
    acc = xr.DataArray(running, dims="time", coords={"time": t})
    got = deaccumulate(acc, kind="since_reset").increments
    sums = got.assign_coords(day=("time", day)).groupby("day").sum()
    resets = acc.sel(time=t[t.hour == 0]).values
    np.testing.assert_allclose(sums.values, resets, rtol=1e-12)


def test_gridded_lazy_input_stays_lazy_and_matches():
    acc = _since_reset(2)
    grid = acc.expand_dims(y=2, x=3).transpose("time", "y", "x").copy()
    lazy = grid.copy(data=da.from_array(grid.values, chunks=(7, 2, 3)))
    with dask.config.set(scheduler=_refuse):
        res = deaccumulate(lazy, kind="since_reset")
    assert isinstance(res.increments.data, da.Array)
    np.testing.assert_array_equal(res.increments.values, np.ones(grid.shape))
    assert not res.bad_steps.values.any()


def _refuse(*args, **kwargs):
    raise AssertionError("something was computed")


def test_packing_noise_clipped_to_zero_and_counted():
    acc = _since_reset(1, per_hour=0.0).copy()
    acc.values[5] = -0.0004  # packing noise around zero (scale 0.001)
    acc.attrs["packing_step"] = 0.001
    res = deaccumulate(acc, kind="since_reset")
    assert (res.increments.values >= 0).all()
    assert res.check() == 1


def test_per_step_and_none():
    t = pd.date_range("2024-01-01", periods=4, freq="6h")
    x = xr.DataArray([0.0, 2.0, -1e-9, 1.0], dims="time", coords={"time": t}, attrs={"packing_step": 1e-6})
    res = deaccumulate(x, kind="per_step")
    np.testing.assert_array_equal(res.increments.values, [0.0, 2.0, 0.0, 1.0])
    assert res.check() == 1
    assert deaccumulate(x, kind="none").increments is x


def test_misdeclared_accumulation_names_variable_and_first_time():
    """Per-step totals declared as running totals give negative increments away from the reset hour."""
    t = pd.date_range("2024-05-01 01:00", periods=48, freq="h")
    per_step = xr.DataArray(np.tile([3.0, 1.0], 24), dims="time", coords={"time": t}, name="precip")
    res = deaccumulate(per_step, kind="since_reset")
    with pytest.raises(ExtractError, match=r"'precip'.*since_reset.*2024-05-01 02:00"):
        res.check()


def test_gap_in_time_gives_nan_not_a_wrong_increment():
    acc = _since_reset(1).drop_isel(time=[5])
    res = deaccumulate(acc, kind="since_reset").increments
    assert np.isnan(res.isel(time=5).item())  # step after the gap
    assert np.nansum(res.values) == 22
