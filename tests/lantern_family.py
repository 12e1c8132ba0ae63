"""The LANTERN held-back family of hard slides: confirmation only (tests/tissue/test_lantern_family.py).
Written apart from the tissue masker and from every other family. ``draw(seed)`` renders one H&E
slide thumbnail with its ground truth; ``describe(info)`` says in one line what it holds.

A draw: a specimen layout (lantern_family_specimens.py) with packed red cells and maybe a fold
(lantern_family_blood.py), faint pieces at a planned green OD above glass, marker ink
(lantern_family_ink.py) and artefacts (lantern_family_debris.py), rendered by Beer-Lambert on a
subpixel grid and read down to the thumbnail (lantern_family_optics.py). Truth at the thumbnail:
a pixel is in a map when at least half its subpixels hold that thing."""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

import lantern_family_optics as op
from lantern_family_blood import HB, add_blood, fold
from lantern_family_debris import draw_debris
from lantern_family_ink import draw_marks
from lantern_family_plan import plan as make_plan
from lantern_family_specimens import LAYOUT_DRAWERS, faint_piece


@dataclass
class LanternDraw:
    rgb: np.ndarray
    mpp: float
    truth: dict
    info: dict
    light: np.ndarray  # glass light at the thumbnail (H x W x 3, 0-255): the rgb with nothing on the glass
    faint_maps: list  # per faint piece: its pixels (bool H x W)
    artefacts: np.ndarray  # pixels touched by a bubble, dust, lint or the coverslip edge (bool H x W)
    stains: dict  # the draw's unit OD vectors: "h", "e", "hb"


def _put(dst, p, a):
    """Add the Piece-window array ``a`` into the canvas array ``dst`` (clipped to the canvas)."""
    hs, ws = dst.shape[:2]
    y0, x0 = max(p.y0, 0), max(p.x0, 0)
    y1, x1 = min(p.y0 + a.shape[0], hs), min(p.x0 + a.shape[1], ws)
    if y1 > y0 and x1 > x0:
        dst[y0:y1, x0:x1] += a[y0 - p.y0:y1 - p.y0, x0 - p.x0:x1 - p.x0]


def _place_faint(rng, occupied, size):
    """A faint piece on free glass (None when none fits)."""
    hs, ws = occupied.shape
    for _ in range(40):
        cx, cy = rng.uniform(0.12, 0.88) * ws, rng.uniform(0.12, 0.88) * hs
        p = faint_piece(rng, cx, cy, size)
        h, w = p.cover.shape
        if p.y0 < 0 or p.x0 < 0 or p.y0 + h > hs or p.x0 + w > ws:
            continue
        if not (occupied[p.y0:p.y0 + h, p.x0:p.x0 + w] & p.cover).any():
            return p
    return None


