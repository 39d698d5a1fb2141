"""Shared fixtures."""

from __future__ import annotations

import pytest

from helpers import READ2009
from tovforge import eos


@pytest.fixture(scope="session")
def sly():
    return eos.make("piecewise-polytrope", **READ2009["SLy"])
