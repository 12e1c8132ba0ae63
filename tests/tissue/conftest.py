"""Shared fixtures of the tissue tests (fakes live in tissue_fakes.py)."""

import pytest

from tilewright.demo.synth import random_layout
from tissue_fakes import FakeSlide


@pytest.fixture(scope="session")
def he_layout():
    """6 x 8 mm slide, three islands (the last one pale), three pens (blue, green, black)."""
    return random_layout(6000, 8000, seed=2, n_islands=3, pens=3, faint=True)


@pytest.fixture(scope="session")
def he_slide(he_layout):
    return FakeSlide(he_layout, 0.5, direct=True)
