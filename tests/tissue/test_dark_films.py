"""Dark marker whose colour lies on the H&E plane, over tissue (tilewright.tissue.films.dark_films).

A violet marker is about equal parts hematoxylin-like and eosin-like absorption: its colour is on
the H&E plane, and over tissue the tissue's own detail shows through it (optical densities add),
so neither colour nor texture finds it. What does is how dark it is: several times the slide's
tissue, with a step at its rim. A family of draws: two pale H&E pieces (Ruifrok & Johnston
vectors), a disc of violet marker over each (0.8-1.2 of each stain vector: on the plane by
construction, a mean optical density of about 0.9), a fold (two layers: twice the density), a
nuclear-dense area (1.6 times the hematoxylin) and packed red cells, at odd thumbnail µm/px.
Before the step the discs were all kept as tissue; the sensor's noise through so dark a film (its
OD noise grows as 10**OD, per channel) had to be allowed for. Ground truth: the layouts drawn.
"""

import numpy as np
import pytest

from hard_slides import E_RJ, H_RJ, Area, HardSlide, Piece, Ring
from tilewright.tissue.mask import tissue_mask

ODD_MPP = (7.77, 8.0, 9.31, 10.43)


def violet_over_tissue(seed: int, scale: float = 1.0) -> HardSlide:
    """Two pale H&E pieces, a violet disc over each, a fold, a dense area and red cells (lengths in
    µm times ``scale``; 1: a slide 6 x 8 mm)."""
    rng = np.random.default_rng(seed)
    s = float(scale)
    pieces = (Piece(s * 3000, s * 2400, s * 2200, s * 1900, rng.uniform(0, 3)),
              Piece(s * 3000, s * 6000, s * 2000, s * 1600, rng.uniform(0, 3)))
    od = rng.uniform(0.8, 1.2) * H_RJ + rng.uniform(0.8, 1.2) * E_RJ  # on the H&E plane
    ink = tuple(float(v) for v in 10.0 ** -od)
    inks = (Ring(s * (3000 + rng.uniform(-600, 600)), s * (2400 + rng.uniform(-500, 500)), 0.0, s * rng.uniform(400, 900), ink),
            Ring(s * (3000 + rng.uniform(-500, 500)), s * (6000 + rng.uniform(-400, 400)), 0.0, s * rng.uniform(300, 700), ink))
    areas = (Area("fold", s * 1700, s * 2400, s * 300, s * 700, rng.uniform(0, 3)),
             Area("dense", s * 4300, s * 6000, s * 400, s * 600, rng.uniform(0, 3)),
             Area("blood", s * 4400, s * 2200, s * 350, s * 450, rng.uniform(0, 3)))
    return HardSlide(f"violet-{seed}", s * 6000.0, s * 8000.0, pieces, areas=areas, inks=inks,
                     hema=rng.uniform(0.35, 0.7), eosin=rng.uniform(0.3, 0.6), seed=seed)


@pytest.fixture(scope="module")
def draws():
    out = []
    for seed in range(8):
        mpp = ODD_MPP[seed % len(ODD_MPP)]
        slide = violet_over_tissue(seed)
        out.append((slide.name, tissue_mask(slide.render(mpp), mpp=mpp).array, slide.truth(mpp)))
    return out


def test_dark_violet_discs_over_tissue_are_cut(draws):
    left = [float(m[t["ink"]].mean()) for _, m, t in draws]  # share of each draw's discs kept as tissue
    assert sum(x <= 0.1 for x in left) >= 7, left  # was 1.0 in every draw
    assert max(left) <= 0.5, left


def test_folds_dense_tissue_and_red_cells_stay(draws):
    for name, m, t in draws:
        free = ~t["ink"]
        assert m[t["tissue"] & free].mean() >= 0.97, name
        for kind in ("fold", "dense", "blood"):  # two layers; 1.6 x hematoxylin; haemoglobin
            assert m[t[kind] & free].mean() >= 0.95, (name, kind)
