"""The sealed family's generator (tests/sealed_family.py) checked against its OWN drawn quantities
only: no tissue mask runs here (the family stays unseen until it is opened once, see
tests/tissue/test_sealed_family.py). A handful of renders, and the drawn choices (``plan``, no
rendering) of 30 seeds for the spread of the parameters.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from sealed_family import describe, draw
from sealed_family_optics import DYES
from sealed_family_plan import LAYOUTS, plan
from sealed_family_marks import KINDS as MARK_KINDS

PLANS = [plan(s) for s in range(30)]


def _seeds() -> list[int]:
    """Seed 0, and the first seeds whose plans hold faint pieces, blood and ink together or apart."""
    out = [0]
    for want in ("faint_planned", "blood_planned", "marks"):
        out.append(next(p["seed"] for p in PLANS if any(p[want]) and p["seed"] not in out))
    return out


SEEDS = _seeds()


@pytest.fixture(scope="module")
def drawn():
    return {s: draw(s) for s in SEEDS}


def test_the_same_seed_draws_the_same_slide(drawn):
    again = draw(SEEDS[1])
    first = drawn[SEEDS[1]]
    assert np.array_equal(again.rgb, first.rgb), "generator's own output: same seed, different pixels"
    for k in first.truth:
        assert np.array_equal(again.truth[k], first.truth[k]), f"generator's own truth: same seed, {k} differs"
    assert again.info == first.info, "generator's own info: same seed, different record"


def test_shapes_types_and_resolution(drawn):
    for s, d in drawn.items():
        h, w = d.rgb.shape[:2]
        assert d.rgb.dtype == np.uint8 and d.rgb.shape == (h, w, 3), f"generator's own output: seed {s} rgb"
        assert 350 <= h <= 900 and 350 <= w <= 900, f"plan: seed {s} thumbnail {h}x{w} outside 350-900 px"
        assert set(d.truth) == {"tissue", "ink", "blood", "faint"}, f"generator's own truth: seed {s} keys"
        for k, v in d.truth.items():
            assert v.dtype == bool and v.shape == (h, w), f"generator's own truth: seed {s} {k} map"
        assert 0.24 <= d.info["scan_mpp"] <= 0.5, f"plan: seed {s} scan at {d.info['scan_mpp']} um/px"
        assert 5.6 <= d.mpp <= 11.4, f"plan: seed {s} thumbnail at {d.mpp} um/px, not the level nearest 8"
        assert isinstance(d.info["faint_od"], list), f"generator's own info: seed {s} faint_od"
        assert describe(d.info).startswith(f"seed {s}:"), "generator's own description"


def test_blood_and_faint_lie_inside_tissue(drawn):
    for s, d in drawn.items():
        t = d.truth
        assert not (t["blood"] & ~t["tissue"]).any(), f"ground truth: seed {s} blood outside tissue"
        assert not (t["faint"] & ~t["tissue"]).any(), f"ground truth: seed {s} faint outside tissue"
    assert any(d.truth["blood"].any() for d in drawn.values()), "ground truth: no blood in the chosen draws"
    assert any(d.truth["faint"].any() for d in drawn.values()), "ground truth: no faint piece in the chosen draws"
    assert any(d.truth["ink"].any() for d in drawn.values()), "ground truth: no ink in the chosen draws"


def test_faint_pieces_stand_apart(drawn):
    for s, d in drawn.items():
        f = d.truth["faint"]
        if not f.any():
            continue
        other = (d.truth["tissue"] & ~f) | d.truth["ink"]
        if other.any():
            dist = cv2.distanceTransform((~other).astype(np.uint8), cv2.DIST_L2, 5)
            gap_um = float(dist[f].min()) * d.mpp
            assert gap_um >= 300 - 2 * d.mpp, f"ground truth: seed {s} faint piece {gap_um:.0f} um from other tissue/ink"


def test_faint_od_is_the_drawn_light(drawn):
    for s, d in drawn.items():
        labels, trans, glass = d.clean["faint_labels"], d.clean["transmission"], d.clean["glass"]
        assert labels.max() == len(d.info["faint_od"]), f"generator's own labels: seed {s}"
        for i, od in enumerate(d.info["faint_od"], start=1):
            px = labels == i
            again = -np.log10(trans[..., 1][px].mean())
            assert abs(again - od) < 1e-4, f"the generator's own drawn light (noise-free): seed {s} piece {i} {again} vs {od}"
            assert 0.03 - 1e-3 <= od <= 0.12 + 1e-3, f"plan: seed {s} faint OD {od} outside 0.03-0.12"
            seen = -np.log10(d.rgb[..., 1][px].mean() / glass[..., 1][px].mean())
            assert abs(seen - od) < 0.02, f"the generator's own rgb after noise and JPEG: seed {s} piece {i} {seen} vs {od}"


def test_the_light_follows_beer_lambert(drawn):
    for s, d in drawn.items():
        trans, glass = d.clean["transmission"], d.clean["glass"]
        busy = cv2.dilate((d.truth["tissue"] | d.truth["ink"]).astype(np.uint8), np.ones((9, 9), np.uint8)).astype(bool)
        free = ~busy
        assert np.median(trans[free]) > 0.99, f"the generator's own drawn light: seed {s} bare glass not clear"
        diff = np.abs(d.rgb[free].astype(np.float32) - glass[free])
        assert np.median(diff) < 4, f"the generator's own rgb: seed {s} glass {np.median(diff)} off its light"
        assert glass.min() > 180 and glass.max() <= 255, f"the generator's own glass light: seed {s}"
        blood = d.truth["blood"] & ~d.truth["ink"]
        if blood.sum() > 50:
            t = trans[blood].mean(axis=0)
            assert t[0] > t[1] and t[0] > t[2], f"the generator's own drawn light: seed {s} blood not red {t}"
        if d.truth["ink"].any():
            assert trans[d.truth["ink"]].mean() < 0.95, f"the generator's own drawn light: seed {s} ink too clear"


def test_the_plans_cover_the_promised_ranges():
    def vals(key):
        return np.array([p[key] for p in PLANS], float)

    scan, mpp = vals("scan_mpp"), vals("mpp")
    assert scan.min() >= 0.24 and scan.max() <= 0.5 and np.ptp(scan) > 0.15, f"plan: scan resolutions {scan}"
    assert mpp.min() >= 5.6 and mpp.max() <= 11.4 and np.ptp(mpp) > 3, f"plan: thumbnail resolutions {mpp}"
    for k in ("h_strength", "e_strength"):
        v = vals(k)
        assert v.min() >= 0.15 and v.max() <= 1.6 and v.min() < 0.3 and v.max() > 1.0, f"plan: {k} {v}"
    for k in ("h_turn_deg", "e_turn_deg"):
        v = vals(k)
        assert v.max() <= 8.01 and v.max() > 5, f"plan: {k} {v}"
    faint = [f for p in PLANS for f in p["faint_planned"]]
    share = np.mean([bool(p["faint_planned"]) for p in PLANS])
    assert 0.2 <= share <= 0.55, f"plan: share of draws with faint pieces {share}"
    ods = np.array([f["od"] for f in faint])
    assert ods.min() >= 0.03 and ods.max() <= 0.12 and ods.min() < 0.05 and ods.max() > 0.1, f"plan: faint ODs {ods}"
    marks = [m for p in PLANS for m in p["marks"]]
    widths = np.array([m["width_mm"] for m in marks])
    assert widths.min() >= 0.3 and widths.max() <= 2.0 and widths.min() < 0.4 and widths.max() > 1.2, f"plan: widths {widths}"
    assert {m["kind"] for m in marks} == set(MARK_KINDS), "plan: mark kinds"
    assert len({m["dye"] for m in marks}) >= 6, f"plan: dyes {sorted({m['dye'] for m in marks})} of {sorted(DYES)}"
    assert {k for p in PLANS for k in p["layouts"]} == set(LAYOUTS), "plan: layouts"
    blood = np.array([b for p in PLANS for b in p["blood_planned"]])
    assert blood.min() == 0 and blood.max() <= 0.6 and blood.max() > 0.4, f"plan: blood shares {blood}"
    q = vals("jpeg")
    assert q.min() >= 45 and q.max() <= 95 and q.min() < 60 and q.max() > 85, f"plan: JPEG qualities {q}"
    glass = np.array([p["glass"] for p in PLANS])
    assert glass.min() >= 215 and glass.max() <= 250 and glass.min() < 225 and glass.max() > 240, "plan: glass"
    for k in ("dust", "lint", "bubbles"):
        assert vals(k).max() > 0 and vals(k).min() == 0, f"plan: {k} counts"
    assert any(p["coverslip_edge"] for p in PLANS), "plan: coverslip edges"
    assert any(p["cracks"] for p in PLANS) and any(p["mucin_lake"] for p in PLANS), "plan: cracks and mucin lakes"
