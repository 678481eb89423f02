"""Checking the areas table: CRS, ids, polygons, attribute names and values, overlaps."""

from __future__ import annotations

import logging

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj

from ..config import Config
from ..errors import InputError, UsageError, cut_text
from ._parse import beyond, blank, is_text, numbers, plain_index
from ._report import Report, values_of

log = logging.getLogger(__name__)

_POLYGONS = ("Polygon", "MultiPolygon")
ATTRIBUTE_MAX = 1e15  # |value| above this is refused as absurd (float32 features overflow ~3e38)
OVERLAP_SHARE = 1e-6  # pairs sharing more than this share of the smaller area overlap


def check_areas(raw: gpd.GeoDataFrame, config: Config, source: str | None) -> gpd.GeoDataFrame:
    """The areas, checked: a CRS (plausible for the coordinates), unique ``area_id``, polygon
    geometry, attribute names that are Python identifiers, numeric attribute values."""
    if not isinstance(raw, gpd.GeoDataFrame):
        raise InputError(
            table="areas", column="geometry", problem="is not a geometry column",
            fix="Give the areas as GeoPackage, GeoJSON or GeoParquet",
        )  # fmt: skip
    areas = plain_index(raw)
    if areas.geometry.name != "geometry":
        areas = areas.rename_geometry("geometry")
    if areas.empty:
        raise InputError(table="areas", column=None, problem="has no rows")
    areas = _with_crs(areas, config, source)
    report = Report("areas", areas["area_id"])
    report.fail("area_id", "is blank", blank(areas["area_id"]))
    report.fail("area_id", "is not unique", areas["area_id"].duplicated(keep=False).to_numpy())
    geometry = areas.geometry
    report.fail("geometry", "is missing or empty", (geometry.isna() | geometry.is_empty).to_numpy())
    kind = geometry.geom_type
    wrong = ~kind.isin(_POLYGONS).to_numpy()
    report.fail(
        "geometry",
        f"is not a polygon but {values_of(kind, wrong)}; areas must be Polygon or MultiPolygon",
        wrong,
    )
    invalid = ~geometry.is_valid.to_numpy()
    if invalid.any():
        log.warning(
            "areas: %d polygons are not valid (e.g. %s); point-in-polygon results near their "
            "flaws may be off; shapely.make_valid can mend them",
            int(invalid.sum()), report.examples(invalid),
        )  # fmt: skip
    for name in areas.columns:
        if name in ("area_id", "geometry"):
            continue
        if not str(name).isidentifier():
            raise InputError(
                table="areas",
                column=str(name),
                problem="is not a name an attribute can have (letters, digits and _, not "
                "starting with a digit); area attributes become model feature names",
                fix="Rename the attribute in the areas file, e.g. with _ for spaces",
            )
        areas[name] = _attribute(areas[name], str(name), report)
    return areas


def _with_crs(areas: gpd.GeoDataFrame, config: Config, source: str | None) -> gpd.GeoDataFrame:
    where = f"the areas file {source}" if source else "the areas"
    if areas.crs is None:
        if not config.areas_crs:
            raise InputError(
                table="areas",
                column="geometry",
                problem=f"{where} has no CRS (coordinate reference system), so its polygons "
                "cannot be matched with the premises",
                fix="Save the areas with their CRS (GeoPackage, GeoParquet, or GeoJSON in "
                "lon/lat), or set [data] areas_crs in lifecycle.toml",
            )
        try:
            areas = areas.set_crs(config.areas_crs)
        except pyproj.exceptions.CRSError as exc:
            raise UsageError(
                f"[data] areas_crs was {config.areas_crs!r} but pyproj does not know it ({exc})"
            ) from None
    crs = pyproj.CRS.from_user_input(areas.crs)
    if crs.is_geographic:
        xmin, ymin, xmax, ymax = areas.total_bounds
        if max(abs(xmin), abs(xmax)) > 180 or max(abs(ymin), abs(ymax)) > 90:
            raise InputError(
                table="areas",
                column="geometry",
                problem=f"{where} says its CRS is {crs.to_string()} (lon/lat degrees) but its "
                f"coordinates reach x {xmin:.6g}..{xmax:.6g}, y {ymin:.6g}..{ymax:.6g}, which "
                "are not degrees: the file carries no CRS or a wrong one (GeoJSON without one "
                "is read as lon/lat)",
                fix="Save the areas with their projected CRS (GeoPackage or GeoParquet keep it)",
            )
    return areas


