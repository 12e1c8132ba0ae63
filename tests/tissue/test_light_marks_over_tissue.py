"""Light blue marker over tissue (a faded hatching, a light-blue label) is left out of the mask
on a slide whose own H&E pixels lie close to their plane (issue 28, round 2).

Cause: the off-plane limit was fixed at 0.04 OD (plus 3 % of the density), wide enough for any
slide's scatter about the Ruifrok & Johnston plane; light marker over tissue lies 0.02-0.04 OD
off the slide's fitted plane, inside it. The limit now follows the slide's own scatter about
its fitted plane (tilewright.tissue.exclusions.residual_limit). Ground truth: the layouts drawn
here (tests/hard_slides.py, tests/marker_marks.py) at 8 and 7.77 µm/px; the stain vectors are
the Ruifrok & Johnston ones turned by a few degrees (tests/hard_family.turned).

Not fixed: where hatching covers a large share of the tissue, the fitted plane itself is pulled
toward the ink (the tissue-ink mixtures at the hatch's rims form a continuum; seeds 6 and 13 of
this layout), and the hatching stays in the mask.
"""

import numpy as np
import pytest

from hard_family import turned
from hard_slides import E_RJ, H_RJ, HardSlide, Piece
from marker_marks import Mark, glyph_paths, hatch_paths
from tilewright.tissue.exclusions import RESIDUAL_FLOOR, residual_limit
from tilewright.tissue.mask import tissue_mask
from tilewright.tissue.plane import RUIFROK_PLANE_NORMAL, PlaneFit


def _slide(ink, seed):
    rng = np.random.default_rng(seed)
    pieces = (Piece(3000.0, 2800.0, 2300.0, 2200.0, 0.3), Piece(3100.0, 7200.0, 2100.0, 1900.0, -0.5))
    marks = (Mark(hatch_paths(rng, 3300.0, 2700.0, 2600.0, spacing=520.0), 230.0, ink, (0.95, 0.85), 0.1, seed, "hatch", "blue"),
             Mark(glyph_paths(rng, ["3", "8"], 2300.0, 6300.0, 1500.0), 300.0, ink, (0.9, 1.0), 0.1, seed + 1, "label", "blue"))
    stains = np.stack([turned(H_RJ, rng, 4), turned(E_RJ, rng, 4)])
    return HardSlide("light-marks", 6200.0, 9900.0, pieces, inks=marks, stains=stains, seed=seed)


@pytest.mark.parametrize("ink,mpp,seed", [((0.45, 0.62, 0.85), 7.77, 4), ((0.43, 0.66, 0.83), 8.0, 3),
                                          ((0.43, 0.66, 0.83), 7.77, 7)])
def test_light_blue_marks_over_tissue_are_left_out(ink, mpp, seed):
    slide = _slide(ink, seed)
    truth = slide.truth(mpp)
    mask = tissue_mask(slide.render(mpp), mpp=mpp).array
    assert (truth["ink"] & truth["tissue"]).sum() > 1000  # the marks lie over tissue
    on_ink = float((mask & truth["ink"]).sum()) / mask.sum()
    assert on_ink <= 0.05, on_ink  # the family's aim: at most 5 % of the mask on ink
    assert mask[truth["tissue"] & ~truth["ink"]].mean() >= 0.9


def test_residual_limit_follows_the_fit_and_never_widens():
    # constructed fits: spread 0.001 -> the floor; 0.004 -> 8 x 0.004; a wide spread or a refused
    # fit -> the given limit (the prior's), never wider
    fit = lambda spread, ok=True: PlaneFit(RUIFROK_PLANE_NORMAL, ok, 1000, 3.0, 0.9, "", spread)
    assert residual_limit(fit(0.001), 0.04) == RESIDUAL_FLOOR
    assert residual_limit(fit(0.004), 0.04) == pytest.approx(0.032)
    assert residual_limit(fit(0.02), 0.04) == 0.04
    assert residual_limit(fit(0.001, ok=False), 0.04) == 0.04
