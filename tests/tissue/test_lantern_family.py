"""The LANTERN held-back family (tests/lantern_family.py): written in round 10 by a session that read
neither the tissue masker nor any other family; confirmation only, under the rules of
tests/tissue/test_veiled_family.py (never tuned on, its draws never looked at while tuning).

    TILEWRIGHT_LANTERN=1 .venv/bin/python -m pytest -q -s tests/tissue/test_lantern_family.py

(TILEWRIGHT_LANTERN_DRAWS: the number of draws, 100 by default; aims as in family_scores.)
"""

from __future__ import annotations

from family_scores import confirm_family, opt_in

pytestmark = opt_in("TILEWRIGHT_LANTERN", "lantern held-back family")


def test_lantern_family_meets_the_aims():
    confirm_family("lantern family", "lantern_family", "lantern-family", "TILEWRIGHT_LANTERN_DRAWS")
