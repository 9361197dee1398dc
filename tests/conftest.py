"""Shared test settings: a deterministic hypothesis profile, the `slow` marker, the reference gate."""

from __future__ import annotations

import os

import pytest
from hypothesis import HealthCheck, settings

settings.register_profile(
    "ci",
    max_examples=60,
    derandomize=True,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow],
)
settings.load_profile("ci")


def pytest_collection_modifyitems(items):
    # Whole runs on synthetic samples are the `slow` tests (pyproject.toml markers): the
    # oldest-versions step of .ci/run leaves them out (-m "not slow") to stay in time.
    for item in items:
        if "end_to_end" in item.path.parts:
            item.add_marker(pytest.mark.slow)


def require_reference(module_name: str):
    """Import a reference library, or skip — unless CI demands the cross-checks run.

    With INCLINATION_REQUIRE_REFERENCE=1 (set by .ci/run) a missing library is a
    failure, so the cross-checks can never silently stop running.
    """
    if os.environ.get("INCLINATION_REQUIRE_REFERENCE") == "1":
        import importlib

        return importlib.import_module(module_name)
    return pytest.importorskip(module_name)
