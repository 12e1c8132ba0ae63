"""Marker drawn over tissue is left out of the mask, and the tissue and red cells beside it are
kept (issue 28, round 2). Two causes, a test each:

1. Red and pink marks over tissue (a hand-written digit, a tick, pen taps) were kept as red
   cells: a compact reddish piece lying in tissue was tissue whatever its texture. Red cells are
   granular (one disc of about 7 µm each); a film of dye is smooth
   (tilewright.tissue.pieces.smooth_films). A haemorrhage on the same slide stays.
2. Light blue marker over tissue (a faded hatching, a light-blue label) lay inside the fixed
   off-plane limit (0.04 OD plus 3 % of the density), wide enough for any slide's scatter about
   the Ruifrok & Johnston plane; light marker over tissue lies 0.02-0.04 OD off the slide's
   fitted plane. The limit now follows the slide's own scatter about its fitted plane
   (tilewright.tissue.exclusions.residual_limit). Not fixed: where hatching covers a large share
   of the tissue, the fitted plane itself is pulled toward the ink (the tissue-ink mixtures at
   the hatch's rims form a continuum; seeds 6 and 13 of the second layout), and it stays.
3. (Round 3.) The part of that limit proportional to the density (3 % of it) stayed when the
   absolute part narrowed: over dense tissue it is as large again, and a blue stroke over a fold
   lay inside it. It narrows with the absolute part now.

Ground truth: the layouts drawn here (tests/hard_slides.py, tests/marker_marks.py), compared at
the thumbnail's 7.77 and 8 µm/px; stain vectors of the second layout are the Ruifrok & Johnston
ones turned by a few degrees (tests/hard_family.turned).
"""

import numpy as np
import pytest

from hard_family import turned
from hard_slides import E_RJ, H_RJ, Area, HardSlide, Piece
from marker_marks import Mark, dot_paths, glyph_paths, hatch_paths
from tilewright.tissue.exclusions import RESIDUAL_FLOOR, residual_limit
from tilewright.tissue.mask import tissue_mask
from tilewright.tissue.plane import RUIFROK_PLANE_NORMAL, PlaneFit


def _red_marks(ink, seed):
    rng = np.random.default_rng(seed)
    pieces = (Piece(3100.0, 2900.0, 2300.0, 2100.0, 0.4), Piece(3000.0, 7300.0, 2000.0, 1900.0, -0.3))
    marks = (Mark(glyph_paths(rng, ["6", "2"], 2300.0, 1800.0, 1700.0), 380.0, ink, (1.0, 0.85), 0.1, seed, "label", "red"),
             Mark(glyph_paths(rng, ["tick"], 2500.0, 6600.0, 1300.0), 330.0, ink, (0.9, 1.0), 0.1, seed + 1, "tick", "red"),
             Mark(dot_paths(rng, 4200.0, 7600.0, 300.0, 4), 420.0, ink, (1.0, 1.0), 0.0, seed + 2, "dots", "red"))
    blood = (Area("blood", 4300.0, 2900.0, 650.0, 800.0, 0.2),)  # a haemorrhage inside the first piece
    return HardSlide("marks-over-tissue", 6100.0, 9700.0, pieces, areas=blood, inks=marks, seed=seed)


def _light_marks(ink, seed):
    rng = np.random.default_rng(seed)
    pieces = (Piece(3000.0, 2800.0, 2300.0, 2200.0, 0.3), Piece(3100.0, 7200.0, 2100.0, 1900.0, -0.5))
    marks = (Mark(hatch_paths(rng, 3300.0, 2700.0, 2600.0, spacing=520.0), 230.0, ink, (0.95, 0.85), 0.1, seed, "hatch", "blue"),
             Mark(glyph_paths(rng, ["3", "8"], 2300.0, 6300.0, 1500.0), 300.0, ink, (0.9, 1.0), 0.1, seed + 1, "label", "blue"))
    stains = np.stack([turned(H_RJ, rng, 4), turned(E_RJ, rng, 4)])
    return HardSlide("light-marks", 6200.0, 9900.0, pieces, inks=marks, stains=stains, seed=seed)


def _check(slide, mpp):
    """The mask of ``slide`` at ``mpp`` against its truth: the marks lie over tissue, at most 5 %
    of the mask is on ink (the family's aim), ink-free tissue and red cells are kept >= 0.9."""
    truth = slide.truth(mpp)
    mask = tissue_mask(slide.render(mpp), mpp=mpp).array
    assert (truth["ink"] & truth["tissue"]).sum() > 500  # the marks lie over tissue (the case asked about)
    on_ink = float((mask & truth["ink"]).sum()) / mask.sum()
    assert on_ink <= 0.05, on_ink
    assert mask[truth["tissue"] & ~truth["ink"]].mean() >= 0.9
    blood = truth["blood"] & ~truth["ink"]
    if blood.any():
        assert mask[blood].mean() >= 0.9  # red cells stay tissue


@pytest.mark.parametrize("ink,mpp,seed", [((0.85, 0.22, 0.31), 8.0, 3), ((0.88, 0.38, 0.68), 7.77, 5),
                                          ((0.80, 0.17, 0.24), 7.77, 11)])
def test_red_marks_over_tissue_are_left_out_and_blood_kept(ink, mpp, seed):
    _check(_red_marks(ink, seed), mpp)


@pytest.mark.parametrize("ink,mpp,seed", [((0.45, 0.62, 0.85), 7.77, 4), ((0.43, 0.66, 0.83), 8.0, 3),
                                          ((0.43, 0.66, 0.83), 7.77, 7)])
def test_light_blue_marks_over_tissue_are_left_out(ink, mpp, seed):
    _check(_light_marks(ink, seed), mpp)


def test_residual_limit_follows_the_fit_and_never_widens():
    # constructed fits: spread 0.001 -> the floor; 0.004 -> 8 x 0.004; a wide spread or a refused
    # fit -> the given limit (the prior's), never wider
    fit = lambda spread, ok=True: PlaneFit(RUIFROK_PLANE_NORMAL, ok, 1000, 3.0, 0.9, "", spread)
    assert residual_limit(fit(0.001), 0.04) == RESIDUAL_FLOOR
    assert residual_limit(fit(0.004), 0.04) == pytest.approx(0.032)
    assert residual_limit(fit(0.02), 0.04) == 0.04
    assert residual_limit(fit(0.001, ok=False), 0.04) == 0.04


def test_the_density_part_of_the_limit_narrows_with_it():
    # round 3: after a fit the absolute limit follows the slide's scatter, but the part
    # proportional to the density (3 % of it: 0.02-0.03 OD over dense tissue, as much again as the
    # narrowed limit) stayed, and a blue stroke drawn over a fold lay inside it. Ground truth: the
    # layout of draw 74 of the tuning family (tests/hard_family.py), 5.9 % of its mask on ink before
    from family_scores import ON_INK, score
    from hard_family import draw

    d = draw(74)
    truth = d.truth()
    assert (truth["ink"] & truth["tissue"]).sum() > 1000  # the stroke lies over tissue
    s = score(tissue_mask(d.thumbnail(), mpp=d.thumb_mpp), truth)
    assert s["on_ink"] <= ON_INK and s["kept"] >= 0.9, s
