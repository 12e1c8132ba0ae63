"""Uneven light is divided out before the tissue threshold (issue 28, round 3: tilewright.tissue.flatfield).

The threshold lies a few thousandths of an optical density above the glass (faint tissue is found
relative to the glass's own noise), so a scan whose glass is 3 % darker toward its corners
(vignetting; 0.013 OD) had whole corners of blank glass in its mask: tiles of nothing. In the
third hard-slide family (glass lit unevenly by up to ±2 % and a 3 % vignette) the median draw had
23 % of its mask on blank glass, and 73 of 100 draws more than 5 %.

Ground truth: constructed slides (tests/hard_slides.py layouts) rendered, then lit by a known
field (a radial fall-off and a gradient, Beer–Lambert: the light multiplies every pixel); glass
is what the layout did not draw.
"""

import numpy as np
import pytest

from hard_slides import Area, HardSlide, Piece
from tilewright.tissue.flatfield import flatten_light
from tilewright.tissue.mask import tissue_mask


def _lit(slide, mpp, fall, tilt):
    rgb = slide.render(mpp).astype(np.float32)
    h, w = rgb.shape[:2]
    y, x = np.mgrid[0:h, 0:w].astype(np.float32)
    r2 = ((y / h - 0.5) ** 2 + (x / w - 0.5) ** 2) / 0.5
    light = (1.0 - fall * r2 * r2) * (1.0 + tilt * (x / w - 0.5))  # corners `fall` darker, a gradient
    return np.clip(rgb * light[..., None] + 0.5, 0, 255).astype(np.uint8)


def _slide(seed):
    pieces = (Piece(3000.0, 3200.0, 1500.0, 1300.0, 0.2), Piece(3100.0, 7000.0, 1300.0, 1500.0, -0.3))
    faint = (Area("faint", 3100.0, 7000.0, 1500.0, 1700.0),)  # the second piece faint
    return HardSlide("lit", 6400.0, 10200.0, pieces, areas=faint, faint=(0.35, 0.3), seed=seed)


@pytest.mark.parametrize("mpp,fall,tilt,seed", [(8.0, 0.03, 0.02, 1), (7.77, 0.04, -0.015, 2), (8.0, 0.025, 0.0, 3)])
def test_glass_lit_unevenly_is_not_tissue_and_faint_tissue_stays(mpp, fall, tilt, seed):
    slide = _slide(seed)
    truth = slide.truth(mpp)
    mask = tissue_mask(_lit(slide, mpp, fall, tilt), mpp=mpp)
    m = mask.array
    assert mask.params["light_variation"] > 0.01  # the fall-off was measured
    glass = ~truth["tissue"]
    assert float((m & glass).sum()) / m.sum() <= 0.02  # the mask is tissue, not lit glass
    assert m[truth["tissue"] & ~truth["faint"]].mean() >= 0.9
    assert m[truth["faint"]].mean() >= 0.8  # faint tissue found against the flattened glass


def test_even_light_is_left_as_it_is():
    rgb = _slide(4).render(8.0)
    glass = (rgb.min(axis=2) >= 200)
    out, variation = flatten_light(rgb, glass)
    assert out is rgb and variation < 0.01  # rendered under even light: nothing to divide out


def test_one_grey_level_of_glass_in_optical_density():
    """``grey_level_od``: mean over R, G, B of log10(g / (g - 1)), by hand for (240, 200, 250):
    log10(240/239) = 0.0018134, log10(200/199) = 0.0021769, log10(250/249) = 0.0017406."""
    from tilewright.tissue.threshold import grey_level_od

    assert grey_level_od((240, 200, 250)) == pytest.approx((0.0018134 + 0.0021769 + 0.0017406) / 3, rel=1e-4)
