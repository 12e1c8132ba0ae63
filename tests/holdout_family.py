"""The HELD-BACK family of hard H&E slides (issue 28): written apart from the tissue mask and from
every other family of the project, never used while tuning, run once to confirm
(tests/tissue/test_holdout_family.py, opt-in). Never change it after seeing its results.

``draw(seed)`` gives a :class:`Drawn`: a thumbnail as a scanner's pyramid level near 8 µm/px gives
it, with the ground truth of what was drawn. Each draw picks:

- a scan at 0.24-0.5 µm/px (odd values, four decimals), read at the pyramid level 2^k below it
  nearest 8 µm/px (so the thumbnail is at about 5.8-11.3 µm/px);
- stain vectors turned by up to 8° from Ruifrok & Johnston (2001) H and E about random axes, and
  strengths 0.15-1.6× drawn apart (log-uniform), each piece ±20 % more (section thickness);
- glass brightness 218-248 with a tint (neutral, blue, yellow, pink or green, up to ~9 levels a
  channel), uneven light (tilt, fall-off, colour shading, scan-strip gains), shot and read noise,
  8 bits, then JPEG quality 50-95 with 4:4:4, 4:2:2 or 4:2:0 chroma, each 256-pixel tile apart;
- a layout (tests/holdout_family_layouts.py): colon wall, carcinoma, bronchial wall, endoscopic
  biopsies or leiomyoma, with fat, mucin, necrosis, cartilage, crush as the layout has them;
- bench artefacts: knife chatter, stain pooled at the edges, folds (double density);
- blood in 60 % of draws: a haemorrhage at a piece's edge or inside it (5-60 % of the piece),
  vessels filled with red cells, or an edge haemorrhage and vessels together; red cells are
  haemoglobin (tests/holdout_family_optics.py), one 7.5 µm disc with central pallor a cell;
- faint tissue in 35 % of draws: one or two separate pieces whose mean OD above glass in green is
  drawn in 0.032-0.12;
- marks in 75 % of draws, debris (dust, lint, bubbles) (tests/holdout_family_marks.py).

Physics: every absorber adds OD per RGB channel on a fine grid at a third of the thumbnail's
pixel (1.9-3.8 µm); light = glass × illumination × 10^-OD, the fine light averaged over each
thumbnail pixel (Beer–Lambert, as in Ruifrok & Johnston 2001).

Truth maps, (H, W) bool at the thumbnail; a pixel is in a map when at least half of its area (of
its 3 × 3 fine pixels) is covered:

- ``tissue``: every piece's outline filled. Empty spaces inside a piece (gland and crypt lumens,
  cribriform holes, vessel lumens, adipocytes, cartilage lacunae) are tissue; fat (at most one
  lobule, enclosed by tissue: in the colon's submucosa or in a carcinoma's stroma at least
  150 µm inside the outline) and mucin lakes are tissue. A haemorrhage at an edge
  widens the piece: it is tissue. Dust, lint and bubbles are not tissue.
- ``blood``: the regions drawn as red cells (a haemorrhage, the filled part of a vessel's lumen);
  a subset of ``tissue``.
- ``faint``: the faint pieces; a subset of ``tissue``; ``info["faint_od"]`` gives each one's OD
  above glass in green, ``-log10`` of its mean green transmission over its ``faint`` pixels
  (measured on the drawn light before noise and JPEG). Nothing (marks, dust, bubbles) lies
  within 0.3 mm of a faint piece.
- ``ink``: each mark's footprint (every point within half the stroke's width of its centreline,
  a dot's disc), whatever lies under it, wiped parts included (at least 35 % of the dye is left).

``layers`` (for the generator's own tests): ``light`` (H, W, 3), the illumination field;
``debris``: pixels touched by dust, lint or bubbles at all.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from holdout_family_blood import haemorrhage, vessels
from holdout_family_layouts import KINDS, LAYOUTS, Sheet, blob, free_spot
from holdout_family_marks import DUST_VECTOR, debris, marks
from holdout_family_optics import (HAEMOGLOBIN, RJ_E, RJ_H, block_mean, draw_light, expose, illumination,
                                   jpeg_tiles, smooth, transmission, turned, unit)
from holdout_family_stain import chatter, edge_pooling, fold, paint, red_cells

FINE = 3  # fine pixels a thumbnail pixel, each way
TINTS = {"neutral": (0, 0, 0), "blue": (-6, -2, 5), "yellow": (3, 2, -9), "pink": (4, -4, 2), "green": (-4, 3, -3)}


@dataclass
class Drawn:
    """One draw: ``rgb`` (H, W, 3) uint8 after JPEG, ``mpp`` its µm/px, ``truth`` the maps above,
    ``info`` what was drawn (with ``faint_od``), ``layers`` the generator's own extra maps."""

    rgb: np.ndarray
    mpp: float
    truth: dict
    info: dict
    layers: dict = field(default_factory=dict)


