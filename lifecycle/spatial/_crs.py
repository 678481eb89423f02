"""Coordinate reference systems: where distances are measured, and moving premises there."""

from __future__ import annotations

import logging

import numpy as np
from pyproj import CRS, Transformer
from pyproj.exceptions import CRSError

from ..config import Config
from ..data import Tables
from ..errors import InputError, UsageError

log = logging.getLogger(__name__)

__all__ = ["distance_crs", "premise_crs", "project_premises"]


def premise_crs(tables: Tables) -> CRS:
    """The CRS of the premise coordinates ``x``, ``y`` of ``tables.customers``.

    Raises `InputError` when ``tables.premise_crs`` is not a CRS that pyproj knows.
    """
    try:
        return CRS.from_user_input(tables.premise_crs)
    except CRSError:
        raise InputError(
            table="customers",
            column=None,
            problem=f"the premise CRS {tables.premise_crs!r} is not a CRS that pyproj knows",
            fix="set [data] premise_crs to an EPSG code such as EPSG:32631, or give lon, lat",
        ) from None


def _is_metric_projected(crs: CRS) -> bool:
    """Projected, with both axes in metres."""
    if not crs.is_projected:
        return False
    units = {axis.unit_name.lower() for axis in crs.axis_info[:2]}
    return units <= {"metre", "meter"}


def _utm_for(lon: float, lat: float) -> CRS:
    """The WGS 84 UTM zone holding ``(lon, lat)``: EPSG 326zz north of the equator, 327zz south,
    zone zz = ⌊(lon + 180) / 6⌋ + 1."""
    zone = int(np.floor((lon + 180.0) / 6.0)) % 60 + 1
    return CRS.from_epsg((32600 if lat >= 0 else 32700) + zone)


def distance_crs(source: CRS, x: np.ndarray, y: np.ndarray, configured: str | None = None) -> CRS:
    """The projected CRS, in metres, in which distances between premises are measured.

    In order of preference:

    1. ``configured`` (``[spatial] distance_crs``), which must be projected with metre axes;
    2. the premises' own CRS ``source``, if it is projected with metre axes;
    3. otherwise the WGS 84 UTM zone of the centre of the premises' bounding box in lon/lat.
       Within a zone the UTM scale factor lies in 0.9996–1.0010, so distances of a few
       kilometres are right to about 0.1 %.

    Parameters
    ----------
    source
        CRS of ``x``, ``y``.
    x, y
        Premise coordinates in ``source`` (used only to find their centre).
    configured
        A CRS in any form pyproj accepts, or ``None``.

    Raises
    ------
    UsageError
        If ``configured`` is not a CRS, or not projected in metres.
    """
    if configured:
        try:
            crs = CRS.from_user_input(configured)
        except CRSError:
            raise UsageError(
                f"[spatial] distance_crs was {configured!r} but is not a CRS pyproj knows; "
                "give a projected CRS in metres, e.g. EPSG:32631"
            ) from None
        if not _is_metric_projected(crs):
            raise UsageError(
                f"[spatial] distance_crs was {configured!r} ({crs.name}) but is expected to be "
                "a projected CRS with axes in metres, e.g. a UTM zone such as EPSG:32631"
            )
        return crs
    if _is_metric_projected(source):
        return source
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    finite = np.isfinite(x) & np.isfinite(y)
    if not finite.any():
        raise InputError(
            table="customers",
            column=None,
            problem="no premise has finite coordinates, so no distance CRS can be chosen",
            count=len(x),
        )
    to_lonlat = Transformer.from_crs(source, CRS.from_epsg(4326), always_xy=True)
    lon, lat = to_lonlat.transform(x[finite], y[finite])
    centre_lon = (np.min(lon) + np.max(lon)) / 2.0
    centre_lat = (np.min(lat) + np.max(lat)) / 2.0
    crs = _utm_for(centre_lon, centre_lat)
    log.info(
        "distances measured in %s (%s), the UTM zone of the premises' centre (%.4f, %.4f)",
        crs.to_string(),
        crs.name,
        centre_lon,
        centre_lat,
    )
    return crs


def project_premises(
    tables: Tables, config: Config | None = None
) -> tuple[np.ndarray, np.ndarray, CRS]:
    """Premise coordinates in metres, in the CRS chosen by `distance_crs`.

    Returns
    -------
    x, y : numpy.ndarray
        float64 coordinates, one per row of ``tables.customers``.
    crs : pyproj.CRS
        The CRS they are in.
    """
    config = config or Config()
    check_coordinates(tables)
    source = premise_crs(tables)
    x = tables.customers["x"].to_numpy(dtype=np.float64)
    y = tables.customers["y"].to_numpy(dtype=np.float64)
    target = distance_crs(source, x, y, config.spatial.distance_crs)
    if target.equals(source):
        return x.copy(), y.copy(), target
    log.info(
        "premises reprojected from %s to %s for distances", source.to_string(), target.to_string()
    )
    px, py = Transformer.from_crs(source, target, always_xy=True).transform(x, y)
    return np.asarray(px, dtype=np.float64), np.asarray(py, dtype=np.float64), target


def coordinate_columns(crs: CRS) -> str:
    """How the premise coordinate columns are named in messages: ``lon, lat`` or ``x, y``."""
    return "lon, lat" if crs.is_geographic else "x, y"


def check_coordinates(tables: Tables) -> None:
    """Raise `InputError` naming the customers whose premise coordinates are missing or infinite."""
    x = tables.customers["x"].to_numpy(dtype=np.float64)
    y = tables.customers["y"].to_numpy(dtype=np.float64)
    bad = ~(np.isfinite(x) & np.isfinite(y))
    if bad.any():
        raise InputError(
            table="customers",
            column=coordinate_columns(premise_crs(tables)),
            problem="premise coordinates are missing or not finite",
            count=int(bad.sum()),
            examples=tables.customers["customer_id"].to_numpy()[bad][:5],
            fix="give every customer the coordinates of its premise",
        )
