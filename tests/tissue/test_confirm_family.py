"""The CONFIRMATION family of hard slides (tests/confirm_family.py), run only to confirm the aims
that the tuning family asserts. Never tune the tissue mask on it, and never change the family
after seeing its results: it was written apart from the mask and from every other family.

Opt-in, so that nobody tunes against it by accident: ``TILEWRIGHT_CONFIRM=1
.venv/bin/python -m pytest -q tests/tissue/test_confirm_family.py -s``
(``TILEWRIGHT_CONFIRM_DRAWS``, default 100). Prints the summary (shares of draws meeting each
aim, quantiles, the worst draws), then one line per draw that misses an aim with its layout and
marks (dye, kind, where); the worst draws' QC pictures go to ``test-artefacts/confirm-family/``.
"""

import os

import pytest

from confirm_family import draw
from family_scores import SHARE, run_family, shares

pytestmark = [pytest.mark.skipif(os.environ.get("TILEWRIGHT_CONFIRM") != "1",
                                 reason="confirmation family: confirmation only, set TILEWRIGHT_CONFIRM=1"),
              pytest.mark.timeout(7200)]


def _marks(info) -> str:
    return "; ".join(f"{m['dye']} {m['kind']} over {m['where']}" for m in info["marks"]) or "no marks"


def _describe(i) -> str:
    blood = ", ".join(f"{b['packing']} at {b['where']} {b['share']:.0%}" for b in i["blood"]) or "no blood"
    return f"{i['layout']}; {blood}; faint {[round(v, 3) for v in i['faint_od']]}: {_marks(i)}"


def test_confirmation_family_meets_the_aims():
    n = int(os.environ.get("TILEWRIGHT_CONFIRM_DRAWS", "100"))
    scores = run_family("confirmation family", draw, range(n), "confirm-family", _describe)
    # ground truth: the layouts drawn by tests/confirm_family.py
    for aim, (share, count) in shares(scores).items():
        assert count == 0 or share >= SHARE, (aim, share, count)
