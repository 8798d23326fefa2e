"""Shared test set-up.

Hypothesis runs derandomized (a fixed seed per test) so CI is reproducible; set
``HYPOTHESIS_PROFILE=long`` for the long fuzzing run (10,000 examples).
"""

from __future__ import annotations

import os

import pytest
from hypothesis import HealthCheck, settings

settings.register_profile(
    "ci", derandomize=True, max_examples=60, deadline=None,
    suppress_health_check=[HealthCheck.too_slow],
)
settings.register_profile(
    "long", derandomize=False, max_examples=10_000, deadline=None,
    suppress_health_check=[HealthCheck.too_slow],
)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci"))


@pytest.fixture
def demo_store(tmp_path):
    """This test's own copy of the demo store, at ``tmp_path/store``."""
    from _harness import copy_demo_store

    return copy_demo_store(tmp_path / "store")
