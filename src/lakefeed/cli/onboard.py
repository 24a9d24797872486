"""`lakefeed init`: onboard a lake (`lakefeed build` and `lakefeed refresh` have their own modules).

``init`` reads a lake polygon and a sub-basin layer, detects the id and downstream-id fields when
unambiguous, traces the direct inflows and the catchment, proposes the whole lake as an AOI when none is
given, picks the time zone from the lake's location, writes a ready lake YAML, runs the checks and says
what to review. Detection is :mod:`lakefeed.geometry.onboard`'s, the YAML comes from the config models
(:func:`lakefeed.config.onboard.lake_yaml`).
"""

from __future__ import annotations

import importlib
import os
from pathlib import Path

import typer
from rich.markup import escape
from rich.table import Table

from lakefeed.cli._app import app, console
from lakefeed.config.lake import SLUG
from lakefeed.exceptions import ConfigError, GeometryError

__all__ = ["init_command"]


def _rel(path: Path, start: Path) -> str:
    return os.path.relpath(path.resolve(), start.resolve())


@app.command("init")
def init_command(
    lake_id: str = typer.Argument(..., help="Id of the new lake: a plain slug (lower-case letters, digits, - or _)."),
    lake: Path = typer.Option(..., "--lake", help="Lake polygon layer (GeoPackage, GeoParquet, shapefile...)."),
    subbasins: Path = typer.Option(..., "--subbasins", help="Sub-basin network layer (polygons with downstream ids)."),
    id_field: str | None = typer.Option(None, "--id-field", help="Sub-basin id field (detected if unambiguous)."),
    downstream_field: str | None = typer.Option(None, "--downstream-field", help="Downstream-id field (detected)."),
    aois: Path | None = typer.Option(None, "--aois", help="Areas of interest layer; default: the whole lake."),
    sources: Path | None = typer.Option(None, "--sources", help="sources.yaml to use; default: a template."),
    out: Path = typer.Option(Path("config"), "--out", help="Folder for the lake YAML (and AOI layer)."),
    name: str | None = typer.Option(None, "--name", help="Display name of the lake; default from the id."),
    outside_id: list[str] | None = typer.Option(
        None, "--outside-id", help="Downstream code meaning 'drains out of the area' (repeatable), e.g. SEA."
    ),
    lake_code: str | None = typer.Option(
        None,
        "--lake-id",
        help="Downstream code meaning 'drains into the lake', e.g. 9999 (detected when one code names a lake).",
    ),
) -> None:
    """Write a ready lake config from a lake polygon and a sub-basin layer, run the checks, say what to review."""
    import geopandas as gpd

    from lakefeed.config import AoiLayer, LakeConfig, LayerRef, SubbasinLayer
    from lakefeed.config.onboard import SOURCES_TEMPLATE, lake_yaml
    from lakefeed.geometry.network import DEFAULT_OUTSIDE_IDS, LAKE_NODE, trace_catchment
    from lakefeed.geometry.onboard import detect_fields, explain_codes, find_lake_code, lake_time_zone
    from lakefeed.geometry.outlets import outlet_codes
    from lakefeed.sources.vectors import read_layer

    if not SLUG.fullmatch(lake_id):
        raise ConfigError(f"lake id {lake_id!r} must be a plain slug: lower-case letters, digits, '-' or '_'")
    lake_g = read_layer(lake, what="lake polygon")
    subs = read_layer(subbasins, what="sub-basin layer")
    if id_field is None or downstream_field is None:
        f, g = detect_fields(subs)
        id_field, downstream_field = id_field or f, downstream_field or g
    subs = read_layer(subbasins, what="sub-basin layer", id_field=id_field)
    lake_value = lake_code.strip() if lake_code else find_lake_code(subs, id_field, downstream_field)
    outside_ids = list(DEFAULT_OUTSIDE_IDS) + [
        str(v) for v in outside_id or [] if str(v).upper() not in DEFAULT_OUTSIDE_IDS
    ]
    try:
        catchment = trace_catchment(
            subs,
            lake_g,
            id_field=id_field,
            downstream_field=downstream_field,
            lake_id=lake_value,
            outside_ids=outside_ids,
            where=f"sub-basin layer {subbasins}",
        )
    except GeometryError as err:
        codes = outlet_codes(subs, lake_g, id_field=id_field, downstream_field=downstream_field)
        if not codes:
            raise
        raise GeometryError(
            f"{err} | {explain_codes(codes, downstream_field, lake_value=lake_value, outside_ids=outside_ids)}"
        ) from err
    if lake_value is None and catchment.rule == "outlet_in_lake" and catchment.lake_node != LAKE_NODE:
        lake_value = catchment.lake_node  # the code the sub-basins on the shore drain into: written out
    area_km2 = catchment.area_km2
    out.mkdir(parents=True, exist_ok=True)
    review: list[str] = []
    if aois is None:
        aois = out / f"aois-{lake_id}.gpkg"
        whole = gpd.GeoDataFrame({"aoi_id": ["whole_lake"]}, geometry=[lake_g.union_all()], crs=lake_g.crs)
        whole.to_file(aois, driver="GPKG")
        aoi_field = "aoi_id"
        review.append(f"AOI: the whole lake is proposed ({aois}); add your own areas of interest with --aois")
    else:
        layer = read_layer(aois, what="areas of interest")
        text_cols = [c for c in layer.columns if c != layer.geometry.name and layer[c].astype(str).is_unique]
        aoi_field = "aoi_id" if "aoi_id" in text_cols else (text_cols[0] if text_cols else "aoi_id")
    tz = lake_time_zone(lake_g)
    if sources is None:
        sources = out / "sources.yaml"
        if not sources.exists():
            sources.write_text(SOURCES_TEMPLATE, encoding="utf-8")
            review.append(f"sources: a template was written to {sources}; fill in the weather, hydrology, scenes")
    display = name or lake_id.replace("-", " ").replace("_", " ").title()
    basins = {"path": _rel(subbasins, out), "id_field": id_field, "downstream_field": downstream_field}
    if lake_value:
        basins["lake_id"] = str(lake_value)
    if outside_id:
        basins["outside_ids"] = [v for v in outside_ids if v]
    config = LakeConfig(
        id=lake_id,
        name=display,
        timezone=tz,
        sources=Path(_rel(sources, out)),
        lake=LayerRef(path=Path(_rel(lake, out))),
        aois=AoiLayer(path=Path(_rel(aois, out)), id_field=aoi_field),
        subbasins=SubbasinLayer(**basins),
    )
    lake_file = out / f"lake-{lake_id}.yaml"
    lake_file.write_text(lake_yaml(config), encoding="utf-8")
    table = Table(title=f"lakefeed init {lake_id}", show_header=False)
    for k, v in [
        (
            "sub-basin fields",
            f"id {id_field!r}, downstream {downstream_field!r}"
            + (f", lake marked {lake_value!r}" if lake_value else ""),
        ),
        ("direct inflows", ", ".join(catchment.direct_inflows) + f" (rule: {catchment.rule})"),
        ("catchment", f"{catchment.n_subbasins} sub-basins, {area_km2:.1f} km2"),
        ("time zone", f"{tz} (from the lake centroid)"),
        ("areas of interest", f"{aois} (field {aoi_field!r})"),
        ("lake config", str(lake_file)),
    ]:
        table.add_row(k, escape(v))
    console.print(table)
    outside = sorted(set(subs[id_field].astype(str)) - set(catchment.subbasin_ids))
    if outside:
        review.append(f"sub-basins outside the catchment (drain elsewhere): {', '.join(outside)}")
    review.append("sensors and thresholds: none configured yet (see the comments in the lake config)")
    _run_checks(lake_file)
    console.print("[bold]to review:[/]")
    for r in review:
        console.print(f"  - {escape(r)}")
    console.print(f"then build it: lakefeed build {escape(str(lake_file))}")


def _run_checks(lake_file: Path) -> None:
    from lakefeed.checks import check_paths

    for report in check_paths([lake_file]):
        for r in report.results:
            colour = {"ok": "green", "problem": "red"}.get(str(r.status), "yellow")
            hint = f" ({r.hint})" if r.hint and not r.ok else ""
            console.print(f"  [{colour}]{r.status:<8}[/] {escape(r.name)}: {escape(r.message)}{escape(hint)}")


# `build` and `refresh` come right after `init` in the command list
importlib.import_module("lakefeed.cli.build")
importlib.import_module("lakefeed.cli.refresh")
