"""Shared fixtures."""

from __future__ import annotations

from pathlib import Path

import pytest

SHARED_DATA = Path(__file__).resolve().parents[1].parent / "shared" / "data"


@pytest.fixture(scope="session")
def shared_data() -> Path:
    """Path to ``../shared/data`` beside the checkout; skip the test when it is absent."""
    if not SHARED_DATA.is_dir():
        pytest.skip(f"benchmark data not found at {SHARED_DATA} (../shared/data beside checkout)")
    return SHARED_DATA