def draw(seed: int) -> LanternDraw:
    plan = make_plan(seed)
    rng = np.random.default_rng([9203, seed])
    w, h, s = plan["width"], plan["height"], plan["sub"]
    hs, ws, um = h * s, w * s, plan["mpp"] / s
    hv = op.turned(rng, op.H_RJ, plan["stain_turn_deg"][0]) * plan["stain_strength"][0]
    ev = op.turned(rng, op.E_RJ, plan["stain_turn_deg"][1]) * plan["stain_strength"][1]

    pieces = LAYOUT_DRAWERS[plan["layout"]](rng, hs, ws, um)
    bloody = []
    if plan["blood_share"] > 0:
        picks = range(len(pieces)) if plan["layout"] == "marrow_clot" else \
            rng.choice(len(pieces), int(rng.integers(1, len(pieces) + 1)), replace=False)
        for i in picks:
            add_blood(rng, pieces[int(i)], um, plan["blood_share"])
            bloody.append(int(i))
    folded = bool(plan["fold"]) and fold(rng, max(pieces, key=lambda q: int(q.cover.sum())))

    hh, ee, hb = (np.zeros((hs, ws), np.float32) for _ in range(3))
    tissue, blood, faint = (np.zeros((hs, ws), np.float32) for _ in range(3))
    for p in pieces:
        for dst, a in ((hh, p.h), (ee, p.e), (hb, p.hb), (tissue, p.cover), (blood, p.blood)):
            _put(dst, p, a.astype(np.float32))
    np.minimum(tissue, 1, out=tissue)
    np.minimum(blood, 1, out=blood)

    # faint pieces, scaled so their mean green OD above glass is the planned one
    occupied = cv2.dilate((tissue > 0).astype(np.uint8), np.ones((3, 3), np.uint8), iterations=max(2, int(150 / um))) > 0
    faints = []
    for target in plan["faint_targets"]:
        p = _place_faint(rng, occupied, min(hs, ws) * rng.uniform(0.05, 0.1))
        if p is None:
            continue
        green = p.h * hv[1] + p.e * ev[1]
        k = target / float(green[p.cover].mean())
        p.h *= k
        p.e *= k
        for dst, a in ((hh, p.h), (ee, p.e), (tissue, p.cover), (faint, p.cover)):
            _put(dst, p, a.astype(np.float32))
        occupied[p.y0:p.y0 + p.cover.shape[0], p.x0:p.x0 + p.cover.shape[1]] |= p.cover
        faints.append((p, target))

    ys, xs = np.nonzero(tissue[::8, ::8] > 0)
    points = np.stack([xs * 8, ys * 8], 1) if len(ys) else np.zeros((0, 2))
    ink_od, ink_cover, marks = draw_marks(rng, hs, ws, um, plan["dyes"], plan["marks"], points)
    deb_od, deb_light, deb_cover, debris = draw_debris(rng, hs, ws, um, plan)

    illum = cv2.resize(op.illumination(rng, plan, h, w), (ws, hs), interpolation=cv2.INTER_LINEAR)
    light_sub = (illum * deb_light)[..., None] * op.glass(plan).astype(np.float32)
    od = hh[..., None] * hv.astype(np.float32) + ee[..., None] * ev.astype(np.float32)
    od += hb[..., None] * HB.astype(np.float32)
    od += ink_od + deb_od
    clean = op.area_mean(light_sub * np.power(np.float32(10), -od), s)
    light = op.area_mean(light_sub, s)

    truth = {k: op.area_mean(v.astype(np.float32), s) >= 0.5
             for k, v in (("tissue", tissue), ("ink", ink_cover), ("blood", blood), ("faint", faint))}
    artefacts = op.area_mean(deb_cover.astype(np.float32), s) > 0
    touched = (op.area_mean(ink_cover.astype(np.float32), s) > 0) | artefacts
    faint_maps, faint_od = [], []
    for p, _ in faints:
        one = np.zeros((hs, ws), np.float32)
        _put(one, p, p.cover.astype(np.float32))
        m = (op.area_mean(one, s) >= 0.5) & truth["faint"]
        clear = m & ~touched
        if clear.sum() < 10:
            continue
        faint_maps.append(m)
        faint_od.append(round(float(np.mean(-np.log10(clean[..., 1][clear] / light[..., 1][clear]))), 5))

    rgb = op.finish(rng, clean, plan)
    info = {"seed": int(seed), "faint_od": faint_od, "faint_targets": [round(t, 5) for _, t in faints],
            "layout": plan["layout"], "pieces": [p.name for p in pieces], "blood_pieces": bloody,
            "blood_share": round(plan["blood_share"], 3), "folded": folded, "marks": marks,
            "debris": debris, "mpp": plan["mpp"], "scan_mpp": plan["scan_mpp"], "level": plan["level"],
            "size": [w, h], "sub": s, "stain_strength": [round(v, 3) for v in plan["stain_strength"]],
            "tint": plan["tint"], "light": plan["light"], "jpeg_quality": plan["jpeg_quality"]}
    return LanternDraw(rgb, float(plan["mpp"]), truth, info, light.astype(np.float32), faint_maps, artefacts,
                       {"h": hv / np.linalg.norm(hv), "e": ev / np.linalg.norm(ev), "hb": HB})


def describe(info: dict) -> str:
    """One line: what the draw holds."""
    ink = ", ".join(f"{m['dye']} {m['kind']}" + (" on tissue" if m["aimed_at_tissue"] else "") for m in info["marks"])
    faint = "faint OD " + "/".join(f"{v:.3f}" for v in info["faint_od"]) if info["faint_od"] else "no faint piece"
    blood = f"red cells ~{info['blood_share']:.0%} of {len(info['blood_pieces'])} piece(s)" if info["blood_pieces"] else "no red cells"
    return (f"lantern {info['seed']}: {info['layout']} ({len(info['pieces'])} piece(s){', folded' if info['folded'] else ''}) "
            f"at {info['mpp']} µm/px, stains H {info['stain_strength'][0]}x E {info['stain_strength'][1]}x, {info['tint']} glass, "
            f"{info['light']} light, JPEG {info['jpeg_quality']}; {blood}; {faint}; ink: {ink or 'none'}; "
            f"artefacts: {', '.join(info['debris']) or 'none'}")
