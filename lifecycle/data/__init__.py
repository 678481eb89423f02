"""Input tables: reading them and checking them against the data contract."""

from ._read import read_raw_tables
from ._tables import RawTables, Tables

__all__ = ["RawTables", "Tables", "read_raw_tables"]
