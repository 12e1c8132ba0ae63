"""The second hard-slide family (tests/second_family.py), a tuning family since round 3 of issue 28
(held back before): its aims as shares of draws (tests/tissue/family_scores.py). Red cells and
faint tissue in at least 95 % of the draws; the ink aim is NOT met on it (violet marker over
tissue, red marker over textured tissue, blue over red cells: docs/guide/tissue.md), so the share
is held at :data:`INK_FLOOR` so that it cannot fall back unnoticed.

``make test`` runs the first 20 draws; the full run:
``TILEWRIGHT_SECOND_DRAWS=100 .venv/bin/python -m pytest -q tests/tissue/test_second_family.py -s``
(the worst draws' QC pictures go to ``test-artefacts/second-family/``).
"""

import os

import pytest

from family_scores import SHARE, run_family, shares, summary
from second_family import draw

DRAWS = int(os.environ.get("TILEWRIGHT_SECOND_DRAWS", "20"))
pytestmark = pytest.mark.timeout(max(600, 30 * DRAWS))
#: Share of draws meeting the ink aim below which the test fails (the aim is 0.95; measured 0.85 of
#: 100 draws and 0.90 of the first 20 after round 3, 0.78 of 100 before it).
INK_FLOOR = 0.75


@pytest.fixture(scope="module")
def scores():
    return run_family("second family", draw, range(DRAWS), "second-family")


@pytest.mark.parametrize("aim", ["blood", "faint"])
def test_second_family_meets_the_aim_in_95_percent_of_draws(scores, aim):
    share, count = shares(scores)[aim]
    assert count >= 5, (aim, count)
    # ground truth: the layouts drawn by tests/second_family.py
    assert share >= SHARE, (aim, share, count, summary("second family", scores))


def test_ink_aim_over_the_second_family_does_not_fall_below_its_floor(scores):
    share, count = shares(scores)["tissue"]
    # ground truth: the layouts drawn by tests/second_family.py; the aim itself is 0.95 (not met)
    assert share >= INK_FLOOR, (share, count, summary("second family", scores))
