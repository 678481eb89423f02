"""Saving and loading fitted models: pickle files beside a signed manifest of SHA-256 hashes.

Loading a pickle file runs code, so a file is loaded only when the manifest's signature
(HMAC-SHA256 under a key kept outside the model's folder, `lifecycle.models._signing`) holds
and every file's hash matches the manifest; anything else is refused with `ModelFileError`
before a byte is unpickled. The libraries the model was saved with are compared too: a
different major version of numpy, pandas, scikit-learn, scikit-survival or lifelines is
refused, a different minor version is logged as a warning. Unpickling itself may construct
only the classes a model holds (`lifecycle.models._unpickle`).
"""

from __future__ import annotations

import hashlib
import json
import logging
import pickle
import platform
import re
from importlib import metadata
from pathlib import Path

import pandas as pd

from .._files import write_atomic, write_csv_atomic, write_text_atomic
from ..errors import ModelFileError
from ._base import HazardModel
from ._signing import sign, signature_matches, signing_key
from ._unpickle import restricted_load

log = logging.getLogger(__name__)

MANIFEST = "manifest.json"
SIGNATURE = "manifest.sig"
MODEL_FILE = "model.pickle"
#: The model file format this version writes and reads. Format 2: ``model.pickle`` written by
#: the standard library's pickle, and the covariate encoder of every family is
#: `CovariateDesign` on scikit-learn's transformers (format 1, the manifests without a
#: ``format`` key: ``model.joblib`` by joblib, hand-written encoders, the library's forests).
MODEL_FORMAT = 2
# The distribution is published as "lifecycle-hazards" ("lifecycle" on the package index is
# an unrelated project); the manifest records its version under the import name.
DISTRIBUTION = "lifecycle-hazards"
#: Libraries whose major version must match on load (pickled objects change across majors).
CHECKED_LIBRARIES = ("numpy", "pandas", "scikit-learn", "scikit-survival", "lifelines")
_REQUIRED = {"family": str, "class": str, "causes": list, "features": list, "versions": dict,
             "files": dict}  # fmt: skip
