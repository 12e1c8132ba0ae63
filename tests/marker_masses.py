"""Slides on which broad masses of marker cover most of what is stained (a family of draws), and
slides whose tissue is all of an unusual stain (tests/tissue/test_marker_masses.py,
tests/cli/test_marker_runs.py).

A marker mass is a disc of ink (a :class:`hard_slides.Ring` of radius 0) several millimetres
across, blue, brown or green, lying on glass and partly over one of two H&E pieces (Ruifrok &
Johnston vectors, textured); the masses are about 90 % of the stained area. Brown is a plausible
transmission for an iron-oxide or azo brown marker (R 0.55, G 0.40, B 0.28), not a measurement.
The unusual-stain slides are H&E with the eosin of :data:`reported_slides.MAGENTA_EOSIN` (a
phloxine-rich eosin off the Ruifrok & Johnston plane), textured, with more or less hematoxylin.
All lengths are in µm and scale with ``scale`` (1: a slide 8 x 10 mm).
"""

from __future__ import annotations

import numpy as np

from hard_slides import H_RJ, HardSlide, Piece, Ring
from reported_slides import MAGENTA_EOSIN

BROWN = (0.55, 0.40, 0.28)
INK_CHOICES = ("blue", BROWN, "green")


def masses(seed: int, scale: float = 1.0) -> HardSlide:
    """Two H&E pieces and two marker discs of different inks covering most of the slide."""
    rng = np.random.default_rng(seed)
    s = float(scale)
    pieces = (Piece(s * rng.uniform(1800, 2600), s * rng.uniform(2000, 3000), s * 800, s * 950, rng.uniform(0, 3)),
              Piece(s * rng.uniform(5600, 6400), s * rng.uniform(7800, 8600), s * 700, s * 800, rng.uniform(0, 3)))
    a, b = rng.choice(len(INK_CHOICES), 2, replace=False)
    inks = (Ring(s * rng.uniform(4800, 5600), s * rng.uniform(3800, 4800), 0.0, s * rng.uniform(5000, 5600), INK_CHOICES[a]),
            Ring(s * rng.uniform(2000, 2800), s * rng.uniform(7200, 8000), 0.0, s * rng.uniform(4400, 5000), INK_CHOICES[b]))
    return HardSlide(f"masses-{seed}", s * 8000.0, s * 10000.0, pieces, inks=inks, seed=seed)


def unusual_stain(seed: int) -> HardSlide:
    """Two textured pieces stained with hematoxylin and a magenta eosin, on near-white glass."""
    rng = np.random.default_rng(seed)
    pieces = (Piece(4000, 3000, 2600, 2000, rng.uniform(0, 3)), Piece(4000, 7500, 2400, 1800, rng.uniform(0, 3)))
    return HardSlide(f"unusual-stain-{seed}", 8000.0, 10000.0, pieces, glass=(250.0, 249.0, 252.0),
                     stains=np.stack([H_RJ, MAGENTA_EOSIN]), hema=float(rng.uniform(0.6, 3.5)), eosin=0.85, seed=seed)
