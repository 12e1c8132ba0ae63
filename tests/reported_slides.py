"""The three kinds of hard slide that issue 28 reports the tissue mask failing on, silently:
built here again from their description (Beer–Lambert with the Ruifrok & Johnston (2001)
vectors, haemoglobin for red cells, a known layout; see tests/hard_slides.py).

1. ``haemorrhage``: a tissue piece of which about 40 % is packed red cells (dark red, granular:
   one disc of about 7 µm a cell, tests/red_cells.py), the region reaching the piece's edge and
   bordering glass. Reported: the red region cut out as ink, 48 % of the tissue kept.
2. ``faint``: light-eosin tissue whose mean colour is about (227, 209, 231) on glass of about
   (232, 230, 235): about 0.04 optical density above glass in green. Reported: 0 % found, the
   slide skipped as blank.
3. ``magenta``: flat tissue of an H&E-like colour off the Ruifrok & Johnston plane, a magenta
   like (190, 110, 170) on white glass (phloxine-rich eosins and some scanners look like this):
   an eosin direction (0.24, 0.87, 0.43), about 12 degrees off the plane, and a little
   hematoxylin, each concentration the same everywhere. Reported: taken for red marker over
   100 % of the tissue, the slide "skipped" with 0 tiles and exit 0.

Sizes are in µm; each slide is small enough to write as a pyramid in a test.
"""

from __future__ import annotations

import numpy as np

from hard_slides import H_RJ, Area, HardSlide, Piece

#: A phloxine-like eosin direction (unit), about 12 degrees off the Ruifrok & Johnston H&E plane.
MAGENTA_EOSIN = np.array([0.24, 0.87, 0.43]) / np.linalg.norm([0.24, 0.87, 0.43])


def haemorrhage(height=1600.0, width=2000.0, seed=31) -> HardSlide:
    """One piece; a cap of packed red cells beyond a chord, about 40 % of it, on its right."""
    piece = Piece(height / 2, width / 2, 0.36 * height, 0.36 * width, 0.0, 0.05)
    cap = Area("blood", height / 2, width / 2 + 0.55 * width, 0.6 * height, 0.52 * width)
    return HardSlide("haemorrhage", height, width, (piece,), areas=(cap,), blood_od=1.4, seed=seed)


def faint(height=1600.0, width=2000.0, seed=32) -> HardSlide:
    """Light-eosin tissue over nine tenths of the slide, mean about (227, 209, 231) on glass
    (232, 230, 235).

    The mean stain fields are 0.2075 hematoxylin and 0.425 eosin (tests/hard_slides.py); scaled
    by 0.055 and 0.08 they give mean optical densities (0.0095, 0.0416, 0.0075) above the glass,
    that colour (Ruifrok & Johnston vectors).
    """
    piece = Piece(height / 2, width / 2, 0.55 * height, 0.55 * width, 0.0, 0.04)  # glass at the corners
    return HardSlide("faint", height, width, (piece,), glass=(232.0, 230.0, 235.0), hema=0.055, eosin=0.08,
                     noise=2.5, seed=seed)


def magenta(height=1600.0, width=2000.0, seed=33) -> HardSlide:
    """Two pieces of flat magenta tissue, mean about (190, 110, 170) on white glass."""
    pieces = (Piece(0.55 * height, 0.62 * width, 0.33 * height, 0.3 * width, 0.4, 0.05),
              Piece(0.3 * height, 0.2 * width, 0.2 * height, 0.14 * width, 0.0, 0.08))
    return HardSlide("magenta", height, width, pieces, glass=(255.0, 255.0, 255.0),
                     stains=np.stack([H_RJ, MAGENTA_EOSIN]), hema=0.3, eosin=0.85, texture=0.0, seed=seed)


REPORTED = {"haemorrhage": haemorrhage, "faint": faint, "magenta": magenta}
