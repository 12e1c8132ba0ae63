"""Marker masses over most of a slide are ink, not tissue of an unusual colour
(tilewright.tissue.exclusions.off_own_stain).

When compact pieces off the Ruifrok & Johnston plane are most of what is stained, they may be the
slide's own stain (issue 28's case 3: tissue of a magenta eosin, read as tissue with an
``unusual-stain`` warning) or marker masses over a slide whose own H&E is the rest. A slide is
stained in one run, so its tissue lies on one stain plane: when the rest holds a plausible H&E
plane and the pieces lie far from it, they are not its stain. Before this check, discs of blue,
brown or green marker covering about 90 % of the stained area were kept as tissue (90 % of the
mask on ink) with an ``unusual-stain`` warning; the sealed family's draws E045 and E072 did so.
Ground truth: the layouts drawn in tests/marker_masses.py.
"""

import numpy as np
import pytest

from hard_slides import E_RJ, H_RJ, INKS
from marker_masses import masses, unusual_stain
from reported_slides import MAGENTA_EOSIN
from tilewright.tissue import exclusions
from tilewright.tissue.density import od_tables
from tilewright.tissue.mask import tissue_mask

ODD_MPP = (7.77, 8.0, 9.31, 10.43)  # thumbnails of 0.2428 x32, 0.25 x32, 0.2909 x32, 0.3259 x32 scans


def _mask(slide, mpp):
    m = tissue_mask(slide.render(mpp), mpp=mpp)
    return m, slide.truth(mpp)


@pytest.mark.parametrize("seed", range(6))
def test_marker_masses_are_ink(seed):
    mpp = ODD_MPP[seed % len(ODD_MPP)]
    mask, truth = _mask(masses(seed), mpp)
    a = mask.array
    stained = truth["tissue"] | truth["ink"]
    assert truth["ink"].sum() >= 0.7 * stained.sum()  # ground truth: the masses are most of what is stained
    assert a[truth["tissue"] & ~truth["ink"]].mean() >= 0.9  # the H&E beside the masses is kept
    assert (a & truth["ink"]).sum() <= 0.05 * max(1, a.sum())  # was 0.90 of the mask on ink
    assert not any(w.startswith("unusual-stain") for w in mask.warnings), mask.warnings
    assert any(w.startswith("high-ink") for w in mask.warnings), mask.warnings  # most was ink: said


@pytest.mark.parametrize("seed", range(4))
def test_tissue_of_an_unusual_stain_is_still_tissue(seed):
    mpp = ODD_MPP[(seed + 1) % len(ODD_MPP)]
    mask, truth = _mask(unusual_stain(seed), mpp)
    assert mask.array[truth["tissue"]].mean() >= 0.9
    assert any(w.startswith("unusual-stain") for w in mask.warnings), mask.warnings


def _image(rest_od, piece_od, glass=(240.0, 238.0, 242.0)):
    """An RGB image of two halves, rest and pieces, from optical densities (Beer-Lambert)."""
    od = np.concatenate([rest_od, piece_od], axis=1)
    return np.clip(np.asarray(glass) * 10.0 ** -od + 0.5, 0, 255).astype(np.uint8)


def _mixtures(rng, shape, a, b, wa, wb):
    """Pixels mixing stains ``a`` and ``b`` with amounts uniform in ``wa`` and ``wb``."""
    return (rng.uniform(*wa, shape)[..., None] * a + rng.uniform(*wb, shape)[..., None] * b).astype(np.float32)


def test_off_own_stain_against_constructed_pixels():
    rng = np.random.default_rng(3)
    glass = (240.0, 238.0, 242.0)
    tables = od_tables(glass)
    half = np.zeros((80, 160), bool)
    rest, pieces = np.c_[~half, half], np.c_[half, ~half]
    # ground truth: the rest is H&E (Ruifrok & Johnston), the pieces blue marker (tests/hard_slides.INKS)
    hne = _mixtures(rng, (80, 160), H_RJ, E_RJ, (0.1, 0.6), (0.2, 0.8))
    blue = np.broadcast_to(-np.log10(np.asarray(INKS["blue"])), (80, 160, 3)) * rng.uniform(0.8, 1.2, (80, 160, 1))
    assert exclusions.off_own_stain(_image(hne, blue, glass), tables, pieces, rest)
    # pieces of the slide's own stain pair in another proportion (eosin-rich) lie on its plane
    eosin_rich = _mixtures(rng, (80, 160), H_RJ, E_RJ, (0.0, 0.05), (0.6, 1.0))
    assert not exclusions.off_own_stain(_image(hne, eosin_rich, glass), tables, pieces, rest)
    # a hematoxylin-rich rest and magenta-eosin-rich pieces of the same unusual pair: one stain plane
    rest_m = _mixtures(rng, (80, 160), H_RJ, MAGENTA_EOSIN, (0.4, 0.9), (0.05, 0.3))
    magenta = _mixtures(rng, (80, 160), H_RJ, MAGENTA_EOSIN, (0.0, 0.1), (0.5, 0.9))
    assert not exclusions.off_own_stain(_image(rest_m, magenta, glass), tables, pieces, rest)
    # no rest to fit a plane to: nothing decided
    assert not exclusions.off_own_stain(_image(hne, blue, glass), tables, pieces, np.zeros_like(rest))