def _covered(a: np.ndarray) -> np.ndarray:
    return block_mean(a.astype(np.float32), FINE) >= 0.5


def _faint_pieces(rng, sh: Sheet, count: int) -> list[tuple[int, float, str]]:
    import cv2

    out = []
    taken = cv2.dilate((sh.piece > 0).astype(np.uint8), np.ones((int(sh.px(400)) | 1,) * 2, np.uint8)).astype(bool)
    for _ in range(count):
        r = sh.px(rng.uniform(200, 650))
        spot = free_spot(rng, taken, r * 1.6)
        if spot is None:
            continue
        kind = str(rng.choice(["stroma", "lymphoid", "epithelium", "mucin"]))
        m = blob(rng, sh.shape, *spot, r * rng.uniform(0.5, 1.0), r, rng.uniform(0, np.pi), rough=0.35) & ~taken
        if _covered(m).sum() < 30:
            continue
        n = sh.add_piece(m, KINDS[kind], np.pi * smooth(rng, sh.shape, sh.px(300)))
        taken |= cv2.dilate(m.astype(np.uint8), np.ones((int(sh.px(400)) | 1,) * 2, np.uint8)).astype(bool)
        out.append((n, float(rng.uniform(0.032, 0.12)), kind))
    return out


def _scale_to(od_g: np.ndarray, cover: np.ndarray, target: float) -> float:
    """The factor on ``od_g`` (fine green OD of one piece's crop) making its mean green
    transmission over the thumbnail pixels ``cover`` equal 10^-target (bisection)."""
    lo, hi = 0.0, 1.0
    def od(a):
        return -np.log10(block_mean(np.power(10.0, -a * od_g, dtype=np.float32), FINE)[cover].mean())
    while od(hi) < target:
        hi *= 2
    for _ in range(30):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if od(mid) < target else (lo, mid)
    return (lo + hi) / 2


