"""The third hard-slide family (tests/third_family.py), a tuning family since round 3 of issue 28
(it was held back and run once to confirm, then opened: its red cells were cut out as marker). Its
aims as shares of draws (tests/tissue/family_scores.py), none met on it yet (docs/guide/tissue.md):
each share is held at a floor so that it cannot fall back unnoticed.

``make test`` runs the first 20 draws; the full run:
``TILEWRIGHT_THIRD_DRAWS=100 .venv/bin/python -m pytest -q tests/tissue/test_third_family.py -s``
(the worst draws' QC pictures go to ``test-artefacts/third-family/``; the marks of each draw
missing the ink aim are printed).
"""

import os

import pytest

from family_scores import check_floor, run_family
from third_family import draw

DRAWS = int(os.environ.get("TILEWRIGHT_THIRD_DRAWS", "20"))
pytestmark = pytest.mark.timeout(max(600, 30 * DRAWS))
#: Shares below which the test fails; the aims are 0.95. Measured on 100 draws after round 3:
#: ink 0.84, red cells 0.86 (0.65 before), faint 0.93. Round 7: 100 draws 0.89 / 0.91 / 1.00, the
#: 20 drawn here 0.90 / 0.94 / 1.00; the red-cell floor was raised to hold that.
FLOORS = {"tissue": 0.75, "blood": 0.85, "faint": 0.8}


def _marks(info) -> str:
    return f"{info['layout']}: " + ("; ".join(f"{m['dye']} {m['kind']} over {m['where']}" for m in info["marks"])
                                    or "no marks")


@pytest.fixture(scope="module")
def scores():
    return run_family("third family", draw, range(DRAWS), "third-family", _marks)


@pytest.mark.parametrize("aim", sorted(FLOORS))
def test_third_family_does_not_fall_below_its_floors(scores, aim):
    # ground truth: the layouts drawn by tests/third_family.py; the aims themselves are 0.95
    check_floor("third family", scores, aim, FLOORS[aim])
