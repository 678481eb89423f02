"""Shared test settings: a fixed hypothesis profile in CI."""

from __future__ import annotations

import os

from hypothesis import settings

# In CI (the CI environment variable is set, as .ci/run does) property tests draw the same
# examples on every run (derandomize) and keep no example database, so that a failure there is
# reproducible and a pass is not luck; locally they explore new examples each run.
settings.register_profile("ci", derandomize=True, database=None, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")