def draw(seed: int) -> Drawn:
    """The draw ``seed`` of the family (deterministic)."""
    import cv2

    rng = np.random.default_rng([int(seed), 0x4B5])
    scan = round(float(rng.uniform(0.24, 0.5)), 4)
    k = int(round(np.log2(8.0 / scan)))
    mpp = scan * 2 ** k
    W, H = int(rng.integers(760, 1000)), int(rng.integers(560, 760))
    sh = Sheet((H * FINE, W * FINE), mpp / FINE)
    tint = str(rng.choice(list(TINTS)))
    glass = np.clip(rng.uniform(218, 248) + np.array(TINTS[tint]) * rng.uniform(0.3, 1.5), 150, 252)
    light = draw_light(rng, 1000 / mpp)
    h_vec, h_deg = turned(rng, RJ_H)
    e_vec, e_deg = turned(rng, RJ_E)
    s_h, s_e = (float(np.exp(rng.uniform(np.log(0.15), np.log(1.6)))) for _ in range(2))
    names = list(LAYOUTS)
    layout = str(rng.choice(names, p=[LAYOUTS[n][1] for n in names]))
    lay = LAYOUTS[layout][0](rng, sh)
    # blood
    region, blood = np.zeros(sh.shape, bool), {"kind": "none"}
    if rng.random() < 0.6 and lay["pieces"]:
        kind = str(rng.choice(["edge", "inside", "vessels", "edge+vessels"], p=[0.35, 0.25, 0.25, 0.15]))
        sizes = [(sh.piece == n).sum() for n in lay["pieces"]]
        piece = lay["pieces"][int(np.argmax(sizes))]
        blood = {"kind": kind, "piece": int(piece)}
        if kind in ("edge", "inside", "edge+vessels"):
            blood["share_drawn"] = round(float(rng.uniform(0.05, 0.6)), 3)
            region |= haemorrhage(rng, sh, piece, blood["share_drawn"], "inside" if kind == "inside" else "edge")
        if "vessels" in kind:
            vz = lay["vessel_zone"] & (sh.piece > 0) & ~region
            r2, facts = vessels(rng, sh, vz, sh.piece, int(rng.integers(2, 9)))
            region |= r2
            blood["vessels"] = facts
        pm = sh.piece == piece
        blood["share"] = round(float((region & pm).sum() / max(1, pm.sum())), 3)
    faint = _faint_pieces(rng, sh, int(rng.integers(1, 3))) if rng.random() < 0.35 else []
    faint_mask = np.isin(sh.piece, [n for n, _, _ in faint]) if faint else np.zeros(sh.shape, bool)
    Hc, Ec = paint(rng, sh, s_h, s_e)
    normal = (sh.piece > 0) & ~faint_mask
    bench = {}
    if rng.random() < 0.3:
        bench["chatter"] = chatter(rng, Hc, Ec, normal, sh.p)
    if rng.random() < 0.4:
        bench["edge_pooling"] = edge_pooling(rng, Hc, Ec, normal, sh.p)
    if rng.random() < 0.35:
        bench["folds"] = [f for f in (fold(rng, sh, Hc, Ec, int(rng.choice(lay["pieces"])))
                                      for _ in range(rng.integers(1, 3))) if f] if lay["pieces"] else []
    hb = np.zeros(sh.shape, np.float32)
    if region.any():
        packing = np.clip(rng.uniform(0.55, 0.9) + 0.12 * smooth(rng, sh.shape, sh.px(80)), 0.3, 1.0)
        cells = red_cells(rng, region, sh.p, packing)
        blood["hb_od"] = round(float(rng.uniform(0.45, 1.1)), 2)
        hb = cells * blood["hb_od"]
        Ec += 0.12 * s_e * cells
    faint_info = []
    for n, target, kind in faint:
        m = sh.piece == n
        ys, xs = np.nonzero(m)
        y0, x0 = ys.min() // FINE * FINE, xs.min() // FINE * FINE
        y1, x1 = (ys.max() // FINE + 1) * FINE, (xs.max() // FINE + 1) * FINE
        odg = Hc[y0:y1, x0:x1] * h_vec[1] + Ec[y0:y1, x0:x1] * e_vec[1]
        a = _scale_to(odg, _covered(m[y0:y1, x0:x1]), target)
        Hc[m] *= a
        Ec[m] *= a
        faint_info.append({"piece": n, "kind": kind, "box": [int(y0 // FINE), int(x0 // FINE), int(y1 // FINE), int(x1 // FINE)]})
    faint_zone = cv2.dilate(faint_mask.astype(np.uint8), np.ones((int(sh.px(300)) | 1,) * 2, np.uint8)).astype(bool)
    ink_od = np.zeros((*sh.shape, 3), np.float32)
    ink_fp = np.zeros(sh.shape, bool)
    boxes = []
    for n in lay["pieces"]:
        ys, xs = np.nonzero(sh.piece[::8, ::8] == n)
        if ys.size:
            boxes.append((ys.min() * 8, xs.min() * 8, ys.max() * 8, xs.max() * 8))
    mark_info = marks(rng, normal, faint_zone, boxes, sh.p, ink_od, ink_fp)
    neutral = np.zeros(sh.shape, np.float32)
    art = np.zeros(sh.shape, bool)
    debris_info = debris(rng, sh.shape, sh.p, faint_zone, neutral, art)
    od = ink_od
    for amount, vec in ((Hc, h_vec), (Ec, e_vec), (hb, unit(HAEMOGLOBIN)), (neutral, DUST_VECTOR)):
        od += amount[..., None] * vec.astype(np.float32)
    trans = transmission(od, FINE)
    del od, ink_od
    field_ = illumination(light, (H, W))
    noise = {"shot": float(rng.uniform(0.02, 0.15)), "read": float(rng.uniform(0.3, 1.5))}
    raw = expose(rng, trans, glass, field_, noise)
    jpeg = {"quality": int(rng.integers(50, 96)), "subsampling": int(rng.choice([0, 1, 2], p=[0.2, 0.3, 0.5]))}
    rgb = jpeg_tiles(raw, jpeg["quality"], jpeg["subsampling"], 256)
    truth = {"tissue": _covered(sh.piece > 0), "ink": _covered(ink_fp)}
    truth["blood"] = _covered(region) & truth["tissue"]
    truth["faint"] = _covered(faint_mask) & truth["tissue"]
    faint_od = []
    for f, (n, target, _) in zip(faint_info, faint):
        t = _covered(sh.piece == n)
        faint_od.append(round(float(-np.log10(trans[..., 1][t].mean())), 5))
        f["target_od"] = round(target, 4)
    info = {"seed": int(seed), "scan_mpp": scan, "level": 2 ** k, "mpp": mpp, "size": [H, W], "layout": layout,
            "pieces": len(lay["pieces"]), "kinds": lay["kinds"],
            "tissue_extra": {k2: v for k2, v in lay.items() if k2 not in ("pieces", "kinds", "vessel_zone")},
            "glass": [round(float(v), 2) for v in glass], "tint": tint, "light": light, "noise": noise, "jpeg": jpeg,
            "h_vector": [round(float(v), 4) for v in h_vec], "e_vector": [round(float(v), 4) for v in e_vec],
            "h_turn_deg": round(h_deg, 2), "e_turn_deg": round(e_deg, 2), "h_strength": round(s_h, 3),
            "e_strength": round(s_e, 3), "bench": bench, "blood": blood, "faint": faint_info, "faint_od": faint_od,
            "marks": mark_info, "debris": debris_info}
    layers = {"light": field_, "debris": block_mean(art.astype(np.float32), FINE) > 0}
    return Drawn(rgb=rgb, mpp=float(mpp), truth=truth, info=info, layers=layers)


def describe(info: dict) -> str:
    """One line of what a draw holds (for the harness's list of missed draws)."""
    marks_ = ", ".join(f"{m['dye']} {m['kind']} {m['where']} {m['width_um']}µm od{m['od']}"
                       + (" wiped" if m["wiped"] else "") for m in info["marks"]) or "no marks"
    b = info["blood"]
    blood = "no blood" if b["kind"] == "none" else f"blood {b['kind']} {b.get('share', 0):.2f}"
    return (f"{info['layout']} at {info['mpp']:.3f} µm/px (scan {info['scan_mpp']}), H x{info['h_strength']} "
            f"E x{info['e_strength']}, turned {info['h_turn_deg']}°/{info['e_turn_deg']}°, glass {info['glass']} "
            f"{info['tint']}, jpeg {info['jpeg']['quality']}/{info['jpeg']['subsampling']}, {blood}, "
            f"faint {info['faint_od']}, bench {sorted(info['bench'])}, {marks_}")
