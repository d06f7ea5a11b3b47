"""Fixtures of the store tests."""

from __future__ import annotations

import pytest
from store_helpers import FIXED_CLOCK

from flakebook.store import Project


@pytest.fixture
def project(tmp_path):
    """A new read-write project with a fixed clock (closed after the test)."""
    p = Project.create(tmp_path / "campaign.flakebook", clock=lambda: FIXED_CLOCK, user="dana")
    yield p
    p.close()
