"""Marker strokes followed from the glass into the tissue they cross (issue 28, round 5:
tilewright.tissue.crossings).

Over tissue a marker's optical density adds to the tissue's (Beer-Lambert): blue marker over
dense eosin reads as hematoxylin, red marker over textured tissue is as granular as the tissue,
and both were kept as tissue where the stroke crossed it (the part on glass was found). Ground
truth: the ink footprints drawn by the families' generators (figures before the change in each
case); and a haemorrhage beside a red stroke, which is denser than the tissue around along about
the same colour, must stay (red marker over textured tissue that reads as red cells is not
followed: left to the red cells).
"""

from family_scores import BLOOD, KEPT, ON_INK, score
from tilewright.tissue.mask import tissue_mask


def test_blue_marker_is_followed_across_dense_eosin():
    # tests/second_family.py draw 42: a blue blot from the glass over a dense, eosin-rich piece
    # reads as hematoxylin there: 10.7 % of the mask on ink before
    from second_family import draw

    d = draw(42)
    mask = tissue_mask(d.rgb, mpp=d.mpp)
    s = score(mask, d.truth)
    assert s["on_ink"] <= ON_INK and s["kept"] >= KEPT, s
    assert mask.params["crossed_share"] > 0


def test_blue_marker_over_pink_is_followed_on_the_first_family():
    # tests/hard_family.py draw 6: blue marker from the glass over pink tissue, 8 % of the mask
    # on ink before
    from hard_family import draw

    d = draw(6)
    s = score(tissue_mask(d.thumbnail(), mpp=d.thumb_mpp), d.truth())
    assert s["on_ink"] <= ON_INK and s["kept"] >= KEPT, s


def test_a_haemorrhage_beside_a_red_stroke_stays():
    # tests/hard_family.py draw 72: a magenta zigzag stroke across a piece and a haemorrhage
    # (a disc about three strokes wide) beside it; without the width rule 0.3 % of the blood was kept
    from hard_family import draw

    d = draw(72)
    mask = tissue_mask(d.thumbnail(), mpp=d.thumb_mpp)
    s = score(mask, d.truth())
    assert s["blood"] >= BLOOD and s["kept"] >= KEPT, s
