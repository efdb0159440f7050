"""Shared fixtures: seeded generators and paths to the bundled and shared data."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
SHARED = ROOT.parent / "shared"
GAULT_CSV = SHARED / "external_data" / "gault_ztf" / "Gault_ZTF.csv"
BAD_DIR = Path(__file__).parent / "data" / "bad"
DEMO_DIR = ROOT / "catalogs_demo"


@pytest.fixture
def rng():
    """A seeded generator; tests never touch global random state."""
    return np.random.default_rng(20261201)


@pytest.fixture
def gault_csv():
    """Real sparse ZTF photometry of (6478) Gault (see shared/external_data/gault_ztf/README.md)."""
    if not GAULT_CSV.exists():
        pytest.skip(f"shared external data not found at {GAULT_CSV}")
    return GAULT_CSV
