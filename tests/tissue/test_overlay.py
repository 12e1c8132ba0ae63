"""The QC picture is written, has the slide's proportions and shows outline, ink and tiles where
the mask and the plan put them."""

import subprocess
import sys

import cv2
import numpy as np
import pytest

from tilewright.tissue.mask import TissueMask, tissue_mask
from tilewright.tissue.overlay import CAPTION_HEIGHT, MIN_WIDTH, OVERLAY_COLOURS, render_overlay
from tilewright.tissue.plan import plan_tiles
from tissue_fakes import FakeView


def _rgb(hex_colour):
    return np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)])


def _read(path):
    img = cv2.imread(str(path), cv2.IMREAD_COLOR)  # reference decoder: OpenCV's PNG reader
    assert img is not None
    return img[..., ::-1]  # BGR -> RGB


def _count_colour(img, hex_colour, tol=40):
    return int((np.abs(img[..., :3].astype(int) - _rgb(hex_colour)).max(axis=-1) <= tol).sum())


def _rect_mask(shape=(300, 800), box=(50, 250, 100, 700), ink_box=None):
    """Constructed ground truth: one rectangle of tissue (rows y0:y1, cols x0:x1), optional ink."""
    a = np.zeros(shape, bool)
    y0, y1, x0, x1 = box
    a[y0:y1, x0:x1] = True
    ink = None
    if ink_box is not None:
        ink = np.zeros(shape, bool)
        iy0, iy1, ix0, ix1 = ink_box
        ink[iy0:iy1, ix0:ix1] = True
    return TissueMask(a, 8.0, ink=ink)


