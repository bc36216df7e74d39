"""Shared test fixtures. Keep per-module fixtures in their own test files."""
from __future__ import annotations

import os
from pathlib import Path

import pytest

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("GLOG_minloglevel", "2")

REPO = Path(__file__).resolve().parents[1]
SHARED = REPO.parent / "shared"
LUND_DIR = SHARED / "reference" / "lund2013" / "img"


@pytest.fixture(scope="session")
def lund_dir() -> Path:
    """The hand-coded recordings of Andersson et al. (2017), read from ../shared/."""
    if not LUND_DIR.is_dir() or not any(LUND_DIR.glob("*.mat")):
        pytest.skip(f"reference data absent: expected the Andersson et al. (2017) recordings in {LUND_DIR}")
    return LUND_DIR


@pytest.fixture(scope="session")
def repo_root() -> Path:
    return REPO
