"""Test doubles of the slide, view and region-map interfaces the tissue code relies on.

The slide reader and RegionMap are written elsewhere; these fakes implement only the documented
interface (``mpp``, ``dimensions``, ``thumbnail(mpp=)``, ``path``; ``shape``/``mpp``/``scale``;
``fractions(keep, yx, h, w, mpp)``) on top of the synthetic ground-truth generator.
"""

from __future__ import annotations

import numpy as np
from tilewright.demo.synth import random_layout


class FakeSlide:
    """A scan of a synthetic layout at ``mpp`` µm/px.

    ``thumbnail`` renders level 0 in blocks and area-averages it (OpenCV INTER_AREA), like a
    reader downsampling a real scan, unless ``direct=True`` (render straight at the thumbnail
    resolution, fast for large layouts).
    """

    def __init__(self, layout, mpp: float, *, direct: bool = False, path: str = "fake/slide-a.tif"):
        self.layout = layout
        self.mpp = float(mpp)
        self.dimensions = layout.shape_at(mpp)
        self.path = path
        self.direct = direct

    def thumbnail(self, mpp: float = 8.0) -> np.ndarray:
        import cv2

        h, w = self.dimensions
        th = max(1, round(h * self.mpp / mpp))
        tw = max(1, round(w * self.mpp / mpp))
        if self.direct:
            return self.layout.render(mpp, 0, 0, th, tw)
        factor = int(round(mpp / self.mpp))
        assert abs(factor * self.mpp - mpp) < 1e-9, "fake slide downsamples by integer factors only"
        out = np.zeros((th, tw, 3), np.uint8)
        block = 64  # thumbnail px per block
        for ty in range(0, th, block):
            for tx in range(0, tw, block):
                bh, bw = min(block, th - ty), min(block, tw - tx)
                big = self.layout.render(self.mpp, ty * factor, tx * factor, bh * factor, bw * factor)
                out[ty:ty + bh, tx:tx + bw] = cv2.resize(big, (bw, bh), interpolation=cv2.INTER_AREA)
        return out


class FakeView:
    """A resampled view: only the attributes plan_tiles reads."""

    def __init__(self, shape, mpp: float, scale: float = 1.0):
        self.shape = tuple(shape)
        self.mpp = float(mpp)
        self.scale = float(scale)


class FakeRegions:
    """Region map from a labelled raster at ``mpp``: fraction of a box inside the ``keep`` labels.

    Computed by brute force (upsample by an integer factor, count pixels), independent of the
    summed-area table the tissue mask uses.
    """

    def __init__(self, labels: np.ndarray, mpp: float, classes: dict):
        self.labels = labels
        self.mpp = mpp
        self.classes = classes  # name -> label value
        self.calls = []

    def fractions(self, keep, yx, h, w, mpp):
        self.calls.append((tuple(keep), len(yx), h, w, mpp))
        values = [self.classes[k] for k in keep]
        factor = int(round(self.mpp / mpp))
        inside = np.isin(self.labels, values).repeat(factor, 0).repeat(factor, 1)
        out = np.empty(len(yx), np.float32)
        for i, (y, x) in enumerate(np.asarray(yx)):
            out[i] = inside[y:y + h, x:x + w].sum() / float(h * w)
        return out


def dice(a: np.ndarray, b: np.ndarray) -> float:
    """Dice similarity coefficient of two boolean masks."""
    a, b = np.asarray(a, bool), np.asarray(b, bool)
    total = a.sum() + b.sum()
    return 1.0 if total == 0 else 2.0 * (a & b).sum() / total