def _picture_size(h, w):
    """Documented size rule: shrink past MAX_SIDE, enlarge small pictures to MIN_WIDTH."""
    from math import ceil

    from tilewright.tissue.overlay import MAX_SIDE

    shrink = max(1, ceil(max(h, w) / MAX_SIDE))
    h, w = (max(1, h // shrink), max(1, w // shrink)) if shrink > 1 else (h, w)
    grow = min(MIN_WIDTH / w, MAX_SIDE / max(h, w))
    if grow > 1:
        h, w = int(round(h * grow)), int(round(w * grow))
    return h + CAPTION_HEIGHT, max(w, MIN_WIDTH)


def test_overlay_png(tmp_path, he_slide, he_layout):
    mask = tissue_mask(he_slide, mpp=8.0)
    plan = plan_tiles(FakeView(he_layout.shape_at(0.5), 0.5), mask, tile=256, max_tiles=200)
    out = render_overlay(he_slide, mask, plan, tmp_path / "qc.png")
    assert out.endswith("qc.png") and not list(tmp_path.glob("*.part"))
    img = _read(out)
    h, w = mask.shape
    assert img.shape[:2] == _picture_size(h, w)  # the slide plus a caption strip
    # each layer is drawn: amber outline, teal tiles (absent from the H&E + pen palette)
    assert _count_colour(img, OVERLAY_COLOURS["tissue"]) > 500
    assert _count_colour(img, OVERLAY_COLOURS["tile"], tol=30) > 500
    empty = render_overlay(he_slide.thumbnail(8.0), mask, None, tmp_path / "bare.png", mpp=8.0)
    bare = _read(empty)
    assert _count_colour(bare, OVERLAY_COLOURS["tile"], tol=30) < 50  # no tiles drawn this time


def test_outline_on_the_mask_boundary(tmp_path):
    mask = _rect_mask()
    thumb = np.full((300, 800, 3), 200, np.uint8)
    img = _read(render_overlay(thumb, mask, None, tmp_path / "o.png"))
    amber = _rgb(OVERLAY_COLOURS["tissue"])
    # ground truth constructed above: tissue rows 50..249, cols 100..699
    for y, x in [(50, 400), (249, 400), (150, 100), (150, 699)]:
        np.testing.assert_array_equal(img[y, x], amber)
    for y, x in [(40, 400), (60, 400), (150, 90), (150, 110), (150, 400), (10, 10)]:
        np.testing.assert_array_equal(img[y, x], (200, 200, 200))  # untouched thumbnail
    assert img.shape[:2] == (300 + CAPTION_HEIGHT, 800)
    strip = img[300:]
    assert (strip.max(axis=-1) < 100).sum() > 300  # dark caption text in the strip below


def test_tile_box_edges(tmp_path):
    mask = _rect_mask()
    view = FakeView((300 * 16, 800 * 16), 0.5)  # 8 µm/px mask, 0.5 µm/px tiles: 16 mask px a target px
    plan = plan_tiles(view, mask, tile=256, min_tissue=1.0)
    assert len(plan) > 0
    thumb = np.full((300, 800, 3), 255, np.uint8)
    img = _read(render_overlay(thumb, mask, plan, tmp_path / "t.png"))
    teal = _rgb(OVERLAY_COLOURS["tile"])
    # a tile away from the outline: 256 px at 0.5 µm/px = 128 µm = 16 px at 8 µm/px
    inner = [(y // 16, x // 16) for y, x in plan.yx if 70 <= y // 16 <= 210 and 120 <= x // 16 <= 660]
    y0, x0 = inner[len(inner) // 2]
    for k in range(16):
        np.testing.assert_array_equal(img[y0, x0 + k], teal)  # top edge
        np.testing.assert_array_equal(img[y0 + k, x0], teal)  # left edge
    centre = img[y0 + 8, x0 + 8].astype(int)
    assert np.all(centre <= 255) and np.any(centre < 255)  # tinted, not white
    assert np.abs(centre - 255).max() < np.abs(teal - 255).max() / 2  # a light fill, not a solid box
    np.testing.assert_array_equal(img[10, 10], (255, 255, 255))  # glass stays as it was


def test_ink_stripes_and_rim(tmp_path):
    mask = _rect_mask(ink_box=(120, 180, 300, 500))
    thumb = np.full((300, 800, 3), 120, np.uint8)
    img = _read(render_overlay(thumb, mask, None, tmp_path / "i.png"))
    rim = _rgb(OVERLAY_COLOURS["ink_rim"])
    np.testing.assert_array_equal(img[120, 400], rim)  # ground truth: ink rows 120..179
    np.testing.assert_array_equal(img[179, 400], rim)
    inside = img[130:170, 310:490].max(axis=-1)
    # white stripes over part of the ink, the thumbnail between them
    assert (inside > 200).mean() > 0.3 and (inside == 120).mean() > 0.3
    outside = img[200:240, 310:490]
    assert np.all(outside == 120)  # tissue without ink: nothing drawn


def test_narrow_slide_gets_a_wide_enough_caption(tmp_path):
    mask = _rect_mask(shape=(100, 200), box=(20, 80, 20, 180))
    img = _read(render_overlay(np.full((100, 200, 3), 230, np.uint8), mask, None, tmp_path / "n.png"))
    assert img.shape[:2] == (320 + CAPTION_HEIGHT, MIN_WIDTH)  # enlarged x3.2 to the minimum width
    assert _picture_size(100, 200) == (320 + CAPTION_HEIGHT, MIN_WIDTH)


def test_overlay_at_another_resolution(tmp_path, he_slide):
    mask = tissue_mask(he_slide, mpp=8.0)
    out = render_overlay(he_slide, mask, None, tmp_path / "big.png", mpp=4.0)

    from math import ceil

    from tilewright.tissue.overlay import MAX_SIDE

    h, w = 2 * mask.shape[0], 2 * mask.shape[1]  # the thumbnail at 4 µm/px
    shrink = max(1, ceil(max(h, w) / MAX_SIDE))  # documented cap on the picture size
    assert _read(out).shape[:2] == _picture_size(h, w)  # mask resized to the picture
    assert _read(out).shape[1] <= max(MAX_SIDE, MIN_WIDTH)


def test_failed_write_leaves_nothing(tmp_path, he_slide):
    mask = tissue_mask(he_slide, mpp=8.0)
    with pytest.raises(OSError):
        render_overlay(he_slide, mask, None, tmp_path / "missing-dir" / "qc.png")
    assert not list(tmp_path.rglob("*"))


def test_no_plotting_library_loaded(tmp_path):
    code = ("import sys, numpy as np; from tilewright.tissue.mask import TissueMask; "
            "from tilewright.tissue.overlay import render_overlay; "
            "a = np.zeros((50, 60), bool); a[10:40, 10:50] = True; "
            f"render_overlay(np.full((50, 60, 3), 220, np.uint8), TissueMask(a, 8.0), None, {str(tmp_path / 'p.png')!r}); "
            "print('matplotlib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"  # workers need not load matplotlib for the QC picture


def test_picture_placed_by_true_mpp_of_thumbnail_and_mask(tmp_path):
    # a thumbnail at 3.8848 µm/px (a x16 level of a 0.2428 scan) under a mask at 7.7696 (x32):
    # the picture, the outline and the tile boxes are placed by physical position
    from tilewright.slide.thumbnail import Thumbnail

    mpp_mask, mpp_thumb = 0.2428 * 32, 0.2428 * 16
    mask = _rect_mask(shape=(150, 400), box=(25, 125, 50, 350))
    mask = TissueMask(mask.array, mpp_mask)
    thumb = Thumbnail(np.full((300, 800, 3), 255, np.uint8), mpp_thumb)
    view = FakeView((int(150 * mpp_mask / 0.5), int(400 * mpp_mask / 0.5)), 0.5)
    plan = plan_tiles(view, mask, tile=256, min_tissue=1.0)
    img = _read(render_overlay(thumb, mask, plan, tmp_path / "p.png"))
    assert img.shape[:2] == (300 + CAPTION_HEIGHT, 800)  # the thumbnail's own pixels
    amber, teal = _rgb(OVERLAY_COLOURS["tissue"]), _rgb(OVERLAY_COLOURS["tile"])
    # ground truth: tissue mask rows 25..124 at 7.7696 µm/px are picture rows 50..249 at 3.8848
    np.testing.assert_array_equal(img[50, 400], amber)
    np.testing.assert_array_equal(img[249, 400], amber)
    np.testing.assert_array_equal(img[150, 100], amber)
    # a tile at (y, x) target px (0.5 µm/px) starts at picture px floor(y * 0.5 / 3.8848)
    inner = [(y, x) for y, x in plan.yx if 60 <= y * 0.5 / mpp_thumb <= 200 and 110 <= x * 0.5 / mpp_thumb <= 650]
    y, x = inner[len(inner) // 2]
    py, px = int(y * 0.5 / mpp_thumb), int(x * 0.5 / mpp_thumb)
    np.testing.assert_array_equal(img[py, px + 5], teal)  # top edge of its box
    np.testing.assert_array_equal(img[py + 5, px], teal)  # left edge
