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


@pytest.fixture(scope="module")
def confirm_drawn():
    """``get(seed)``: a draw of the confirmation family (tests/confirm_family.py) and its tissue
    mask at the draw's µm/px, each made once per test module."""
    from confirm_family import draw
    from tilewright.tissue.mask import tissue_mask

    cache = {}

    def get(seed):
        if seed not in cache:
            d = draw(seed)
            cache[seed] = (d, tissue_mask(d.rgb, mpp=d.mpp))
        return cache[seed]
    return get
