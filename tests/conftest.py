"""Shared test settings."""

import os

from hypothesis import settings

# CI runs the fuzz and property tests with a fixed budget; a longer local run can raise it with
# HYPOTHESIS_PROFILE=long.
settings.register_profile("ci", max_examples=200, deadline=None)
settings.register_profile("long", max_examples=5000, deadline=None)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci"))
