"""Shared pytest fixtures."""

from __future__ import annotations

import os
from pathlib import Path

import pytest


def _shared_root() -> Path:
    env = os.environ.get("IONBAL_SHARED")
    if env:
        return Path(env)
    # the published source data live beside the repository, in ../shared
    return Path(__file__).resolve().parents[1].parent / "shared"


@pytest.fixture(scope="session")
def shared_dir() -> Path:
    """The shared folder of published data (``../shared`` or $IONBAL_SHARED); skip if absent."""
    root = _shared_root()
    if not (root / "README.md").is_file() and not (root / "data").is_dir():
        pytest.skip(f"published reference data not found at {root} (set IONBAL_SHARED to its location)")
    return root
