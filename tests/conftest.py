from __future__ import annotations

import os
import sys
from pathlib import Path

import pytest
from hypothesis import settings

# CI replays the same generated examples every run (explore locally with random seeds).
settings.register_profile("ci", derandomize=True, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")

sys.path.insert(0, str(Path(__file__).parent))

import nbeda  # noqa: E402,F401  (registers the accessor)
from nbeda.demo import greenhouse  # noqa: E402

DATA = Path(__file__).parent / "data"


@pytest.fixture(scope="session")
def demo_frame():
    """The invented greenhouse demo data (5,000 rows, seed 0)."""
    return greenhouse()
