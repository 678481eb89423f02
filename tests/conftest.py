"""Test-wide settings: the model signing key lives in a temporary folder outside the project.

The key location is set through the environment before any fixture runs (session scope), so no
test can create or read a key in the real ``~/.config/lifecycle``; the session also checks at
its end that the real key file was not created by a test.
"""

from __future__ import annotations

import pytest

from lifecycle.models._signing import KEY_ENV, KEY_FILE_ENV, default_key_file


@pytest.fixture(scope="session", autouse=True)
def _signing_key_outside_home(tmp_path_factory):
    real = default_key_file()
    existed = real.exists()
    folder = tmp_path_factory.mktemp("signing-key")  # under the system temp, not the repository
    with pytest.MonkeyPatch.context() as patch:
        patch.delenv(KEY_ENV, raising=False)
        patch.setenv(KEY_FILE_ENV, str(folder / "signing.key"))
        yield folder / "signing.key"
    assert existed or not real.exists(), f"a test created the real signing key {real}"
