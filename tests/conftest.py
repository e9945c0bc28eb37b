"""Shared test fixtures: a seeded random generator and paths from this file."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

REPO = Path(__file__).resolve().parent.parent
FIXTURES = REPO / "fixtures"


@pytest.fixture
def rng() -> np.random.Generator:
    """A seeded generator so every random test input is reproducible."""
    return np.random.default_rng(20261202)
