"""The work folder's saved steps: written only after a run succeeded, checked before reuse.

A saved step is a folder ``<work>/<kind>/<kind>-<month>-<data fingerprint>-<settings hash>``,
written under a temporary name and renamed into place whole. Saved models are verified as
`lifecycle.models.load_model` does (signed manifest, hashes, library versions); saved backtest
tables carry a signed manifest of their SHA-256 too (`save_frames`). An entry that fails
verification is never used: the reason is logged and the step is recomputed.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import shutil
from collections.abc import Mapping
from pathlib import Path

import pandas as pd

from .._files import write_parquet_atomic, write_text_atomic
from .._months import parse_month
from ..errors import ModelFileError, UsageError

log = logging.getLogger(__name__)

_MANIFEST = "manifest.json"
_SIGNATURE = "manifest.sig"


def entry_name(kind: str, month: str, fingerprint: str, settings_hash: str) -> str:
    return f"{kind}-{month}-{fingerprint[:16]}-{settings_hash[:12]}"


def candidates(
    folder: Path, kind: str, month: str, fingerprint: str, settings_hash: str, every: int
) -> list[Path]:
    """Where a saved step may be taken from: first the one saved for exactly these inputs,
    then (when the step is redone only every ``every`` months) those saved in the months
    before with the same settings, newest first."""
    out = [folder / entry_name(kind, month, fingerprint, settings_hash)]
    if every > 1 and folder.is_dir():
        now = parse_month(month)
        older = []
        for path in folder.glob(f"{kind}-*-{settings_hash[:12]}"):
            parts = path.name.removeprefix(f"{kind}-").split("-")
            try:
                saved = parse_month("-".join(parts[:2]))
            except UsageError:
                continue
            if now - every < saved < now:
                older.append((saved, path))
        out += [path for _, path in sorted(older, reverse=True)]
    return out


def save_entry(dest: Path, write) -> None:
    """Call ``write(tmp_folder)`` and rename the folder to ``dest`` (replacing an older one)."""
    tmp = dest.parent / f".{dest.name}.{os.getpid()}.part"
    shutil.rmtree(tmp, ignore_errors=True)
    tmp.mkdir(parents=True)
    try:
        write(tmp)
        if dest.exists():
            shutil.rmtree(dest)
        os.replace(tmp, dest)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def save_frames(folder: Path, frames: Mapping[str, pd.DataFrame]) -> None:
    """Write each frame as ``<name>.parquet`` and a signed manifest of their SHA-256."""
    from ..models import sign, signing_key

    hashes = {}
    for name, frame in frames.items():
        path = write_parquet_atomic(folder / f"{name}.parquet", frame)
        hashes[path.name] = _sha256(path)
    text = json.dumps({"files": hashes}, sort_keys=True)
    write_text_atomic(folder / _MANIFEST, text)
    write_text_atomic(folder / _SIGNATURE, sign(text.encode(), signing_key(near=[folder])))


def load_frames(folder: Path, names: tuple[str, ...]) -> dict[str, pd.DataFrame] | None:
    """The frames saved by `save_frames`, or None (logged) when the entry fails verification."""
    from ..models import signature_matches, signing_key

    if not folder.is_dir():
        return None
    try:
        data = (folder / _MANIFEST).read_bytes()
        signature = (folder / _SIGNATURE).read_text(encoding="ascii")
        if not signature_matches(data, signature, signing_key(near=[folder])):
            raise ModelFileError("the signature does not match")
        files = json.loads(data)["files"]
        for name in names:
            path = folder / f"{name}.parquet"
            if files.get(path.name) != _sha256(path):
                raise ModelFileError(f"{path.name} was changed after saving")
        return {name: pd.read_parquet(folder / f"{name}.parquet") for name in names}
    except (OSError, ValueError, KeyError, TypeError, AttributeError, ModelFileError) as exc:
        log.warning("not reusing %s: it failed verification (%s); recomputing", folder, exc)
        return None


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()
