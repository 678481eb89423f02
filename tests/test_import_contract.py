"""The seams between packages: no module reaches into another package's private modules.

Each package of ``lifecycle`` (``lifecycle.<a>``) offers what others use through its
``__init__``; its private modules ``lifecycle.<a>._<b>`` are its own. The top-level private
modules (``lifecycle._months``, ``lifecycle._layout``, ...) are the shared kernel that any
package may import. Every module is parsed with `ast` (no import is executed), so imports
inside functions count too.
"""

from __future__ import annotations

import ast
from pathlib import Path

import lifecycle

ROOT = Path(lifecycle.__file__).parent


def _module_name(path: Path) -> tuple[str, ...]:
    parts = path.relative_to(ROOT.parent).with_suffix("").parts
    return parts[:-1] if parts[-1] == "__init__" else parts


def _package_of(path: Path) -> tuple[str, ...]:
    """The dotted parts of the package a module belongs to (relative imports start here)."""
    parts = path.relative_to(ROOT.parent).with_suffix("").parts
    return parts[:-1]


def _imported_modules(node: ast.AST, package: tuple[str, ...]) -> list[str]:
    """Absolute names an import statement refers to (for ``from m import x``: m and m.x)."""
    if isinstance(node, ast.Import):
        return [alias.name for alias in node.names]
    if not isinstance(node, ast.ImportFrom):
        return []
    base = list(package[: len(package) - node.level + 1]) if node.level else []
    module = ".".join(base + ([node.module] if node.module else []))
    return [module] + [f"{module}.{alias.name}" for alias in node.names]


def private_reaches(path: Path, source: str | None = None) -> list[str]:
    """Each import in ``path`` (or in ``source``, read as if it were at ``path``) of
    ``lifecycle.<a>._<b>`` from outside package ``<a>``, as ``module:line: imports name``."""
    own = _module_name(path)
    package = _package_of(path)
    if source is None:
        source = path.read_text(encoding="utf-8")
    found = []
    for node in ast.walk(ast.parse(source, filename=str(path))):
        for name in _imported_modules(node, package):
            parts = name.split(".")
            if (
                len(parts) >= 3
                and parts[0] == "lifecycle"
                and parts[2].startswith("_")
                and not parts[2].startswith("__")
                and tuple(own[:2]) != tuple(parts[:2])
            ):
                found.append(f"{'.'.join(own)}:{node.lineno}: imports {'.'.join(parts[:3])}")
                break
    return found


def test_no_package_imports_another_packages_private_modules():
    offenders = [hit for path in sorted(ROOT.rglob("*.py")) for hit in private_reaches(path)]
    assert not offenders, "route these through the package's __init__:\n" + "\n".join(offenders)


def test_the_check_finds_every_form_of_reaching_in():
    """The check itself catches absolute, relative and in-function imports, and lets a
    package's own private modules, public surfaces and the shared kernel through."""
    probe = ROOT / "cycle" / "_probe.py"  # never written: the source is given
    source = "\n".join(
        [
            "from .._months import parse_month",  # shared kernel: allowed
            "from ._steps import fit_model",  # own package: allowed
            "from ..models import make_model",  # public surface: allowed
            "from ..models._families import make_model",  # line 4: relative
            "import lifecycle.panel._future",  # line 5: absolute
            "def f():",
            "    from lifecycle.spatial._crs import project_premises",  # line 7: in a function
            "    from ..report import _sections_cohorts",  # line 8: module by name
        ]
    )
    assert private_reaches(probe, source) == [
        "lifecycle.cycle._probe:4: imports lifecycle.models._families",
        "lifecycle.cycle._probe:5: imports lifecycle.panel._future",
        "lifecycle.cycle._probe:7: imports lifecycle.spatial._crs",
        "lifecycle.cycle._probe:8: imports lifecycle.report._sections_cohorts",
    ]


# import name → distribution name, where they differ
_DISTRIBUTIONS = {
    "sklearn": "scikit-learn",
    "sksurv": "scikit-survival",
    "dask": "dask",
    "sklift": "scikit-uplift",
}


def test_every_library_imported_at_run_time_is_declared():
    """Each third-party module the package imports (at the top or inside a function) is a
    dependency in pyproject.toml, with a lower bound (the optional ``distributed`` extra for
    dask; the ``bench`` extra for the library `lifecycle bench response` compares with)."""
    import sys
    import tomllib

    project = tomllib.loads((ROOT.parent / "pyproject.toml").read_text())["project"]
    extras = project["optional-dependencies"]
    declared = {}
    for spec in [*project["dependencies"], *extras["distributed"], *extras["bench"]]:
        name = spec.split(">")[0].split("[")[0].split("<")[0].split("=")[0].strip()
        declared[name] = spec
    imported = set()
    for path in ROOT.rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                imported |= {alias.name.split(".")[0] for alias in node.names}
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                imported.add(node.module.split(".")[0])
    third_party = {m for m in imported if m not in sys.stdlib_module_names and m != "lifecycle"}
    missing = sorted(m for m in third_party if _DISTRIBUTIONS.get(m, m) not in declared)
    assert missing == [], f"imported but not declared in pyproject.toml: {missing}"
    unbounded = sorted(m for m in third_party if ">=" not in declared[_DISTRIBUTIONS.get(m, m)])
    assert unbounded == [], f"declared without a lower bound: {unbounded}"
