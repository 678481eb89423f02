"""The secret key that signs model manifests, and the signature itself.

A saved model's ``manifest.json`` lists the SHA-256 of every file; ``manifest.sig`` holds
HMAC-SHA256(key, bytes of manifest.json) in hex. Whoever can replace the model file can also
rewrite the hashes, but not the signature without the key, so the key is kept away from the
model: it comes from, in this order,

1. ``LIFECYCLE_SIGNING_KEY``: the key itself (at least 32 characters), e.g. from a secret store;
2. ``LIFECYCLE_KEY_FILE``: a file holding it;
3. ``$XDG_CONFIG_HOME/lifecycle/signing.key`` (default ``~/.config/lifecycle/signing.key``).

A key file (2 or 3) is created on first use with 64 random hex characters, readable and
writable by its owner only (0600, in a 0700 folder). A key file that others may read or write
(any group or other permission bit), or that another user owns, is refused, and so is one
inside the folders a run reads or writes (project, data, model, work and reports folders):
keeping the key beside the model would defeat the signature. Refusals raise `UsageError`.
Models saved on another machine load there only with the same key (copy the key file, or set
``LIFECYCLE_SIGNING_KEY`` on both).
"""

from __future__ import annotations

import hashlib
import hmac
import logging
import os
import secrets
import stat
from collections.abc import Iterable
from pathlib import Path

from ..errors import UsageError

log = logging.getLogger(__name__)

KEY_ENV = "LIFECYCLE_SIGNING_KEY"
KEY_FILE_ENV = "LIFECYCLE_KEY_FILE"
_MIN_KEY = 32
_guarded: list[Path] = []  # folders of the current command (see `keep_key_outside`)


def default_key_file() -> Path:
    """``$XDG_CONFIG_HOME/lifecycle/signing.key`` (``~/.config`` without XDG_CONFIG_HOME)."""
    base = os.environ.get("XDG_CONFIG_HOME") or str(Path.home() / ".config")
    return Path(base) / "lifecycle" / "signing.key"


def key_file() -> Path | None:
    """The key file in use (None when the key comes from ``LIFECYCLE_SIGNING_KEY``)."""
    if os.environ.get(KEY_ENV):
        return None
    given = os.environ.get(KEY_FILE_ENV)
    return Path(given).expanduser() if given else default_key_file()


def keep_key_outside(folders: Iterable[str | Path | None]) -> None:
    """Refuse (`UsageError`) a key file inside any of ``folders``; they are remembered for the
    rest of the process so that every later key look-up checks them too."""
    for folder in folders:
        if folder is not None:
            path = Path(folder).resolve()
            if path not in _guarded:
                _guarded.append(path)
    path = key_file()
    if path is not None:
        _check_location(path, _guarded)


def signing_key(near: Iterable[str | Path] = ()) -> bytes:
    """The signing key (created on first use at the key file); ``near``: folders the key file
    must not be inside, besides those given to `keep_key_outside`."""
    text = os.environ.get(KEY_ENV)
    if text:
        if len(text) < _MIN_KEY:
            raise UsageError(
                f"{KEY_ENV} holds {len(text)} characters; use a random key of at least "
                f"{_MIN_KEY}, e.g. the output of `python -c 'import secrets; "
                "print(secrets.token_hex(32))'`"
            )
        return text.encode()
    path = key_file() or default_key_file()
    _check_location(path, [*_guarded, *(Path(p).resolve() for p in near)])
    if not path.exists():
        _create(path)
    info = path.stat()
    if info.st_mode & 0o077 or (hasattr(os, "getuid") and info.st_uid != os.getuid()):
        raise UsageError(
            f"the signing key file {path} may be read or written by others (mode "
            f"{stat.filemode(info.st_mode)}); run `chmod 600 {path}` as its owner"
        )
    key = path.read_bytes().strip()
    if len(key) < _MIN_KEY:
        raise UsageError(
            f"the signing key file {path} holds {len(key)} bytes; it needs at least {_MIN_KEY} "
            "random characters (delete it to have a new one made)"
        )
    return key


def sign(data: bytes, key: bytes) -> str:
    """HMAC-SHA256 of ``data`` under ``key``, as hex."""
    return hmac.new(key, data, hashlib.sha256).hexdigest()


def signature_matches(data: bytes, signature: str, key: bytes) -> bool:
    """Whether ``signature`` is `sign` (data, key), compared in constant time."""
    return hmac.compare_digest(sign(data, key), signature.strip())


def _check_location(path: Path, folders: Iterable[Path]) -> None:
    where = path.resolve()
    config_home = default_key_file().parent.parent.resolve()
    for folder in folders:
        # a project kept in the home folder holds ~/.config too: a key there is still apart
        apart = config_home.is_relative_to(folder) and where.is_relative_to(config_home)
        if where.is_relative_to(folder) and not apart:
            raise UsageError(
                f"the signing key file {path} is inside {folder}, a folder the run reads or "
                f"writes; keep it elsewhere (set {KEY_FILE_ENV} or {KEY_ENV})"
            )


def _create(path: Path) -> None:
    path.parent.mkdir(mode=0o700, parents=True, exist_ok=True)
    try:
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    except FileExistsError:  # made by a concurrent process meanwhile
        return
    with os.fdopen(fd, "w") as handle:
        handle.write(secrets.token_hex(32) + "\n")
    log.warning("created the model signing key %s (owner-only); keep it secret", path)
