"""Shared test setup: offline cartopy data and the folder of real model output."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import pytest

SHARED = Path(__file__).resolve().parents[1] / ".." / "shared"

# maps draw coastlines from the offline copy, never from the network
os.environ["CARTOPY_DATA_DIR"] = str((SHARED / "data" / "cartopy").resolve())
# a fresh table cache for each test session (command-line runs in subprocesses share
# it), so the tables are integrated anew at least once and the user's cache is untouched
os.environ["GRIDSTAB_CACHE_DIR"] = tempfile.mkdtemp(prefix="gridstab-test-cache-")


@pytest.fixture(scope="session")
def real_data_dir() -> Path:
    """The folder of real model output files (../shared/data/real), read in place."""
    return (SHARED / "data" / "real").resolve()