def _attribute(values: pd.Series, name: str, report: Report) -> pd.Series:
    """A numeric attribute as float64; a text column that is partly numbers is refused."""
    number, bad = numbers(values)
    if is_text(values):
        if np.isnan(number).all() and (~blank(values)).any():
            return values  # plain text: not a feature (logged where features are made)
        report.fail(
            name,
            f"has values that are not numbers, e.g. {values_of(values, bad, 3)}; an area "
            "attribute must be a number in every area (blank for unknown)",
            bad,
            "Write a number, or leave the cell blank if the value is unknown",
        )
    elif bad.any():
        report.fail(name, "is not finite (inf)", bad, "Write a finite number or a blank")
    report.fail(
        name,
        f"has absurd values (|value| > {ATTRIBUTE_MAX:g})",
        beyond(number, ATTRIBUTE_MAX),
        "Check the unit and the export of this attribute",
    )
    return pd.Series(number, index=values.index, name=values.name) if is_text(values) else values


def planar_areas(geometry: gpd.GeoSeries) -> np.ndarray:
    """Each polygon's area in square metres where the CRS is geographic (lon/lat degrees, as
    GeoJSON keeps areas): measured in the WGS 84 UTM zone of the polygons' centre, not in
    square degrees, whose size shrinks with the cosine of the latitude; else in the CRS's unit."""
    if geometry.crs is not None and geometry.crs.is_geographic and len(geometry):
        geometry = geometry.to_crs(geometry.estimate_utm_crs())
    return geometry.area.to_numpy()


def overlapping_pairs(areas: gpd.GeoDataFrame) -> list[tuple[int, int]]:
    """Row pairs ``(i, j)``, ``i < j``, of areas whose interiors overlap: the intersection
    covers more than `OVERLAP_SHARE` of the smaller one (touching edges do not count)."""
    geometry = areas.geometry.reset_index(drop=True)
    if not geometry.is_valid.all():  # intersections of invalid polygons may raise
        geometry = geometry.make_valid()
    left, right = geometry.sindex.query(geometry, predicate="intersects")
    keep = left < right
    left, right = left[keep], right[keep]
    if not len(left):
        return []
    shared = (
        geometry.iloc[left]
        .reset_index(drop=True)
        .intersection(geometry.iloc[right].reset_index(drop=True))
    )
    size = planar_areas(geometry)
    over = planar_areas(shared) > OVERLAP_SHARE * np.minimum(size[left], size[right])
    return sorted(zip(left[over].tolist(), right[over].tolist(), strict=True))


def check_overlaps(
    areas: gpd.GeoDataFrame, customers: pd.DataFrame, premise_crs: str, config: Config
) -> None:
    """Refuse overlapping areas unless ``[spatial] overlaps`` chooses a rule, naming the pairs
    of area ids and the premises lying in more than one area."""
    if config.spatial.overlaps != "refuse":
        return
    pairs = overlapping_pairs(areas)
    if not pairs:
        return
    ids = areas["area_id"].to_numpy()
    shown = ", ".join(f"{cut_text(str(ids[i]))} & {cut_text(str(ids[j]))}" for i, j in pairs[:5])
    points = gpd.GeoSeries.from_xy(customers["x"], customers["y"], crs=premise_crs)
    if not pyproj.CRS.from_user_input(areas.crs).equals(pyproj.CRS.from_user_input(premise_crs)):
        points = points.to_crs(areas.crs)
    hit_point, _ = areas.sindex.query(points, predicate="within")
    several = np.bincount(hit_point, minlength=len(customers)) > 1
    examples = Report("customers", customers["customer_id"]).examples(several)
    raise InputError(
        table="areas",
        column="geometry",
        problem=f"has {len(pairs)} pair(s) of areas that overlap ({shown}); "
        f"{int(several.sum())} premise(s) lie in more than one area, e.g. "
        f"{', '.join(cut_text(str(e)) for e in examples) or 'none yet'}",
        fix="Mend the polygons so that they do not overlap, or choose a rule in lifecycle.toml: "
        '[spatial] overlaps = "smallest" (the smallest area wins) or "first_id" (the area_id '
        "sorting first wins)",
    )
