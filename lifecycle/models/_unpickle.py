"""Unpickling a verified model file with an allow-list of what it may construct.

The signature and hashes (`lifecycle.models._persist`) are the guarantee; this is a second
wall behind them. joblib's unpickler is asked for every class or function the file names, and
only these are given: classes of ``lifecycle.models`` and ``lifecycle.evaluation``, of numpy,
pandas, scikit-learn, scikit-survival, lifelines and scipy, joblib's array wrapper, and a few
plain builtins. Inside those libraries, functions that read, write, run or import anything
(``read_*``, ``load*``, ``eval``, ``system``, modules such as ``numpy.lib.npyio`` or
``pandas.io``) are refused too. Anything else raises `ModelFileError` before it is called.

This uses joblib's unpickler class (``joblib.numpy_pickle.NumpyUnpickler``), which is not a
public API; if a joblib release changes it, loading falls back to ``joblib.load`` (the file's
signature has been checked already) and says so in the log.
"""

from __future__ import annotations

import logging
from pathlib import Path

import joblib

from ..errors import ModelFileError

log = logging.getLogger(__name__)

_ROOTS = ("lifecycle.models", "lifecycle.evaluation", "numpy", "pandas", "sklearn", "sksurv",
          "lifelines", "scipy", "joblib.numpy_pickle")  # fmt: skip
_EXACT = {
    "builtins": {"slice", "set", "frozenset", "complex", "range", "bytearray", "object", "int",
                 "float", "str", "bytes", "list", "dict", "tuple", "bool"},
    "copyreg": {"_reconstructor"},
    "collections": {"OrderedDict", "defaultdict", "deque"},
    "functools": {"partial"},
    "datetime": {"date", "datetime", "timedelta", "timezone"},
    "_codecs": {"encode"},
}  # fmt: skip
_DENIED_PARTS = {"io", "npyio", "format", "testing", "_testing", "tests", "conftest", "f2py",
                 "distutils", "subprocess", "os", "shutil", "pickle", "plotting"}  # fmt: skip
_DENIED_NAMES = ("read", "load", "eval", "exec", "system", "open", "compile", "import",
                 "getattr", "setattr", "delattr", "save", "dump", "write", "to_", "popen",
                 "spawn", "fromfile", "memmap", "genfromtxt", "run", "call")  # fmt: skip


def allowed(module: str, name: str, trusted: tuple[str, ...] = ()) -> bool:
    """Whether a model file may name ``module.name``; ``trusted``: more module prefixes whose
    classes may be constructed (a family of your own, e.g. ``("mypackage.models",)``)."""
    if module in _EXACT:
        return name in _EXACT[module]
    if any(module == root or module.startswith(root + ".") for root in trusted):
        return True
    if not any(module == root or module.startswith(root + ".") for root in _ROOTS):
        return False
    parts = set(module.split("."))
    if module == "numpy.random._pickle":  # numpy's own generator constructors
        parts.discard("_pickle")
    if parts & _DENIED_PARTS or parts & {"_pickle"}:
        return False
    return not name.lstrip("_").lower().startswith(_DENIED_NAMES)


def restricted_load(path: Path, trusted: tuple[str, ...] = ()) -> object:
    """Load a joblib file, refusing (`ModelFileError`) any class or function not `allowed`."""
    try:
        from joblib import numpy_pickle

        base = numpy_pickle.NumpyUnpickler
        validate = numpy_pickle._validate_fileobject_and_memmap
    except (ImportError, AttributeError):
        return _unrestricted(path)

    class _Restricted(base):
        def find_class(self, module, name):
            if not allowed(module, name, trusted):
                raise ModelFileError(
                    f"{path} asks to construct {module}.{name}, which a lifecycle model never "
                    "holds; it was not loaded. Refit the model"
                )
            return super().find_class(module, name)

    with open(path, "rb") as handle, validate(handle, str(path), None) as (fobj, _):
        if isinstance(fobj, str):  # a joblib format before 0.10: never written by lifecycle
            raise ModelFileError(f"{path} is in an old joblib format; refit the model")
        try:
            unpickler = _Restricted(str(path), fobj, True, mmap_mode=None)
        except TypeError:
            log.warning(
                "joblib %s: no allow-list on unpickling; loading %s", joblib.__version__, path
            )
            return joblib.load(path)
        return unpickler.load()


def _unrestricted(path: Path) -> object:
    log.warning("joblib %s: no allow-list on unpickling; loading %s", joblib.__version__, path)
    return joblib.load(path)
