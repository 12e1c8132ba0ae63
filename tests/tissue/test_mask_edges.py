"""Where the tissue mask puts its edges: at half-way between glass and the tissue beside them.

Ground truth constructed here: rectangles of uniform H&E-coloured tissue (Beer-Lambert with the
Ruifrok & Johnston 2001 vectors) on glass, with seeded sensor noise. The edge of a Gaussian-
blurred step lies where the blurred profile is at half its height (Canny 1986), so the mask of a
rectangle must match it to about one pixel along each edge, for pale and for dense tissue, and a
thin glass strip between tissue and the slide's edge must stay glass.
"""

from __future__ import annotations

import numpy as np
import pytest

import tilewright as tw
from colour_refs import RUIFROK_E, RUIFROK_H

H, E = RUIFROK_H / np.linalg.norm(RUIFROK_H), RUIFROK_E / np.linalg.norm(RUIFROK_E)
GLASS = np.array([243.0, 241.0, 245.0])
MPPS = (4.0, 7.7696, 8.0864)  # a thumbnail at 4 µm/px, and the x32 levels of 0.2428 and 0.2527 µm/px scans


def _slide(rects, c_h, c_e, shape=(400, 500), seed=0):
    rng = np.random.default_rng(seed)
    img = np.broadcast_to(GLASS, (*shape, 3)).copy()
    tissue = GLASS * 10.0 ** -(c_h * H + c_e * E)
    truth = np.zeros(shape, bool)
    for y0, x0, y1, x1 in rects:
        img[y0:y1, x0:x1] = tissue
        truth[y0:y1, x0:x1] = True
    img += rng.normal(0, 3, img.shape)
    return np.clip(np.rint(img), 0, 255).astype(np.uint8), truth


@pytest.mark.parametrize("mpp", MPPS)
@pytest.mark.parametrize("name,c_h,c_e", [("pale", 0.03, 0.08), ("typical", 0.3, 0.5), ("dense", 0.9, 1.0)])
def test_rectangle_edges_are_where_the_tissue_ends(name, c_h, c_e, mpp):
    rects = [(60, 80, 190, 260), (230, 300, 350, 460)]
    rgb, truth = _slide(rects, c_h, c_e)
    mask = tw.tissue_mask(rgb, mpp=mpp).array
    perimeter = sum(2 * ((y1 - y0) + (x1 - x0)) for y0, x0, y1, x1 in rects)
    extra, missed = int((mask & ~truth).sum()), int((truth & ~mask).sum())
    # one pixel an edge at most, and no bias outwards (was: ~10 µm out for pale tissue)
    assert extra <= perimeter and missed <= perimeter, (name, extra, missed, perimeter)
    assert abs(extra - missed) <= perimeter // 2, (name, extra, missed)


@pytest.mark.parametrize("mpp", MPPS)
def test_a_thin_glass_strip_along_the_slide_edge_stays_glass(mpp):
    # tissue stops 3 px (12-24 µm) before the slide's bottom and right edges
    rgb, truth = _slide([(150, 200, 397, 497)], 0.05, 0.1)
    mask = tw.tissue_mask(rgb, mpp=mpp).array
    assert not mask[-2:, :].any() and not mask[:, -2:].any()
    assert (mask == truth).mean() > 0.99
