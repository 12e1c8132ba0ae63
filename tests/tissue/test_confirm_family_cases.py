"""Draws of the confirmation family (tests/confirm_family.py) that round 4 of issue 28 opened: each
lost tissue to a cause found and fixed there. Ground truth: what the generator drew (its truth
maps and its illumination, ``Drawn.light``); figures before the fix in each test's text.
"""

import re

import numpy as np
import pytest

from family_scores import score
from tilewright.tissue.density import find_glass
from tilewright.tissue.flatfield import flatten_light


def test_faint_tissue_over_most_of_the_slide_is_not_taken_for_uneven_light(confirm_drawn):
    """Pale tissue over most of the glass (draw 20): the light fit bent into it (fitted variation
    11 %, drawn 2 %) and brightened it away, 24 % of the tissue kept. Faint eosin dims green far
    more than red, light dims all channels alike: the fit keeps to glass-coloured blocks."""
    d, mask = confirm_drawn(20)
    assert score(mask, d.truth)["kept"] >= 0.9
    out, variation = flatten_light(d.rgb, find_glass(d.rgb).candidates)
    g = d.rgb[..., 1].astype(float)
    ok = g > 100
    ratio = out[..., 1][ok] / g[ok] * d.light[ok]  # constant when the drawn light is divided out
    err = np.abs(ratio / np.median(ratio) - 1)
    assert np.quantile(err, 0.95) < 0.01, np.quantile(err, 0.95)


def test_fat_walled_by_faint_membranes_is_tissue(confirm_drawn):
    """Fat (draw 90): empty cells 50-100 µm across walled by membranes the density threshold finds
    only in part; the open cells were glass, 71 % of the tissue kept. The generator's truth counts
    gaps a 100 µm disc does not fit into as tissue."""
    d, mask = confirm_drawn(90)
    assert d.info["layout"].startswith("fat")
    assert score(mask, d.truth)["kept"] >= 0.9


def test_a_smooth_sheet_of_red_cells_is_not_a_film_of_marker(confirm_drawn):
    """Packed red cells at the edge of a needle core, spilling onto the glass (draw 68, no red
    marker on the slide): smooth at 8 µm/px, they were taken for a film of on-plane marker lying
    on glass, 0.6 % of the blood kept."""
    d, mask = confirm_drawn(68)
    assert not any(m["dye"] == "red" for m in d.info["marks"])
    assert score(mask, d.truth)["blood"] >= 0.9


def test_shares_in_warnings_are_shares(confirm_drawn):
    """A share of the stained area over 100 % (draw 4 said 362 %): off-plane pieces lying on glass
    were counted over the stained area that leaves glass out."""
    d, mask = confirm_drawn(4)
    for w in mask.warnings:
        for pct in re.findall(r"(\d+)% of", w):
            assert int(pct) <= 100, w


def test_red_cells_stay_red_cells_when_the_fitted_plane_turns_them(confirm_drawn):
    """Broad sheets of packed red cells in a section (draw 18, green marker only): against the
    slide's fitted plane, tilted from Ruifrok & Johnston's, the sheets read as hematoxylin-like
    (the class of blue and green marker) where they are smooth, and were cut out (10 % of the
    blood kept; 47 % once smooth cells no longer seeded films). What was reddish against the prior
    plane is judged as reddish: by place and texture."""
    d, mask = confirm_drawn(18)
    assert not any(m["dye"] == "red" for m in d.info["marks"])
    s = score(mask, d.truth)
    assert s["blood"] >= 0.9 and s["kept"] >= 0.9, s


def test_a_haemorrhage_cut_into_bands_by_its_granular_cores_is_not_a_stroke(confirm_drawn):
    """A sheet of red cells inside loose tissue (draw 48, no marker on the slide): its granular
    cores were cut out first and its smooth rest, a band between them, was shaped like a stroke
    of marker: 36 % of the blood kept (53 % once smooth cells no longer seeded films). A band whose
    outline runs along large granular cores is a stroke only if the whole piece, cores and all, is
    one."""
    d, mask = confirm_drawn(48)
    assert not d.info["marks"]
    s = score(mask, d.truth)
    assert s["blood"] >= 0.9 and s["kept"] >= 0.9, s


@pytest.mark.parametrize("seed", [13, 35])
def test_glass_rounded_into_bands_is_not_tissue(confirm_drawn, seed):
    """Glass under a drawn vignette, rounded to 8 bits and JPEG-compressed (draws 13 and 35): once
    the light is divided out its values below their mode sat within a hundredth of a grey level of
    it, the measured noise collapsed (4e-5 OD), and 71 % and 79 % of the mask lay on blank glass.
    The noise is never under half a grey level of the glass's colour: 5 % on glass now (dust and
    the walls of fat, not the glass's bands). Ground truth: the drawn tissue and ink (``on_glass``:
    mask more than 4 px from any of them)."""
    d, mask = confirm_drawn(seed)
    assert score(mask, d.truth)["on_glass"] <= 0.1
