"""The tissue mask's aims over a seeded family of hard slides (tests/hard_family.py), asserted as
shares of draws (tests/tissue/family_scores.py): in at least 95 % of the draws, ink-free tissue
kept >= 0.9 with at most 5 % of the mask on ink; red cells kept >= 0.9; faint tissue (>= 0.03 OD
above glass in green) kept >= 0.8.

The ink aim is NOT met on the family as widened in round 2 (hand-drawn marks of
tests/marker_marks.py in 65 % of the draws): pink and violet marker lie on or near the H&E plane
(colour cannot tell them from tissue) and faded blue over tissue lies within the plane's
tolerance. The draws without hand-drawn marks must meet it (95 %); over all draws the share is
held at :data:`INK_FLOOR` so that it cannot fall back unnoticed (measured figures in docs/guide/tissue.md).

``make test`` runs the first 30 draws. The full run (docs/guide/tissue.md, "Tissue masks on hard slides"):
``TILEWRIGHT_FAMILY_DRAWS=160 .venv/bin/python -m pytest -q tests/tissue/test_hard_family.py -s``.
The summary (shares, quantiles, the worst draws) is printed and the worst draws' QC pictures are
written to ``test-artefacts/hard-family/`` (gitignored; ``TILEWRIGHT_ARTEFACTS`` moves it).
"""

import os

import numpy as np
import pytest

from family_scores import SHARE, score, shares, summary, worst, write_qc
from hard_family import draw
from tilewright.tissue.mask import tissue_mask

DRAWS = int(os.environ.get("TILEWRIGHT_FAMILY_DRAWS", "30"))
pytestmark = pytest.mark.timeout(max(600, 30 * DRAWS))  # the full run renders each draw
FAINT_OD = 0.03
#: Share of all draws meeting the ink aim below which the test fails: the aim (0.95) is not met on
#: the widened family (0.80 of the first 30 draws and 0.88 of 160 after round 2, 0.90 of 160 after round 3;
#: 0.82 of 160 before round 2).
INK_FLOOR = 0.75


def faint_od(rgb, truth, glass) -> float:
    """Optical density above glass in green of a draw's faint tissue (median over its pixels):
    measured on the rendered thumbnail against the glass the draw was drawn on."""
    where = truth["faint"] & ~truth["ink"]
    return float(np.log10(glass[1] / max(float(np.median(rgb[where][:, 1])), 1.0))) if where.any() else np.nan


@pytest.fixture(scope="module")
def scores():
    out, pictures = [], {}
    for seed in range(DRAWS):
        d = draw(seed)
        rgb, truth = d.thumbnail(), d.truth()
        mask = tissue_mask(rgb, mpp=d.thumb_mpp)
        level = faint_od(rgb, truth, d.slide.glass)
        spare = truth["faint"] if level < FAINT_OD else None  # fainter than any aim asks for
        truth = {**truth, "faint": truth["faint"] if level >= FAINT_OD else np.zeros_like(truth["faint"])}
        s = score(mask, truth, spare)
        s["name"] = d.name
        s["hand_drawn"] = any(hasattr(i, "paint") for i in d.slide.inks)
        out.append(s)
        pictures[d.name] = (rgb, mask)
    print("\n" + summary("hard-slide family", out))
    for s in worst(out):
        write_qc("hard-family", s["name"], *pictures[s["name"]])
    return out


@pytest.mark.parametrize("aim", ["blood", "faint"])
def test_family_meets_the_aim_in_95_percent_of_draws(scores, aim):
    share, count = shares(scores)[aim]
    assert count >= 5, (aim, count)  # the family draws enough slides of each kind to judge
    # ground truth: the layouts drawn by tests/hard_family.py
    assert share >= SHARE, (aim, share, count, summary("hard-slide family", scores))


def test_draws_without_hand_drawn_marks_meet_the_ink_aim(scores):
    plain = [s for s in scores if not s["hand_drawn"]]
    share, count = shares(plain)["tissue"]
    assert count >= 5, count
    # ground truth: the layouts drawn by tests/hard_family.py (strokes, rings and dots)
    assert share >= SHARE, (share, count, summary("draws without hand-drawn marks", plain))


def test_ink_aim_over_all_draws_does_not_fall_below_its_floor(scores):
    share, count = shares(scores)["tissue"]
    # ground truth: the layouts drawn (hand-drawn marks included); the aim itself is 0.95 (not met)
    assert share >= INK_FLOOR, (share, count, summary("hard-slide family", scores))
