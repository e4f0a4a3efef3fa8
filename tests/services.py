"""Tests that need a service of the machine (a PostgreSQL server's binaries, Chromium).

On a developer's machine without them such a test is skipped with a one-line reason; under
NIGHTBENCH_REQUIRE_SERVICES=1 (set by .ci/run, which installs them) it fails instead, so a CI
that lost a package cannot pass by skipping.
"""

from __future__ import annotations

import os

import pytest

REQUIRE_VAR = "NIGHTBENCH_REQUIRE_SERVICES"


def services_required() -> bool:
    return os.environ.get(REQUIRE_VAR, "") not in ("", "0")


def missing_service(reason: str) -> None:
    """Skip (or, when services are required, fail) with ``reason``."""
    if services_required():
        pytest.fail(f"{reason} ({REQUIRE_VAR} is set: this test must run)", pytrace=False)
    pytest.skip(reason)
