"""Fast checks of the veiled family's generator against its own drawn quantities (never against the
tissue masker, which must not see this family before the lead's one confirmation run). Sources:
the plan each draw records, the ground truth the generator constructs, and the published vectors
its optics use (Ruifrok & Johnston 2001 for H and E; Prahl's oxy-haemoglobin table reduced to RGB).
"""

from __future__ import annotations

import json
import math
from functools import lru_cache

import cv2
import numpy as np
import pytest

import veiled_family as vf
from veiled_family_optics import DYES, HB
from veiled_family_plan import DYES as DYE_NAMES
from veiled_family_plan import LAYOUTS, plan

SEEDS = (0, 1, 3, 4, 7, 10, 12, 15)  # a few rendered draws, covering every layout (checked below)


@lru_cache(maxsize=None)
def drawn(seed: int):
    return vf.draw(seed)


def _od(rgb, glass, sel):
    """Measured OD above the planned glass light, per channel, of the pixels ``sel`` (mean light)."""
    return -np.log10(rgb[sel].astype(np.float64).mean(0) / glass[sel].mean(0))


def test_same_seed_same_pixels_and_truth():
    a, b = vf.draw(5), vf.draw(5)
    assert np.array_equal(a.rgb, b.rgb), "same seed must give the same pixels (seeded generator)"
    assert all(np.array_equal(a.truth[k], b.truth[k]) for k in a.truth), "same seed, same truth maps"
    assert json.dumps(a.info, sort_keys=True) == json.dumps(b.info, sort_keys=True), "same seed, same info"
    c = drawn(0).rgb
    assert c.shape != a.rgb.shape or not np.array_equal(c, a.rgb), "another seed gives another slide"


def test_plans_span_the_parameter_ranges():
    ps = [plan(s) for s in range(30)]
    scan = [q["scan_mpp"] for q in ps]
    assert 0.24 <= min(scan) < 0.27 and 0.45 < max(scan) <= 0.5, f"scan um/px spans 0.24-0.5 (brief): {min(scan)}, {max(scan)}"
    for q in ps:
        d = q["downsample"]
        assert d & (d - 1) == 0, "the level's downsample is a power of two (pyramid levels)"
        assert d == 2 ** round(math.log2(8 / q["scan_mpp"])), "the level nearest 8 um/px (in log scale)"
        h, w = q["size"]
        assert 350 <= h <= 900 and 450 <= w <= 900, f"thumbnail size 350-900 px (brief): {h}x{w}"
        assert math.ceil(q["full_size"][1] / d) == w, "thumbnail width = full width / downsample, rounded up"
        assert q["mpp"] == pytest.approx(q["scan_mpp"] * q["full_size"][1] / w), "thumbnail um/px = scan um/px x full/thumb width"
        assert abs(q["mpp"] - q["scan_mpp"] * d) > 1e-6, "thumbnail um/px is not the nominal level value"
        assert all(215 <= g <= 250 for g in q["glass"]), "glass colour 215-250 per channel (brief)"
        assert 0.15 <= q["stain"]["h"] <= 1.6 and 0.15 <= q["stain"]["e"] <= 1.6, "stain strengths 0.15-1.6x (brief)"
        assert abs(q["stain"]["h_turn"]) <= 8 and abs(q["stain"]["e_turn"]) <= 8, "stain vectors turned at most 8 deg (brief)"
        assert 45 <= q["jpeg"]["quality"] <= 95, "JPEG quality 45-95 (brief)"
        assert all(0.038 <= t <= 0.12 for t in q["faint"]["targets"]), "faint targets 0.038-0.12 OD (brief: 0.03-0.12)"
        assert all(0.3 <= m["width_mm"] <= 2.0 for m in q["ink"]), "marker width 0.3-2 mm (brief)"
    strengths = [q["stain"][k] for q in ps for k in "he"]
    assert min(strengths) < 0.3 and max(strengths) > 1.0, "stain strengths spread over the range"
    assert len({q["layout"] for q in ps}) >= 5, "at least five of the six layouts in 30 draws"
    assert {q["jpeg"]["subsample"] for q in ps} == {True, False}, "with and without chroma subsampling"
    q_all = [q["jpeg"]["quality"] for q in ps]
    assert min(q_all) < 60 and max(q_all) > 85, "JPEG quality spread"
    assert {m["dye"] for q in ps for m in q["ink"]} == set(DYE_NAMES), "every dye colour, red included"
    assert any(q["blood"] for q in ps) and not all(q["blood"] for q in ps), "draws with and without blood"
    assert any(q["faint"]["targets"] for q in ps) and not all(q["faint"]["targets"] for q in ps), "draws with and without faint pieces"
    assert max(q["blood"]["share"] for q in ps if q["blood"]) > 0.4, "red-cell share reaches high values (up to 0.6)"
    for art in ("bubbles", "dust", "fibres", "blur_patches"):
        assert any(q["debris"][art] for q in ps), f"some draws carry {art}"
    assert any(q["debris"]["coverslip_edge"] for q in ps) and any(q["debris"]["label_corner"] is not None for q in ps)
    assert any(q["folds"] for q in ps) and any(q["tears"] for q in ps), "folds and tears drawn"


