"""Input tables: reading them and checking them against the data contract."""

from ._areas import planar_areas
from ._check import check_tables, load_tables
from ._cut import tables_as_of
from ._describe import describe_tables
from ._read import read_raw_tables
from ._tables import RawTables, Tables

__all__ = [
    "RawTables",
    "Tables",
    "check_tables",
    "describe_tables",
    "load_tables",
    "planar_areas",
    "read_raw_tables",
    "tables_as_of",
]
