"""Which customer columns hold the premise coordinates, in which CRS, and their values."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyproj

from ..config import Config
from ..errors import InputError, UsageError
from ._parse import numbers
from ._report import Report

COORDINATE_MAX = 1e8  # |x| or |y| above this (metres, or any projected unit) is refused


def coordinate_columns(customers: pd.DataFrame, config: Config) -> tuple[str, str, str]:
    """Which columns hold the premise coordinates, and their CRS."""
    columns = set(customers.columns)
    if {"x", "y"} <= columns and config.premise_crs:
        try:
            pyproj.CRS.from_user_input(config.premise_crs)
        except pyproj.exceptions.CRSError as exc:
            raise UsageError(
                f"[data] premise_crs was {config.premise_crs!r} but pyproj does not know it "
                f'({exc}); give an EPSG code such as "EPSG:32630"'
            ) from None
        return "x", "y", str(config.premise_crs)
    if {"lon", "lat"} <= columns:
        return "lon", "lat", "EPSG:4326"
    if {"x", "y"} <= columns:
        raise InputError(
            table="customers",
            column="x",
            problem="x, y are given but their CRS is not",
            fix='Set [data] premise_crs (e.g. premise_crs = "EPSG:32630") in lifecycle.toml, '
            "or give lon, lat instead",
        )
    pair = ("lon", "lat") if columns & {"lon", "lat"} else ("x", "y")
    missing = next(c for c in pair if c not in columns)
    raise InputError(
        table="customers",
        column=missing,
        problem=f"is missing; premise coordinates are x, y (with [data] premise_crs) or lon, lat; "
        f"the columns are {sorted(map(str, columns))}",
        fix="Add the coordinates, or map your names in [columns.customers]",
    )


def premise_coordinates(
    raw: pd.DataFrame, x_name: str, y_name: str, report: Report
) -> tuple[np.ndarray, np.ndarray]:
    out = []
    for name, limit in ((x_name, 180.0), (y_name, 90.0)):
        values, bad = numbers(raw[name])
        report.fail(name, "is not a number", bad)
        report.fail(name, "is blank; every customer needs premise coordinates", np.isnan(values))
        if name in ("lon", "lat"):
            report.fail(
                name,
                f"is outside −{limit:g}..{limit:g} degrees",
                np.abs(values) > limit,
                "Check that lon and lat are not swapped, or give x, y with [data] premise_crs",
            )
        report.fail(
            name, f"is absurdly far from the origin (|value| > {COORDINATE_MAX:g})",
            np.abs(values) > COORDINATE_MAX,
            "Check the coordinates and [data] premise_crs",
        )  # fmt: skip
        out.append(values)
    return out[0], out[1]
