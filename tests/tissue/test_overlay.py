"""The QC picture is written, has the slide's proportions and shows outline, ink and tiles."""

import numpy as np
import pytest

from tilewright.tissue.mask import tissue_mask
from tilewright.tissue.overlay import OVERLAY_COLOURS, render_overlay
from tilewright.tissue.plan import plan_tiles
from tissue_fakes import FakeView


def _count_colour(img, hex_colour, tol=40):
    target = np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)])
    return int((np.abs(img[..., :3].astype(int) - target).max(axis=-1) <= tol).sum())


def test_overlay_png(tmp_path, he_slide, he_layout):
    import matplotlib.image as mpimg

    mask = tissue_mask(he_slide, mpp=8.0)
    plan = plan_tiles(FakeView(he_layout.shape_at(0.5), 0.5), mask, tile=256, max_tiles=200)
    out = render_overlay(he_slide, mask, plan, tmp_path / "qc.png")
    assert out.endswith("qc.png") and not list(tmp_path.glob("*.part"))
    img = (mpimg.imread(out) * 255).astype(np.uint8)
    h, w = mask.shape
    assert img.shape[1] == w and img.shape[0] > h  # the slide plus a caption strip
    # each layer is drawn: amber outline, teal tiles (absent from the H&E + pen palette)
    assert _count_colour(img, OVERLAY_COLOURS["tissue"]) > 500
    assert _count_colour(img, OVERLAY_COLOURS["tile"], tol=30) > 500
    empty = render_overlay(he_slide.thumbnail(8.0), mask, None, tmp_path / "bare.png", mpp=8.0)
    bare = (mpimg.imread(empty) * 255).astype(np.uint8)
    assert _count_colour(bare, OVERLAY_COLOURS["tile"], tol=30) < 50  # no tiles drawn this time


def test_overlay_at_another_resolution(tmp_path, he_slide):
    mask = tissue_mask(he_slide, mpp=8.0)
    out = render_overlay(he_slide, mask, None, tmp_path / "big.png", mpp=4.0)
    import matplotlib.image as mpimg

    from math import ceil

    from tilewright.tissue.overlay import MAX_SIDE

    h, w = 2 * mask.shape[0], 2 * mask.shape[1]  # the thumbnail at 4 µm/px
    shrink = max(1, ceil(max(h, w) / MAX_SIDE))  # documented cap on the picture size
    assert mpimg.imread(out).shape[1] == max(w // shrink, 640)  # mask resized to the picture
    assert mpimg.imread(out).shape[1] <= max(MAX_SIDE, 640)


def test_failed_write_leaves_nothing(tmp_path, he_slide):
    mask = tissue_mask(he_slide, mpp=8.0)
    with pytest.raises(OSError):
        render_overlay(he_slide, mask, None, tmp_path / "missing-dir" / "qc.png")
    assert not list(tmp_path.rglob("*"))