def test_rendered_draws_cover_the_layouts():
    assert {drawn(s).info["layout"] for s in SEEDS} == set(LAYOUTS), "the rendered test draws hold every layout"


@pytest.mark.parametrize("seed", SEEDS)
def test_truth_maps_are_consistent(seed):
    d = drawn(seed)
    h, w = d.info["size"]
    assert d.rgb.shape == (h, w, 3) and d.rgb.dtype == np.uint8, "rgb is the planned uint8 thumbnail"
    assert d.mpp == d.info["mpp"], "mpp reported as planned"
    t = d.truth
    assert set(t) == {"tissue", "ink", "blood", "faint"}, "the four truth maps of the interface"
    assert all(v.shape == (h, w) and v.dtype == bool for v in t.values()), "truth maps are bool (H, W)"
    assert t["tissue"].mean() > 0.02, "the draw holds tissue"
    assert not (t["blood"] & ~t["tissue"]).any(), "blood is a subset of tissue (constructed so)"
    assert not (t["faint"] & ~t["tissue"]).any(), "faint is a subset of tissue (constructed so)"
    assert not (t["faint"] & t["ink"]).any(), "no ink on faint pieces (clear zone)"
    assert (t["tissue"] & ~t["ink"]).sum() >= 0.6 * t["tissue"].sum(), "ink covers at most ~30 % of tissue (budget)"
    assert len(d.info["faint_od"]) == sum(q["kind"] == "faint" for q in d.info["pieces"]), "one faint_od per faint piece"
    json.dumps(d.info)
    line = vf.describe(d.info)
    assert "\n" not in line and d.info["layout"].replace("_", " ") in line, "describe gives one line naming the layout"
    if t["faint"].any():  # faint pieces lie well apart from other tissue and from ink
        other = (t["tissue"] & ~t["faint"]) | t["ink"]
        dist = cv2.distanceTransform((~other).astype(np.uint8), cv2.DIST_L2, 5)
        assert dist[t["faint"]].min() * d.mpp >= 200, "faint pieces >= 0.2 mm from other tissue and ink (planned 0.3-0.6 mm)"


