"""Fakes for region tests: a slide rendered from a synthetic layout, and its true tissue mask.

The slide reader and tissue masker are separate parts of tilewright; these fakes follow only the
documented interfaces (``slide.at_mpp(mpp)`` -> view with ``.shape``, ``.mpp``, ``.scale``,
``.read(y, x, h, w)``; a mask with ``.fractions(yx, h, w, mpp)``) so that region tests stand alone.
"""

from __future__ import annotations

import numpy as np
import pytest

from tilewright.tissue.raster import box_fractions, summed_area_table


class FakeView:
    def __init__(self, layout, mpp, level0_mpp):
        self.layout = layout
        self.mpp = mpp
        self.scale = mpp / level0_mpp
        self.shape = layout.shape_at(mpp)
        self.reads = []

    def read(self, y, x, h, w):
        self.reads.append((y, x, h, w))
        out = np.full((h, w, 3), 255, dtype=np.uint8)  # white past the slide edge
        y1, x1 = min(y + h, self.shape[0]), min(x + w, self.shape[1])
        if y1 > y and x1 > x:
            out[: y1 - y, : x1 - x] = self.layout.render(self.mpp, y, x, y1 - y, x1 - x)
        return out


class FakeSlide:
    def __init__(self, layout, level0_mpp=0.25, path="fake-slide.tif"):
        self.layout = layout
        self.mpp = level0_mpp
        self.path = path
        self.dimensions = layout.shape_at(level0_mpp)
        self.views = []

    def at_mpp(self, mpp, *, tolerance=0.05):
        view = FakeView(self.layout, mpp, self.mpp)
        self.views.append(view)
        return view

    def thumbnail(self, mpp=8.0):
        h, w = self.layout.shape_at(mpp)
        return self.layout.render(mpp, 0, 0, h, w)


class TruthMask:
    """Tissue selection from the layout's true tissue at 8 µm/px (exact box coverage)."""

    def __init__(self, layout, mpp=8.0):
        self.mpp = mpp
        self.array = layout.tissue_truth(mpp)
        self._sat = summed_area_table(self.array)

    def fractions(self, yx, h, w, mpp):
        return box_fractions(self._sat, self.mpp, yx, h, w, mpp)


@pytest.fixture(scope="session")
def fake_slide_cls():
    """The FakeSlide class (a fixture, so tests need not import this conftest by name)."""
    return FakeSlide


@pytest.fixture(scope="session")
def truth_mask_cls():
    """The TruthMask class."""
    return TruthMask
