"""`lakefeed init`, `lakefeed build` and `lakefeed refresh`: onboard a lake, build it, keep it fresh.

``init`` reads a lake polygon and a sub-basin layer, detects the id and downstream-id fields when
unambiguous, traces the direct inflows and the catchment, proposes the whole lake as an AOI when none is
given, picks the time zone from the lake's location, writes a ready lake YAML, runs the checks and says
what to review. ``build`` and ``refresh`` run the Prefect flows of :mod:`lakefeed.flows.refresh`.
"""

from __future__ import annotations

import contextlib
import json
import os
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING

import typer
from rich.markup import escape
from rich.table import Table

from lakefeed.cli._app import SHRINK_HELP, app, console
from lakefeed.config.lake import SLUG
from lakefeed.exceptions import ConfigError, GeometryError

if TYPE_CHECKING:
    import geopandas as gpd

    from lakefeed.geometry.outlets import OutletCode

__all__ = ["detect_fields", "explain_codes", "init_command"]

_SOURCES_TEMPLATE = """\
# Data sources for lakefeed (written by `lakefeed init`; every section is optional).
# Paths are relative to this file; globs and ${ENV_VARS} are allowed. See the README's configuration reference.
# weather:
#   paths: [../weather/reanalysis_*.nc]
#   accumulation: {precip: {kind: since_reset}, sw_down: {kind: since_reset}}
# hydrology:
#   format: dsg
#   path: ../hydrology/subbasin_daily.nc
# scenes:
#   catalog: ../scenes/catalog.json
store: ../store
"""


def detect_fields(subbasins: gpd.GeoDataFrame) -> tuple[str, str]:
    """The (id field, downstream-id field) pair of a sub-basin layer, when only one pair fits.

    The id field has unique non-empty values; the downstream field is another field whose values are
    mostly ids of that field, or else a few distinct codes (the lake, the outside) besides some ids or
    under a name that says downstream (``DOWN``, ``to_basin``, ``next``, ``outlet``...). Raises
    :class:`GeometryError` with the candidates when none or several pairs fit.
    """
    cols = [c for c in subbasins.columns if c != subbasins.geometry.name]
    as_str = {c: subbasins[c].dropna().astype(str).str.strip() for c in cols}
    id_cands = [c for c in cols if len(as_str[c]) == len(subbasins) and as_str[c].is_unique]
    pairs = []
    for f in id_cands:
        ids = set(as_str[f])
        for g in cols:
            vals = as_str[g][as_str[g] != ""]
            if g == f or not len(vals):
                continue
            inside = vals.isin(ids)
            outlets = set(vals[~inside])  # codes for the lake and the outside: a few distinct values
            fits = inside.mean() >= 0.5 or (len(outlets) <= 3 and (inside.any() or _says_downstream(g)))
            if fits and (vals != as_str[f].reindex(vals.index)).all():
                pairs.append((f, g, float(inside.mean())))
    if len(pairs) > 1:  # prefer the pair whose downstream values are most often ids of the other field
        best = max(share for _, _, share in pairs)
        pairs = [p for p in pairs if p[2] == best]
    pairs = [(f, g) for f, g, _ in pairs]
    if len(pairs) > 1:  # prefer names that say what they are
        named = [(f, g) for f, g in pairs if "id" in f.lower() and _says_downstream(g)]
        pairs = named if named else pairs
    if len(pairs) != 1:
        found = ", ".join(f"{f} -> {g}" for f, g in pairs) or "none"
        raise GeometryError(
            f"sub-basin layer: cannot tell the id and downstream-id fields apart (candidates: {found}; fields: "
            f"{cols}); pass --id-field NAME --downstream-field NAME"
        )
    return pairs[0]