_HEX64 = re.compile(r"[0-9a-f]{64}")
_LIBRARIES = (
    "lifecycle",
    "numpy",
    "pandas",
    "scikit-learn",
    "scikit-survival",
    "lifelines",
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
    """Write a fitted model into ``folder``: ``model.pickle``, tables the family offers
    (``coefficients.csv`` for the Cox family), then ``manifest.json`` last.

    The manifest records the SHA-256 of every file, the library versions, the family, the
    causes, the features and the training window (first and last month of the panel); it is
    signed into ``manifest.sig`` (HMAC-SHA256, `lifecycle.models._signing`). Every file is
    written atomically; the manifest and then its signature are written after the files they
    vouch for, so an interrupted save leaves a folder that `load_model` refuses.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    files = {MODEL_FILE: write_atomic(folder / MODEL_FILE, lambda tmp: _dump(model, tmp))}
    coefficients = getattr(model, "coefficients_", None)
    if isinstance(coefficients, pd.DataFrame):
        files["coefficients.csv"] = write_csv_atomic(folder / "coefficients.csv", coefficients)
    manifest = {
        "format": MODEL_FORMAT,
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
    text = json.dumps(manifest, indent=2, sort_keys=True) + "\n"
    signature = sign(text.encode("utf-8"), signing_key(near=[folder]))
    write_text_atomic(folder / MANIFEST, text)
    write_text_atomic(folder / SIGNATURE, signature + "\n")
    return folder


def _dump(model: HazardModel, path: Path) -> None:
    with open(path, "wb") as handle:
        pickle.dump(model, handle, protocol=pickle.HIGHEST_PROTOCOL)


def read_manifest(folder: str | Path) -> dict:
    """The manifest of a saved model folder, checked for shape (not signature), or
    `ModelFileError`."""
    path = Path(folder) / MANIFEST
    if not path.is_file():
        raise ModelFileError(f"{folder} holds no {MANIFEST}; it is not a saved lifecycle model")
    return _parse_manifest(path.read_bytes(), path)


def _parse_manifest(data: bytes, path: Path) -> dict:
    try:
        manifest = json.loads(data.decode("utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise ModelFileError(f"{path} is not valid JSON: {exc}") from None
    if not isinstance(manifest, dict):
        raise ModelFileError(
            f"{path} holds a JSON {type(manifest).__name__}, not an object of settings; "
            "it was not written by lifecycle. Refit the model"
        )
    for key, kind in _REQUIRED.items():
        if key not in manifest:
            raise ModelFileError(f"{path} lacks the key {key!r}; refit the model")
        if not isinstance(manifest[key], kind):
            raise ModelFileError(
                f"{path}: {key!r} is a {type(manifest[key]).__name__} but should be a "
                f"{kind.__name__}; refit the model"
            )
    files = manifest["files"]
    bad = [
        name for name, digest in files.items()
        if not isinstance(digest, str) or not _HEX64.fullmatch(digest)
        or Path(name).name != name or name.startswith(".")
    ]  # fmt: skip
    if bad:
        raise ModelFileError(
            f"{path}: files {bad} are not plain file names with a SHA-256 hash; refit the model"
        )
    if MODEL_FILE not in files:
        raise ModelFileError(f"{path} does not list {MODEL_FILE}")
    return manifest


def verify_model_folder(folder: str | Path) -> dict:
    """Check a saved model folder without loading it: the manifest's shape and signature, every
    file's SHA-256 and the library versions. Returns the manifest, or raises `ModelFileError`."""
    folder = Path(folder)
    path = folder / MANIFEST
    if not path.is_file():
        raise ModelFileError(f"{folder} holds no {MANIFEST}; it is not a saved lifecycle model")
    data = path.read_bytes()
    manifest = _parse_manifest(data, path)
    _check_format(manifest, path)
    sig = folder / SIGNATURE
    if not sig.is_file():
        raise ModelFileError(
            f"{folder} has no {SIGNATURE}: the manifest is unsigned (saved by an older version, "
            "or tampered with) and the model will not be loaded (a pickle file runs code when "
            "loaded). Refit the model"
        )
    try:
        signature = sig.read_text(encoding="ascii")
    except UnicodeDecodeError:
        signature = ""
    if not signature_matches(data, signature, signing_key(near=[folder])):
        raise ModelFileError(
            f"the signature of {path} does not match: the manifest was changed after saving, or "
            "it was signed with another key (LIFECYCLE_SIGNING_KEY / LIFECYCLE_KEY_FILE). The "
            "model will not be loaded (a pickle file runs code when loaded). Refit the model"
        )
    for name, expected in manifest["files"].items():
        file = folder / name
        if not file.is_file():
            raise ModelFileError(f"{file} is listed in the manifest but missing")
        actual = _sha256(file)
        if actual != expected:
            raise ModelFileError(
                f"{file} has SHA-256 {actual[:16]}… but the manifest says {expected[:16]}…; "
                "it was changed after saving and will not be loaded (a pickle file runs code "
                "when loaded). Refit the model or restore the original file"
            )
    _compare_versions(manifest["versions"], path)
    return manifest


def _check_format(manifest: dict, path: Path) -> None:
    """`ModelFileError` unless the model was saved in this version's `MODEL_FORMAT`."""
    saved = manifest.get("format", 1)
    if saved != MODEL_FORMAT:
        raise ModelFileError(
            f"{path} was saved in model file format {saved!r}, but this version of lifecycle "
            f"reads format {MODEL_FORMAT} only (the covariate encoding changed); the model was "
            "not loaded. Refit the model (lifecycle fit, or lifecycle run)"
        )


def _compare_versions(saved: dict, path: Path) -> None:
    now = _versions()
    for name in CHECKED_LIBRARIES:
        then, current = str(saved.get(name, "")), now.get(name, "")
        if then == current:
            continue
        major_then, minor_then = _major_minor(then)
        major_now, minor_now = _major_minor(current)
        if major_then is None or major_then != major_now:
            raise ModelFileError(
                f"{path} was saved with {name} {then or 'unknown'} but {current} is installed; "
                "a model pickled under another major version is not loaded. Refit the model, "
                f"or install {name} {then}"
            )
        if minor_then != minor_now:
            log.warning(
                "model %s was saved with %s %s; %s is installed (same major version: loading, "
                "but refit when you can)", path.parent, name, then, current,
            )  # fmt: skip


def _major_minor(version: str) -> tuple[int | None, int | None]:
    match = re.match(r"(\d+)(?:\.(\d+))?", version)
    if not match:
        return None, None
    return int(match.group(1)), int(match.group(2) or 0)


def load_model(folder: str | Path, *, trusted_modules: tuple[str, ...] = ()) -> HazardModel:
    """Load a model saved by `save_model`, after `verify_model_folder`.

    Unpickling constructs only classes of lifecycle's models and the libraries they use
    (`lifecycle.models._unpickle`); a family of your own needs its module named in
    ``trusted_modules`` (e.g. ``("mypackage.models",)``).

    Raises `ModelFileError` if the manifest is missing, malformed or its signature does not
    hold, a file is missing, a hash does not match (the file was changed or replaced after
    saving) or a library's major version differs: such a file is never unpickled.
    """
    folder = Path(folder)
    verify_model_folder(folder)
    model = restricted_load(folder / MODEL_FILE, tuple(trusted_modules))
    if not isinstance(model, HazardModel):
        raise ModelFileError(f"{folder / MODEL_FILE} does not hold a lifecycle model")
    return model