@pytest.mark.parametrize("seed", SEEDS)
def test_glass_measures_the_planned_colour(seed):
    d = drawn(seed)
    busy = d.truth["tissue"] | d.truth["ink"] | d.layers["debris_any"]
    far = cv2.distanceTransform((~busy).astype(np.uint8), cv2.DIST_L2, 5) > 8
    assert far.sum() > 2000, "a glass-only region exists"
    got = d.rgb[far].astype(np.float64).mean(0)
    want = d.layers["glass"][far].mean(0)
    # a flat area keeps its mean but for the quantised DC terms: IJG tables (luma DC 16, chroma DC
    # 17) scaled by quality; the DC of an 8 x 8 block is 8 x its mean, and blue = Y + 1.772 Cb
    q = d.info["jpeg"]["quality"]
    scale = 5000 / q if q < 50 else 200 - 2 * q
    step_y, step_c = (16 * scale + 50) // 100, (17 * scale + 50) // 100
    tol = 0.6 + step_y / 16 + 1.772 * step_c / 16
    assert np.abs(got - want).max() < tol, f"bare glass measures the planned glass light within noise and JPEG DC steps ({tol:.2f}): {got} vs {want}"


@pytest.mark.parametrize("seed", SEEDS)
def test_faint_pieces_measure_their_recorded_od(seed):
    d = drawn(seed)
    labels = [k + 1 for k, q in enumerate(d.info["pieces"]) if q["kind"] == "faint"]
    for lab, od in zip(labels, d.info["faint_od"]):
        sel = d.truth["faint"] & (d.layers["label"] == lab)
        got = _od(d.rgb, d.layers["glass"], sel)[1]
        assert abs(got - od) < 0.012, f"faint piece {lab}: measured green OD {got:.4f} vs recorded (noise-free) {od:.4f}"
        target = d.info["pieces"][lab - 1]["target_od"]
        assert abs(od - target) < 0.3 * target, f"faint piece {lab}: recorded OD {od:.4f} near its planned {target}"
        assert 0.03 <= od <= 0.13, "faint pieces 0.03-0.12 OD above glass in green (brief)"


@pytest.mark.parametrize("seed", SEEDS)
def test_ordinary_tissue_is_plainly_visible(seed):
    d = drawn(seed)
    free = d.truth["tissue"] & ~d.truth["ink"] & ~d.truth["faint"]
    for lab, q in enumerate(d.info["pieces"], start=1):
        sel = free & (d.layers["label"] == lab)
        if q["kind"] == "faint" or sel.sum() < 30:
            continue
        od = _od(d.rgb, d.layers["glass"], sel)[1]
        assert od >= 0.08, f"piece {lab} ({q['kind']}): mean green OD above glass {od:.3f} >= 0.08 (fair truth)"


@pytest.mark.parametrize("seed", [s for s in SEEDS if plan(s)["blood"]])
def test_blood_absorbs_as_haemoglobin(seed):
    d = drawn(seed)
    sel = d.truth["blood"] & ~d.truth["ink"] & ~d.layers["debris_any"]
    if sel.sum() < 30:
        pytest.skip("no ink-free blood drawn")
    od = _od(d.rgb, d.layers["glass"], sel)
    assert od[1] >= 0.15, f"blood regions at least 0.15 green OD (constructed): {od}"
    assert od[0] < 0.8 * od[1], f"blood absorbs less in red than green (Prahl HbO2 vector {HB.round(3)}): {od}"


@pytest.mark.parametrize("seed", SEEDS)
def test_ink_over_glass_has_its_dye_colour(seed):
    d = drawn(seed)
    glass_only = ~cv2.dilate((d.truth["tissue"] | d.layers["debris_any"]).astype(np.uint8), np.ones((5, 5), np.uint8)).astype(bool)
    for k, m in enumerate(d.info["ink"], start=1):
        core = cv2.erode((d.layers["ink_label"] == k).astype(np.uint8), np.ones((5, 5), np.uint8)).astype(bool) & glass_only
        if core.sum() < 40:
            continue
        od = _od(d.rgb, d.layers["glass"], core)
        cos = float(od @ DYES[m["dye"]] / np.linalg.norm(od))
        assert cos > 0.9, f"mark {k} ({m['dye']} {m['kind']}) measures OD {od.round(3)}, direction of its dye vector (cos {cos:.3f})"