def explain_codes(
    codes: list[OutletCode], downstream_field: str, *, lake_value: str | None, outside_ids: list[str]
) -> str:
    """One line listing a layer's outlet codes and, for each, the ``init`` option that declares it.

    A code already declared says so; an undeclared one whose sub-basins reach the lake is proposed as
    the lake's (``--lake-id``), any other as draining out of the area (``--outside-id``).
    """
    outside = {str(o).strip().upper() for o in outside_ids}
    parts = []
    for c in codes:
        shown = ", ".join(c.subbasins[:5]) + (f" and {len(c.subbasins) - 5} more" if len(c.subbasins) > 5 else "")
        where = "touching the lake" if c.reaches_lake else "away from the lake"
        if lake_value is not None and c.code == lake_value:
            how = "declared as the lake's (--lake-id)"
        elif c.code.upper() in outside:
            how = "declared as draining out of the area (--outside-id or a default)"
        elif c.reaches_lake:
            how = f"if it means 'drains into the lake': --lake-id {c.code}"
        else:
            how = f"if it means 'drains out of the area': --outside-id {c.code}"
        parts.append(f"{c.code!r} from {len(c.subbasins)} sub-basin(s) ({shown}; {where}): {how}")
    return (
        f"downstream codes in {downstream_field!r} that are not sub-basin ids: " + "; ".join(parts) + ". Declare "
        "the lake's code with --lake-id CODE and each code for 'out of the area' with --outside-id CODE (repeatable)"
    )


def _says_downstream(name: str) -> bool:
    return any(k in name.lower() for k in ("down", "to", "next", "outlet", "receiv"))


def _lake_value(subbasins: gpd.GeoDataFrame, id_field: str, downstream_field: str) -> str | None:
    ids = set(subbasins[id_field].astype(str))
    others = {str(v) for v in subbasins[downstream_field].dropna() if str(v) not in ids and str(v).strip()}
    lakeish = sorted(v for v in others if "lake" in v.lower() or "reservoir" in v.lower())
    return lakeish[0] if len(lakeish) == 1 else None


def _time_zone(lake: gpd.GeoDataFrame) -> str:
    import geopandas as gpd
    from timezonefinder import TimezoneFinder

    centre = lake.to_crs(lake.estimate_utm_crs()).union_all().centroid
    pt = gpd.GeoSeries([centre], crs=lake.estimate_utm_crs()).to_crs(4326).iloc[0]
    return TimezoneFinder().timezone_at(lng=pt.x, lat=pt.y) or "UTC"


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

    from lakefeed.geometry.network import DEFAULT_OUTSIDE_IDS, LAKE_NODE, trace_catchment
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
    lake_value = lake_code.strip() if lake_code else _lake_value(subs, id_field, downstream_field)
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
    tz = _time_zone(lake_g)
    if sources is None:
        sources = out / "sources.yaml"
        if not sources.exists():
            sources.write_text(_SOURCES_TEMPLATE, encoding="utf-8")
            review.append(f"sources: a template was written to {sources}; fill in the weather, hydrology, scenes")
    display = name or lake_id.replace("-", " ").replace("_", " ").title()
    lines = [
        f"# Lake configuration written by `lakefeed init` for {display}. Review the points it printed.",
        f"id: {lake_id}",
        f"name: {display}",
        f"timezone: {tz}",
        f"sources: {_rel(sources, out)}",
        "lake:",
        f"  path: {_rel(lake, out)}",
        "aois:",
        f"  path: {_rel(aois, out)}",
        f"  id_field: {aoi_field}",
        "subbasins:",
        f"  path: {_rel(subbasins, out)}",
        f"  id_field: {id_field}",
        f"  downstream_field: {downstream_field}",
    ]
    if lake_value:
        lines.append(f"  lake_id: {json.dumps(lake_value)}")
    if outside_id:
        lines.append(f"  outside_ids: [{', '.join(repr(v) for v in outside_ids if v)}]")
    lines += [
        "# sensors: add your satellite sensors, e.g.",
        "#   sensor_a: {pixel_size_m: 20, reference: true, bad_quality_bits: [0, 1]}",
        "# thresholds: named chlorophyll-a levels (mg m-3); flags inform only: bathing and drinking-water",
        "#   decisions follow local regulations and the responsible authority.",
    ]
    lake_file = out / f"lake-{lake_id}.yaml"
    lake_file.write_text("\n".join(lines) + "\n", encoding="utf-8")
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
    try:
        from lakefeed.checks import check_paths
    except ImportError:
        console.print("[yellow]checks not available in this version; skipped[/]")
        return
    for report in check_paths([lake_file]):
        for r in report.results:
            colour = {"ok": "green", "problem": "red"}.get(str(r.status), "yellow")
            hint = f" ({r.hint})" if r.hint and not r.ok else ""
            console.print(f"  [{colour}]{r.status:<8}[/] {escape(r.name)}: {escape(r.message)}{escape(hint)}")


