"""What `lakefeed init` detects from the layers: the sub-basin id and downstream fields, the lake's code, the
time zone, and an explanation of the outlet codes a user must declare.

Takes GeoDataFrames already read (sub-basins, the lake polygon) and the outlet codes of
:func:`lakefeed.geometry.outlets.outlet_codes`; returns field names, codes, a time-zone name and text. Pure:
opens no file of its own (the time zone comes from the ``timezonefinder`` package's data).
"""

from __future__ import annotations

import geopandas as gpd

from lakefeed.exceptions import GeometryError
from lakefeed.geometry.outlets import OutletCode

__all__ = ["detect_fields", "explain_codes", "find_lake_code", "lake_time_zone"]


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


def find_lake_code(subbasins: gpd.GeoDataFrame, id_field: str, downstream_field: str) -> str | None:
    """The downstream code that stands for the lake: the one code, not a sub-basin id, naming a lake or reservoir."""
    ids = set(subbasins[id_field].astype(str))
    others = {str(v) for v in subbasins[downstream_field].dropna() if str(v) not in ids and str(v).strip()}
    lakeish = sorted(v for v in others if "lake" in v.lower() or "reservoir" in v.lower())
    return lakeish[0] if len(lakeish) == 1 else None


def lake_time_zone(lake: gpd.GeoDataFrame) -> str:
    """IANA time zone at the lake polygon's centroid ("UTC" where none is known, e.g. at sea)."""
    from timezonefinder import TimezoneFinder

    centre = lake.to_crs(lake.estimate_utm_crs()).union_all().centroid
    pt = gpd.GeoSeries([centre], crs=lake.estimate_utm_crs()).to_crs(4326).iloc[0]
    return TimezoneFinder().timezone_at(lng=pt.x, lat=pt.y) or "UTC"
