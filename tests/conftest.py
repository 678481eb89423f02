"""Test-wide settings: a fixed hypothesis profile in CI, and the model signing key in a temporary
folder outside the project.

The key location is set through the environment before any fixture runs (session scope), so no
test can create or read a key in the real ``~/.config/lifecycle``; the session also checks at
its end that the real key file was not created by a test.
"""

from __future__ import annotations

import os

import pytest
from hypothesis import settings

from lifecycle.models._signing import KEY_ENV, KEY_FILE_ENV, default_key_file

# In CI (the CI environment variable is set, as .ci/run does) property tests draw the same
# examples on every run (derandomize) and keep no example database, so that a failure there is
# reproducible and a pass is not luck; locally they explore new examples each run.
settings.register_profile("ci", derandomize=True, database=None, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")


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