@contextlib.contextmanager
def _bars(sequential: bool) -> Iterator[None]:
    """Progress bars when stages run in this process; on Dask workers the flows log per-lake progress."""
    if not sequential:
        yield
        return
    from lakefeed.cli.demo import progress_bars
    from lakefeed.flows._runtime import set_progress

    with progress_bars() as bar:
        set_progress(bar)
        try:
            yield
        finally:
            set_progress(None)


def _print_summary(summaries: list[dict]) -> bool:
    table = Table(title="run summary")
    for c in ("lake", "status", "new rows", "stages run", "skipped / error"):
        table.add_column(c)
    for s in summaries:
        colour = {"failed": "red", "ok": "green"}.get(s["status"], "yellow")
        why = s.get("error") or s.get("skipped") or ""
        table.add_row(
            s["lake"],
            f"[{colour}]{s['status']}[/]",
            str(s.get("new_rows", 0)),
            escape(s.get("stages_run", "")),
            escape(why if len(why) <= 60 else why[:57] + "..."),
        )
    console.print(table)
    for s in summaries:
        if s.get("error"):
            console.print(f"[red]{escape(s['lake'])}[/]: {escape(s['error'])}")
    return all(s["status"] != "failed" for s in summaries)


@app.command("build")
def build_command(
    configs: list[Path] = typer.Argument(..., help="Lake YAML files or folders of them."),
    store: Path | None = typer.Option(None, "--store", help="Store folder; default 'store:' of sources.yaml."),
    dask_address: str | None = typer.Option(None, "--dask-address", help="Existing Dask scheduler address."),
    sequential: bool = typer.Option(False, "--sequential", help="No Dask: lakes one after the other here."),
    wait: float = typer.Option(0.0, "--wait", help="Seconds to wait if another run holds the store."),
    report: bool = typer.Option(True, "--report/--no-report", help="Write each lake's quality report."),
    allow_shrink: bool = typer.Option(False, "--allow-shrink", help=SHRINK_HELP),
    lakes_per_task: int = typer.Option(
        32, "--lakes-per-task", min=1, help="Most lakes naming the same sources computed in one task (1: each alone)."
    ),
) -> None:
    """Full build: validate, derive geometry and weights, backfill the whole record, write the reports."""
    from lakefeed.flows.refresh import build_lake

    with _bars(sequential):
        summaries = build_lake(
            [str(c) for c in configs],
            store=str(store) if store else None,
            dask_address=dask_address,
            sequential=sequential,
            wait=wait,
            report=report,
            allow_shrink=allow_shrink,
            lakes_per_task=lakes_per_task,
        )
    if not _print_summary(summaries):
        raise typer.Exit(1)


@app.command("refresh")
def refresh_command(
    config_dir: Path = typer.Argument(..., help="Folder of lake YAML files (or one file)."),
    store: Path | None = typer.Option(None, "--store", help="Store folder; default 'store:' of sources.yaml."),
    dask_address: str | None = typer.Option(None, "--dask-address", help="Existing Dask scheduler address."),
    sequential: bool = typer.Option(False, "--sequential", help="No Dask: lakes one after the other here."),
    wait: float = typer.Option(0.0, "--wait", help="Seconds to wait if another run holds the store."),
    allow_shrink: bool = typer.Option(False, "--allow-shrink", help=SHRINK_HELP),
    lakes_per_task: int = typer.Option(
        32, "--lakes-per-task", min=1, help="Most lakes naming the same sources computed in one task (1: each alone)."
    ),
    verify_hashes: bool = typer.Option(
        False, "--verify-hashes", help="Hash every source file in full, not only those whose size or time changed."
    ),
) -> None:
    """Process only new or changed source months of every lake; one lake's failure never stops the others."""
    from lakefeed.flows.refresh import refresh

    with _bars(sequential):
        summaries = refresh(
            [str(config_dir)],
            store=str(store) if store else None,
            dask_address=dask_address,
            sequential=sequential,
            wait=wait,
            allow_shrink=allow_shrink,
            lakes_per_task=lakes_per_task,
            verify_hashes=verify_hashes,
        )
    if not _print_summary(summaries):
        raise typer.Exit(1)
