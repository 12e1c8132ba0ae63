"""Violet and pink marker lie on the H&E plane; they are found by texture and shape (issue 28,
round 3: tilewright.tissue.films).

A violet marker absorbs like about equal parts of hematoxylin and eosin: colour cannot tell it
from tissue, and a violet ring or dot on glass was kept whole as tissue (up to 43 % of the mask on
ink, no warning). A marker is a smooth film of dye drawn as a band; tissue at 8 µm/px is textured.
Smooth dense bands and pieces lying on glass are films, grown into the tissue they cross.

Ground truth: the layouts drawn by the second hard-slide family (tests/second_family.py: draws 6, a
violet ring across two pieces, and 94, violet marks on glass), and draws of it without any marker,
where next to nothing may be taken for a film; plus the smooth-tissue guard on a constructed slide.
"""

import importlib

import numpy as np
import pytest

from family_scores import KEPT, ON_INK, score
from hard_slides import HardSlide, Piece, Stroke
from second_family import draw
from tilewright.tissue.mask import tissue_mask


@pytest.mark.parametrize("seed", [6, 94])
def test_violet_marker_on_the_hne_plane_is_left_out(seed):
    d = draw(seed)
    assert d.info.get("dye") == "violet" and d.truth["ink"].sum() > 1000  # the case asked about
    mask = tissue_mask(d.rgb, mpp=d.mpp)
    s = score(mask, d.truth)
    assert s["on_ink"] <= ON_INK, s  # the family's aim; 0.43 and 0.20 before
    assert s["kept"] >= KEPT, s
    assert mask.params["film_share"] > 0


@pytest.mark.parametrize("seed", [7, 9, 11, 21, 22])
def test_textured_slides_without_marker_lose_next_to_nothing_to_films(seed):
    d = draw(seed)
    assert not d.truth["ink"].any()  # no marker drawn
    mask = tissue_mask(d.rgb, mpp=d.mpp)
    # what is taken for a film there is dust and bubble rims on glass, or a few edge pixels
    # (measured 0-0.5 % of the tissue found)
    assert mask.params["film_share"] <= 0.01, mask.params["film_share"]
    assert score(mask, d.truth)["kept"] >= KEPT


def test_smooth_tissue_is_not_a_film():
    # a slide whose tissue is smooth (flat stain fields, a constructed layout of
    # tests/hard_slides.py) gives the texture cue nothing to compare with: no film is taken
    slide = HardSlide("flat", 5000.0, 8000.0, (Piece(2500.0, 2200.0, 1500.0, 400.0, 0.2),
                                               Piece(2500.0, 5800.0, 1800.0, 1500.0)), texture=0.0, seed=3)
    truth = slide.truth(8.0)
    mask = tissue_mask(slide.render(8.0), mpp=8.0)
    assert mask.params["film_share"] == 0.0
    assert mask.array[truth["tissue"]].mean() >= KEPT


def test_a_broad_violet_marker_that_is_most_of_the_dense_area_is_still_a_film():
    # ground truth: a constructed layout (tests/hard_slides.py) with two textured pieces off a
    # 2.2 mm violet band across the glass, which is 3/4 of what is dense on the slide. The median
    # texture of the dense area was the band's own (none): the cue was off, 74 % of the mask on ink
    violet = (0.52, 0.30, 0.74)  # transmission: about equal parts hematoxylin- and eosin-like
    slide = HardSlide("wide violet", 6000.0, 8000.0,
                      (Piece(4300.0, 1600.0, 900.0, 1100.0, 0.3), Piece(1500.0, 6000.0, 1000.0, 1200.0)),
                      inks=(Stroke(((600.0, 400.0), (5600.0, 7600.0)), 2200.0, violet),), seed=5)
    mask = tissue_mask(slide.render(8.0), mpp=8.0)
    s = score(mask, slide.truth(8.0))
    assert s["on_ink"] <= ON_INK and s["kept"] >= KEPT, s


@pytest.mark.parametrize("family, seed", [("third_family", 33), ("confirm_family", 86)])
def test_broad_violet_marker_on_family_draws(family, seed):
    # a violet line and wipe over 2/3 of a tissue array (third family, draw 33), a violet ring over
    # two cores (confirmation family, draw 86): 59 % and 68 % of the mask on ink before
    d = importlib.import_module(family).draw(seed)
    assert any(m["dye"] == "violet" for m in d.info["marks"])
    s = score(tissue_mask(d.rgb, mpp=d.mpp), d.truth)
    assert s["on_ink"] <= ON_INK and s["kept"] >= KEPT, s
