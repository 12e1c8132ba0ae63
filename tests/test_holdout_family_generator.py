"""The held-back family's GENERATOR (tests/holdout_family.py) checked against its own drawn
parameters, never against the tissue mask (which must not be run on the family outside the
opt-in confirmation, tests/tissue/test_holdout_family.py).

Sources: the drawn parameters in ``info`` (glass colour, stain vectors, faint ODs), the
illumination field the generator drew (``layers["light"]``), and Beer–Lambert (OD = -log10 of the
light over the glass's light; Ruifrok & Johnston 2001, Table 1, for the unturned H and E vectors).
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from holdout_family import FINE, draw
from holdout_family_optics import DYES, HAEMOGLOBIN, RJ_E, RJ_H, unit

SEEDS = (3, 7, 10, 13)  # among them: faint pieces, edge and inside haemorrhages, marks over glass


@pytest.fixture(scope="module")
def draws():
    return {s: draw(s) for s in SEEDS}


def _grow(m, r):
    return cv2.dilate(m.astype(np.uint8), np.ones((2 * r + 1, 2 * r + 1), np.uint8)).astype(bool)


def _flat(d):
    """The thumbnail divided by the drawn illumination: glass × 10^-OD (plus noise and JPEG)."""
    return d.rgb.astype(np.float64) / d.layers["light"]


def _glass(d):
    return ~_grow(d.truth["tissue"] | d.truth["ink"], 6) & ~_grow(d.layers["debris"], 3)


def _deg(a, b):
    return np.degrees(np.arccos(np.clip(unit(a) @ unit(b), -1, 1)))


def test_glass_colour_measured_is_the_drawn_one(draws):
    for s, d in draws.items():
        got = np.median(_flat(d)[_glass(d)], axis=0)
        # 8-bit rounding, noise and JPEG leave the median within 1.5 levels of the drawn glass
        assert np.abs(got - np.array(d.info["glass"])).max() < 1.5, (s, got, d.info["glass"])


def test_drawn_geometry_and_stains_are_within_the_issue_ranges(draws):
    for s, d in draws.items():
        i = d.info
        assert 0.24 <= i["scan_mpp"] <= 0.5 and i["level"] in (16, 32)
        assert d.mpp == pytest.approx(i["scan_mpp"] * i["level"]) and 5.5 < d.mpp < 11.5
        # turned at most 8° from Ruifrok & Johnston's vectors (issue 28)
        assert _deg(i["h_vector"], RJ_H) <= 8.01 and _deg(i["e_vector"], RJ_E) <= 8.01
        assert 0.15 <= i["h_strength"] <= 1.6 and 0.15 <= i["e_strength"] <= 1.6


def _blocks(a, f=8):
    h, w = a.shape[0] // f, a.shape[1] // f
    return a[:h * f, :w * f].reshape(h, f, w, f, *a.shape[2:]).mean(axis=(1, 3))


def _off(vecs, x):
    """Distance of each OD row of ``x`` from the plane spanned by ``vecs``, over its length."""
    q, _ = np.linalg.qr(np.array(vecs).T)
    return np.linalg.norm(x - (x @ q) @ q.T, axis=1) / np.linalg.norm(x, axis=1)


def test_tissue_od_lies_on_the_drawn_he_plane(draws):
    """Tissue away from ink, blood and debris: OD (Beer–Lambert against the drawn glass) of the
    mean light of each 8 × 8 block (JPEG's block: chroma subsampling and quantization keep a
    block's mean light, not each pixel's colour) in the plane of the drawn H and E vectors; the
    same blocks lie clearly off a plane turned 20° more, and blood lies off the plane
    (haemoglobin is not a mix of H and E)."""
    for s, d in draws.items():
        t = d.truth
        flat, glass = _flat(d), np.array(d.info["glass"])
        keep = _blocks((t["tissue"] & ~_grow(t["ink"] | t["blood"], 3) & ~_grow(d.layers["debris"], 2)).astype(float)) == 1
        v = -np.log10(_blocks(flat)[keep] / glass)
        v = v[np.linalg.norm(v, axis=1) > 0.1]
        assert len(v) > 50, s
        h, e = np.array(d.info["h_vector"]), np.array(d.info["e_vector"])
        on = np.median(_off([h, e], v))
        assert on < 0.04, (s, on)
        normal = unit(np.cross(h, e))
        wrong = unit(np.cos(np.radians(20)) * h + np.sin(np.radians(20)) * normal)
        assert np.median(_off([wrong, e], v)) > 3 * on, s
        cells = _blocks((t["blood"] & ~_grow(t["ink"] | d.layers["debris"], 3)).astype(float)) == 1
        if cells.sum() > 20:
            b = -np.log10(_blocks(flat)[cells] / glass)
            expect = _off([h, e], unit(HAEMOGLOBIN)[None])[0]  # haemoglobin's own distance from the plane
            assert np.median(_off([h, e], b)) > max(3 * on, 0.3 * expect), (s, expect)


def test_each_faint_piece_has_its_drawn_od(draws):
    checked = 0
    for s, d in draws.items():
        flat, faint = _flat(d)[..., 1], d.truth["faint"]
        assert len(d.info["faint_od"]) == len(d.info["faint"])
        for od, f in zip(d.info["faint_od"], d.info["faint"]):
            y0, x0, y1, x1 = f["box"]
            region = np.zeros_like(faint)
            region[y0:y1 + 1, x0:x1 + 1] = faint[y0:y1 + 1, x0:x1 + 1]
            ring = _grow(region, 10) & ~_grow(region, 3) & _glass(d)
            got = -np.log10(flat[region].mean() / np.median(flat[ring]))
            assert 0.03 <= od <= 0.125 and abs(got - od) <= 0.01, (s, od, got)
            checked += 1
    assert checked >= 3


def test_ink_over_glass_stands_out_of_the_glass_noise(draws):
    checked = 0
    for s, d in draws.items():
        flat, glass = _flat(d), _glass(d)
        over = cv2.erode((d.truth["ink"] & ~_grow(d.truth["tissue"], 3) & ~d.layers["debris"]).astype(np.uint8),
                         np.ones((5, 5), np.uint8)).astype(bool)
        for m in d.info["marks"]:
            y0, x0, y1, x1 = (v // FINE for v in m["box"])
            sel = np.zeros_like(over)
            sel[y0:y1, x0:x1] = over[y0:y1, x0:x1]
            if sel.sum() < 50:
                continue
            c = int(np.argmax(DYES[m["dye"]]))
            g = flat[..., c][glass]
            sigma = 1.4826 * np.median(np.abs(g - np.median(g)))  # the glass's own noise (MAD)
            assert np.median(g) - np.median(flat[..., c][sel]) > 10 * max(sigma, 0.5), (s, m)
            checked += 1
    assert checked >= 3


def test_blood_and_faint_are_tissue_and_seeds_reproduce(draws):
    for s, d in draws.items():
        t = d.truth
        assert not (t["blood"] & ~t["tissue"]).any() and not (t["faint"] & ~t["tissue"]).any()
        assert all(v.shape == d.rgb.shape[:2] and v.dtype == bool for v in t.values())
        assert bool(t["faint"].any()) == bool(d.info["faint_od"])
    assert any(d.truth["blood"].any() for d in draws.values())
    again = draw(SEEDS[0])
    first = draws[SEEDS[0]]
    assert np.array_equal(again.rgb, first.rgb) and again.info == first.info
    assert all(np.array_equal(again.truth[k], first.truth[k]) for k in first.truth)
    assert not np.array_equal(draws[SEEDS[1]].rgb[:50, :50], first.rgb[:50, :50])
