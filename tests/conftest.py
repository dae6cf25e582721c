from __future__ import annotations

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))

import nbeda  # noqa: E402,F401  (registers the accessor)
from nbeda.demo import greenhouse  # noqa: E402

DATA = Path(__file__).parent / "data"


@pytest.fixture(scope="session")
def demo_frame():
    """The invented greenhouse demo data (5,000 rows, seed 0)."""
    return greenhouse()
