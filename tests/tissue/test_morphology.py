"""Binary helpers of the tissue mask (tilewright.tissue.morphology) against constructed layouts."""

import numpy as np

from tilewright.tissue.morphology import enclosed


def test_enclosed_fills_a_walled_cell_and_not_open_glass():
    """A ring of wall (radius 8 px) encloses its inside within 10 px on every ray; a bare line
    encloses nothing on its open sides."""
    yy, xx = np.mgrid[:60, :60]
    ring = np.abs(np.hypot(yy - 30, xx - 30) - 8) < 1
    got = enclosed(ring, 10)
    assert got[30, 30] and not got[5, 5]
    line = np.zeros((60, 60), bool)
    line[30, :] = True
    assert not enclosed(line, 10)[20, 30]
