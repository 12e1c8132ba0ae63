"""The SEALED held-back family of hard slides (tests/sealed_family.py), run only to confirm the aims
of issue 28. Confirmation only: never tune the tissue mask on it, never look at its draws while
tuning, and never change the family after seeing its results. It was written apart from the mask's
internals and from every other family of the project (its own shapes, absorbers and noise model);
once it has been run and opened, it is spent: write a new one apart.

SPENT (round 8, 2026-12-05): after its sixth run its draws were opened to find why it puts more
than 5 % of the mask on glass in 47 of 100 draws; it is a tuning family from then on. The new
held-back family is tests/veiled_family.py (tests/tissue/test_veiled_family.py).

Opt-in, so that nobody runs it by accident: ``TILEWRIGHT_SEALED=1 .venv/bin/python -m pytest -q -s
tests/tissue/test_sealed_family.py`` (``TILEWRIGHT_SEALED_DRAWS``, default 100). It prints the
shares of draws meeting each aim, the quantiles, the draws missing an aim with what they hold, and
writes the worst draws' QC pictures to ``test-artefacts/sealed-family/``.

Aims (tests/tissue/family_scores.py): in >= 95 % of the draws where each applies, ink-free tissue
kept >= 0.9 with <= 5 % of the mask on ink; blood kept >= 0.9; faint tissue kept >= 0.8.
"""

from __future__ import annotations

import os

import pytest

from family_scores import confirm_family

pytestmark = [pytest.mark.skipif(os.environ.get("TILEWRIGHT_SEALED") != "1",
                                 reason="sealed held-back family: confirmation only, set TILEWRIGHT_SEALED=1"),
              pytest.mark.timeout(7200)]


def test_sealed_family_meets_the_aims():
    confirm_family("sealed family", "sealed_family", "sealed-family", "TILEWRIGHT_SEALED_DRAWS")
