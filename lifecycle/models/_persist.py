"""Saving and loading fitted models: joblib files beside a manifest of SHA-256 hashes.

Loading a joblib file runs code, so a file is loaded only when its hash matches the manifest
written with it; anything else is refused with `ModelFileError`.
"""

from __future__ import annotations

import hashlib
import json
import platform
from importlib import metadata
from pathlib import Path

import joblib
import pandas as pd

from .._files import write_atomic, write_csv_atomic, write_text_atomic
from ..errors import ModelFileError
from ._base import HazardModel

MANIFEST = "manifest.json"
MODEL_FILE = "model.joblib"
# The distribution is published as "lifecycle-hazards" ("lifecycle" on the package index is
# an unrelated project); the manifest records its version under the import name.
DISTRIBUTION = "lifecycle-hazards"
_LIBRARIES = (
    "lifecycle",
    "numpy",
    "pandas",
    "scikit-learn",
    "scikit-survival",
    "lifelines",
    "joblib",
)


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for name in _LIBRARIES:
        try:
            out[name] = metadata.version(DISTRIBUTION if name == "lifecycle" else name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def save_model(
    model: HazardModel,
    folder: str | Path,
    *,
    training_window: tuple[str, str],
    family: str,
    extra: dict[str, object] | None = None,
) -> Path:
    """Write a fitted model into ``folder``: ``model.joblib``, tables the family offers
    (``coefficients.csv`` for the Cox family), then ``manifest.json`` last.

    The manifest records the SHA-256 of every file, the library versions, the family, the
    causes, the features and the training window (first and last month of the panel).
    Every file is written atomically; the manifest is written after the files it vouches for,
    so an interrupted save leaves a folder that `load_model` refuses.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    files = {MODEL_FILE: write_atomic(folder / MODEL_FILE, lambda tmp: joblib.dump(model, tmp))}
    coefficients = getattr(model, "coefficients_", None)
    if isinstance(coefficients, pd.DataFrame):
        files["coefficients.csv"] = write_csv_atomic(folder / "coefficients.csv", coefficients)
    manifest = {
        "family": family,
        "class": f"{type(model).__module__}.{type(model).__qualname__}",
        "causes": list(model.causes_),
        "features": list(model.features_),
        "training_window": {"first_month": training_window[0], "last_month": training_window[1]},
        "hyperparameters": {k: repr(v) for k, v in sorted(model.get_params().items())},
        "versions": _versions(),
        "files": {name: _sha256(path) for name, path in sorted(files.items())},
        **(extra or {}),
    }
    write_text_atomic(folder / MANIFEST, json.dumps(manifest, indent=2, sort_keys=True) + "\n")
    return folder


def read_manifest(folder: str | Path) -> dict:
    """The manifest of a saved model folder, or `ModelFileError`."""
    path = Path(folder) / MANIFEST
    if not path.is_file():
        raise ModelFileError(f"{folder} holds no {MANIFEST}; it is not a saved lifecycle model")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise ModelFileError(f"{path} is not valid JSON: {exc}") from None


def load_model(folder: str | Path) -> HazardModel:
    """Load a model saved by `save_model`, after checking every file's SHA-256.

    Raises `ModelFileError` if the manifest is missing, a file is missing, or a hash does not
    match (the file was changed or replaced after saving): such a file is never unpickled.
    """
    folder = Path(folder)
    manifest = read_manifest(folder)
    for name, expected in manifest.get("files", {}).items():
        path = folder / name
        if not path.is_file():
            raise ModelFileError(f"{path} is listed in the manifest but missing")
        actual = _sha256(path)
        if actual != expected:
            raise ModelFileError(
                f"{path} has SHA-256 {actual[:16]}… but the manifest says {expected[:16]}…; "
                "it was changed after saving and will not be loaded (a joblib file runs code "
                "when loaded). Refit the model or restore the original file"
            )
    if MODEL_FILE not in manifest.get("files", {}):
        raise ModelFileError(f"the manifest in {folder} does not list {MODEL_FILE}")
    model = joblib.load(folder / MODEL_FILE)
    if not isinstance(model, HazardModel):
        raise ModelFileError(f"{folder / MODEL_FILE} does not hold a lifecycle model")
    return model
