"""Fixtures of the target-budget tests (helpers in support.py)."""

from __future__ import annotations

import pytest


@pytest.fixture(params=["cortex-m4-O2", "cortex-m0plus-O2"])
def config_name(request) -> str:
    """The two configurations every emulated check runs on."""
    return request.param
