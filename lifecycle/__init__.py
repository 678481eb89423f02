"""lifecycle: customer-lifecycle survival modelling for subscription utilities."""

from .config import Config, load_config
from .data import RawTables, Tables, read_raw_tables
from .errors import InputError, LifecycleError, ModelFileError, UsageError

__version__ = "0.1.0"

__all__ = [
    "Config",
    "InputError",
    "LifecycleError",
    "ModelFileError",
    "RawTables",
    "Tables",
    "UsageError",
    "load_config",
    "read_raw_tables",
]
