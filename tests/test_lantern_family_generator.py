"""Fast checks of the LANTERN held-back family's generator (tests/lantern_family.py): it is
seeded, its ground truth is consistent, and what it draws has the optics it was built with. The
tissue masker is never run here (the family is for confirmation only)."""

from __future__ import annotations

import json

import cv2
import numpy as np
import pytest

from lantern_family import describe, draw
from lantern_family_ink import DYE_OD
from lantern_family_plan import DYES, LAYOUTS, plan

SEEDS = range(8)


@pytest.fixture(scope="module")
def draws():
    return {s: draw(s) for s in SEEDS}


def test_same_seed_same_draw(draws):
    again = draw(3)
    assert np.array_equal(again.rgb, draws[3].rgb)
    assert all(np.array_equal(again.truth[k], draws[3].truth[k]) for k in draws[3].truth)
    assert again.info == draws[3].info


def test_different_seeds_differ(draws):
    assert draws[1].rgb.shape != draws[2].rgb.shape or not np.array_equal(draws[1].rgb, draws[2].rgb)
    assert len({d.rgb.tobytes()[:5000] for d in draws.values()}) == len(draws)


def test_interface_and_truth_consistency(draws):
    for d in draws.values():
        h, w, c = d.rgb.shape
        assert d.rgb.dtype == np.uint8 and c == 3 and 500 <= min(h, w) and max(h, w) <= 1200  # brief: 500-1200 px
        assert 5.5 <= d.mpp <= 11.5  # brief: a scan's µm/px read at x16 or x32
        assert set(d.truth) == {"tissue", "ink", "blood", "faint"}
        for m in d.truth.values():
            assert m.shape == (h, w) and m.dtype == bool
        assert not (d.truth["blood"] & ~d.truth["tissue"]).any()  # blood is tissue (constructed)
        assert not (d.truth["faint"] & ~d.truth["tissue"]).any()  # faint is tissue (constructed)
        assert d.truth["tissue"].any() and d.truth["ink"].any()
        assert d.info["seed"] in SEEDS and isinstance(d.info["faint_od"], list)
        json.dumps(d.info)
        assert describe(d.info).startswith(f"lantern {d.info['seed']}:")


def _od(d, m):
    """Mean OD above glass per channel over pixels ``m``, from the rgb and the draw's known glass light."""
    rgb = np.maximum(d.rgb[m].astype(float), 0.5)
    return -np.log10(rgb / d.light[m]).mean(axis=0)


def test_faint_pieces_measure_at_their_recorded_od():
    seen = 0
    for s in range(20):
        if not plan(s)["faint_targets"]:
            continue
        d = draw(s)
        assert len(d.faint_maps) == len(d.info["faint_od"])
        ink = cv2.dilate(d.truth["ink"].astype(np.uint8), np.ones((5, 5), np.uint8)).astype(bool)
        for m, rec, target in zip(d.faint_maps, d.info["faint_od"], d.info["faint_targets"]):
            # ground truth: the planned green OD the generator scaled the piece to (brief: 0.02-0.08)
            assert 0.02 <= target <= 0.08
            assert abs(rec - target) < 0.008, (s, rec, target)
            # measured from the rgb after noise, rounding and JPEG, against the known glass light
            clear = m & ~ink & ~d.artefacts
            assert abs(_od(d, clear)[1] - rec) < 0.008, (s, _od(d, clear)[1], rec)
            seen += 1
    assert seen >= 4


def _unit(v):
    return v / np.linalg.norm(v)


def test_blood_leans_towards_haemoglobin(draws):
    # oxy-haemoglobin absorbs mostly blue and green (Prahl 1999): direction (0.02, 0.57, 0.82)
    hb = _unit(np.array([0.02, 0.57, 0.82]))
    n = 0
    for d in draws.values():
        t = d.truth
        core = cv2.erode(t["blood"].astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool) & ~t["ink"]
        plain = cv2.erode((t["tissue"] & ~t["blood"] & ~t["faint"]).astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool)
        plain &= ~cv2.dilate(t["ink"].astype(np.uint8), np.ones((5, 5), np.uint8)).astype(bool)
        if core.sum() < 50 or plain.sum() < 50:
            continue
        assert _unit(_od(d, core)) @ hb > _unit(_od(d, plain)) @ hb + 0.05, d.info["seed"]
        n += 1
    assert n >= 3


def test_marker_over_tissue_is_darker_than_tissue_beside_it(draws):
    n = 0
    for d in draws.values():
        t = d.truth
        over = cv2.erode((t["ink"] & t["tissue"]).astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool)
        near = cv2.dilate(t["ink"].astype(np.uint8), np.ones((31, 31), np.uint8)).astype(bool)
        beside = near & t["tissue"] & ~cv2.dilate(t["ink"].astype(np.uint8), np.ones((5, 5), np.uint8)).astype(bool)
        if over.sum() < 30 or beside.sum() < 30:
            continue
        # Beer-Lambert: ink OD adds to the tissue's, so ink over tissue lets through less light
        assert _od(d, over).sum() > _od(d, beside).sum() + 0.1, d.info["seed"]
        n += 1
    assert n >= 3


def test_ink_hue_follows_its_dye():
    # the dye table (ground truth of the draw): on bare glass a mark's OD points along its dye's
    seen = set()
    for s in range(80):
        p = plan(s)
        if len(p["dyes"]) != 1 or p["dyes"][0] in seen:
            continue
        d = draw(s)
        off = ~cv2.dilate(d.truth["tissue"].astype(np.uint8), np.ones((9, 9), np.uint8)).astype(bool)
        glass_ink = cv2.erode((d.truth["ink"] & off).astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool)
        if glass_ink.sum() < 50:
            continue
        od = _od(d, glass_ink)
        assert _unit(od) @ _unit(np.array(DYE_OD[p["dyes"][0]])) > 0.95, (s, p["dyes"], od)
        seen.add(p["dyes"][0])
        if len(seen) >= 3:
            return
    pytest.fail(f"only {seen} single-dye draws among 80 seeds")


def test_every_layout_and_dye_appears_over_30_plans():
    plans = [plan(s) for s in range(30)]
    assert {p["layout"] for p in plans} == set(LAYOUTS)
    assert set().union(*(p["dyes"] for p in plans)) == set(DYES)
    assert {p["jpeg_quality"] is None for p in plans} == {True, False}
    assert all(p["jpeg_quality"] is None or 50 <= p["jpeg_quality"] <= 95 for p in plans)  # brief: 50-95
    assert all(0.15 <= v <= 1.6 for p in plans for v in p["stain_strength"])  # brief: 0.15-1.6x
    assert any(p["faint_targets"] for p in plans) and any(p["blood_share"] for p in plans)


def test_a_draw_renders_quickly():
    import time

    t = time.perf_counter()
    draw(11)
    assert time.perf_counter() - t < 2.0  # brief: one draw well under 2 s
