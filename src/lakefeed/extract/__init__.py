"""Extract: zonal series, daily drivers, loads, AOI statistics, harmonised targets, quantile mapping.

Takes xarray/dask grids, frames and scene arrays; returns xarray/pandas. Must not open files, import Prefect
or compute lazy input (docs/architecture.md, "Folders").
"""
