"""lakefeed: analysis-ready, point-in-time-correct feature tables for lake water-quality models.

The data flow is ``config -> sources -> geometry -> extract -> features -> store``;
each stage is a sub-package. ``stages`` runs one stage for one lake (the I/O edge);
``flows/`` (Prefect) and ``cli`` call ``stages``.
"""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("lakefeed")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0.0.0"

__all__ = ["__version__", "show_versions"]


def show_versions() -> str:
    """Versions of lakefeed, Python and the main dependencies, for bug reports."""
    import platform

    lines = [f"lakefeed: {__version__}", f"python: {platform.python_version()}", f"platform: {platform.platform()}"]
    for name in (
        "numpy",
        "pandas",
        "xarray",
        "dask",
        "distributed",
        "geopandas",
        "shapely",
        "pyproj",
        "rasterio",
        "rioxarray",
        "netCDF4",
        "pyarrow",
        "duckdb",
        "prefect",
        "prefect-dask",
        "pydantic",
        "pint",
        "cf-xarray",
        "networkx",
        "scipy",
    ):
        try:
            lines.append(f"{name}: {version(name)}")
        except PackageNotFoundError:
            lines.append(f"{name}: not installed")
    return "\n".join(lines)
