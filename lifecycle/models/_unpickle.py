"""Unpickling a verified model file with an allow-list of what it may construct.

The signature and hashes (`lifecycle.models._persist`) are the guarantee; this is a second
wall behind them. The standard library's unpickler is asked (`pickle.Unpickler.find_class`)
for every class or function the file names, and only these are given: classes of
``lifecycle.models`` and ``lifecycle.evaluation``, of numpy, pandas, scikit-learn,
scikit-survival, lifelines and scipy, and a few plain builtins. Inside those libraries,
functions that read, write, run or import anything (``read_*``, ``load*``, ``eval``,
``system``, modules such as ``numpy.lib.npyio`` or ``pandas.io``) are refused too. Anything
else raises `ModelFileError` before it is called.
"""

from __future__ import annotations

import pickle
from pathlib import Path

from ..errors import ModelFileError

_ROOTS = ("lifecycle.models", "lifecycle.evaluation", "numpy", "pandas", "sklearn", "sksurv",
          "lifelines", "scipy")  # fmt: skip
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
    """Load a pickle file, refusing (`ModelFileError`) any class or function not `allowed`."""

    class _Restricted(pickle.Unpickler):
        def find_class(self, module, name):
            if not allowed(module, name, trusted):
                raise ModelFileError(
                    f"{path} asks to construct {module}.{name}, which a lifecycle model never "
                    "holds; it was not loaded. Refit the model"
                )
            return super().find_class(module, name)

    with open(path, "rb") as handle:
        try:
            return _Restricted(handle).load()
        except (pickle.UnpicklingError, EOFError) as exc:
            raise ModelFileError(
                f"{path} is not a readable model file ({exc}); refit the model"
            ) from None
