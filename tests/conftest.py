"""Shared fixtures (keep small and additive)."""
from __future__ import annotations

from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="session")
def repo_root() -> Path:
    """The repository root."""
    return REPO


@pytest.fixture(scope="session")
def demo_dir() -> Path:
    """The bundled demo data folder."""
    return REPO / "demo_data"


@pytest.fixture(scope="session")
def output_dir() -> Path:
    """Folder for screenshots and other artefacts of test runs (git-ignored)."""
    out = REPO / "test-output"
    out.mkdir(exist_ok=True)
    return out
