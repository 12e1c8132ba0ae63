"""The confirmation family of hard slides (tests/confirm_family.py): held back in round 3 of issue 28
(run twice, summary lines only), opened in round 4 for diagnosis (it lost fat, faint tissue under a
light fit bent into it, and smooth sheets of red cells: tests/tissue/test_confirm_family_cases.py),
so a tuning family now. Its aims as shares of draws (tests/tissue/family_scores.py), none met yet
(docs/guide/tissue.md): each share is held at a floor so that it cannot fall back unnoticed.

``make test`` runs the first 20 draws; the full run:
``TILEWRIGHT_CONFIRM_DRAWS=100 .venv/bin/python -m pytest -q tests/tissue/test_confirm_family.py -s``
(the worst draws' QC pictures go to ``test-artefacts/confirm-family/``; the layout, blood and
marks of each draw missing an aim are printed).
"""

import os

import pytest

from confirm_family import draw
from family_scores import check_floor, run_family

DRAWS = int(os.environ.get("TILEWRIGHT_CONFIRM_DRAWS", "20"))
pytestmark = pytest.mark.timeout(max(600, 30 * DRAWS))
#: Shares below which the test fails; the aims are 0.95. Measured on 100 draws in round 4:
#: ink 0.69 -> 0.72, red cells 0.65 -> 0.83, faint 0.92 -> 0.92 (ink 0.78 before the glass's noise
#: got its floor: fat in five draws was kept only because the whole glass was). Round 7 (ink margin
#: of one smoothing width, edges cut at ink left in place): 100 draws 0.79 / 0.90 / 0.95, the 20
#: drawn here 0.80 / 1.00 / 1.00; the floors were raised to hold that.
FLOORS = {"tissue": 0.75, "blood": 0.8, "faint": 0.8}


def _marks(info) -> str:
    return "; ".join(f"{m['dye']} {m['kind']} over {m['where']}" for m in info["marks"]) or "no marks"


def _describe(i) -> str:
    blood = ", ".join(f"{b['packing']} at {b['where']} {b['share']:.0%}" for b in i["blood"]) or "no blood"
    return f"{i['layout']}; {blood}; faint {[round(v, 3) for v in i['faint_od']]}: {_marks(i)}"


@pytest.fixture(scope="module")
def scores():
    return run_family("confirmation family", draw, range(DRAWS), "confirm-family", _describe)


@pytest.mark.parametrize("aim", sorted(FLOORS))
def test_confirmation_family_does_not_fall_below_its_floors(scores, aim):
    # ground truth: the layouts drawn by tests/confirm_family.py; the aims themselves are 0.95
    check_floor("confirmation family", scores, aim, FLOORS[aim])
