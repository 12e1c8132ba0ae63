"""Red and pink marks drawn over tissue (a hand-written digit, a tick, pen taps) are marker, not
blood: the mask leaves them out, and keeps a haemorrhage on the same slide (issue 28, round 2).

Cause: a compact reddish piece lying in tissue was kept as red cells whatever its texture, so a
digit written in red marker over a tissue piece stayed in the mask. Red cells are granular (one
disc of about 7 µm each); a film of dye is smooth (tilewright.tissue.pieces.smooth_films).
Ground truth: the layouts drawn here (tests/hard_slides.py, tests/marker_marks.py), compared at
the thumbnail's 7.77 and 8 µm/px.
"""

import numpy as np
import pytest

from hard_slides import Area, HardSlide, Piece
from marker_marks import Mark, dot_paths, glyph_paths
from tilewright.tissue.mask import tissue_mask


def _slide(ink, seed):
    rng = np.random.default_rng(seed)
    pieces = (Piece(3100.0, 2900.0, 2300.0, 2100.0, 0.4), Piece(3000.0, 7300.0, 2000.0, 1900.0, -0.3))
    marks = (Mark(glyph_paths(rng, ["6", "2"], 2300.0, 1800.0, 1700.0), 380.0, ink, (1.0, 0.85), 0.1, seed, "label", "red"),
             Mark(glyph_paths(rng, ["tick"], 2500.0, 6600.0, 1300.0), 330.0, ink, (0.9, 1.0), 0.1, seed + 1, "tick", "red"),
             Mark(dot_paths(rng, 4200.0, 7600.0, 300.0, 4), 420.0, ink, (1.0, 1.0), 0.0, seed + 2, "dots", "red"))
    blood = (Area("blood", 4300.0, 2900.0, 650.0, 800.0, 0.2),)  # a haemorrhage inside the first piece
    return HardSlide("marks-over-tissue", 6100.0, 9700.0, pieces, areas=blood, inks=marks, seed=seed)


@pytest.mark.parametrize("ink,mpp,seed", [((0.85, 0.22, 0.31), 8.0, 3), ((0.88, 0.38, 0.68), 7.77, 5),
                                          ((0.80, 0.17, 0.24), 7.77, 11)])
def test_red_marks_over_tissue_are_left_out_and_blood_kept(ink, mpp, seed):
    slide = _slide(ink, seed)
    truth = slide.truth(mpp)
    mask = tissue_mask(slide.render(mpp), mpp=mpp).array
    marks = truth["ink"] & truth["tissue"]
    assert marks.sum() > 500  # the marks lie over tissue (the case asked about)
    on_ink = float((mask & truth["ink"]).sum()) / mask.sum()
    assert on_ink <= 0.05, on_ink  # the family's aim: at most 5 % of the mask on ink
    blood = truth["blood"] & ~truth["ink"]
    assert mask[blood].mean() >= 0.9  # red cells stay tissue
    free = truth["tissue"] & ~truth["ink"]
    assert mask[free].mean() >= 0.9
