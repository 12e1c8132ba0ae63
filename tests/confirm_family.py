"""The CONFIRMATION family of hard H&E slides: a held-back family written apart from the tissue
mask and from the other hard-slide families, run only to confirm the mask's aims
(tests/tissue/test_confirm_family.py). Never tune the mask on it, and never change the family
after seeing how the mask does on it.

``draw(seed)`` returns a :class:`Drawn`: a thumbnail as a scanner's pyramid level near 8 µm/px
gives it (JPEG-compressed), its µm/px, ground-truth maps and what was drawn.

Physics: every layer is an optical density, summed (Beer-Lambert); the light reaching the
sensor is glass * illumination * 10**-OD, rendered on a fine grid (a third of a thumbnail pixel
or finer: 3x3 or 4x4 fine pixels per thumbnail pixel) and area-averaged as light, then sensor
noise, 8 bits and JPEG. Haematoxylin and eosin are the Ruifrok & Johnston (2001) vectors
(H (0.65, 0.70, 0.29), E (0.07, 0.99, 0.11), normalized), each turned by up to 8 degrees about
a random axis and scaled by its own strength; red cells carry a haemoglobin-like density
(confirm_family_blood.HB, from memory) and sometimes eosin; marker dyes are plausible values,
not measurements (confirm_family_marks.DYES).

What a draw picks (uniform unless said):

- µm/px: half the draws 7.5-8.5; half a scan of 0.24-0.5 µm/px downsampled by the power of two
  nearest 8 in ratio (5.7-11.3). Thumbnail 380-560 x 480-720 pixels (about 3-8 mm).
- glass: grey level 228-248, each channel tinted by N(0, 4) and kept in 220-250; illumination
  falling off by 0-4 % as a slope plus 0-4 % towards the corners; sensor noise 0.4-2 levels;
  JPEG quality 55-95, 4:2:0 chroma in 70 % of draws, else 4:4:4.
- stains: each vector turned 0-8 degrees; strengths log-uniform 0.15-1.6x, drawn apart.
- layout (confirm_family_tissue.LAYOUTS): skin/mucosa strips with a dense epithelial edge 20 %,
  lymph-node-like dense round pieces 15 %, loose oedematous/mucinous pieces 15 %, 3-8 small
  biopsies (needle cores or fragments) in a row 20 %, one large sheet with cracks and tears 15 %,
  fat-rich pieces 15 %.
- red cells in 50 % of draws: 1-2 pieces, 5-60 % of each, at an edge (40 %), inside (30 %) or
  as vessels (30 %); packed sheets 45 %, clumps 25 %, scattered in fibrin 30 %; half those
  draws stain 0-100 % of the cells with eosin too.
- faint tissue in 35 % of draws: 1-2 regions (a pale piece on the glass, or a pale fringe
  against a stained piece), each 0.03-0.12 optical density above the glass in green
  (``faint_od``: -log10 of the region's mean green light over the glass's, before noise).
- marker in 70 % of draws: 1-2 dyes (black 30 %, blue 25 %, green 20 %, red 15 %, violet 10 %),
  1-3 marks (confirm_family_marks.KINDS: rings, arrows, dots, hand-written numbers and
  letters, ticks, crosses, underlines, smears), tips log-uniform 0.2-1.5 mm for dots, underlines and smears, 0.2-0.8 mm for the rest, ink 0.35-1.8 units
  pressed, fading by 0-60 % along a stroke; where a mark lies ("glass", "tissue" or "glass and
  tissue") is measured from the truth.
- artefacts: a fold (double density, a darker crease) in 35 % of draws; 1-3 air bubbles (grey
  rims) in 25 %; dust specks and lint in 60 %; loose stained debris under 50 µm in 50 %.
  Folds and bubbles keep off faint regions, so that their density stays as drawn.

Truth (maps at the thumbnail's size): the fine drawing's maps area-averaged to the thumbnail,
a pixel in a map when at least half of it is covered. ``tissue`` is the section material,
red cells and faint tissue included, without the parts of empty spaces (lumens, tears, fat
cells) that a 100 µm disc fits into; narrower gaps (cracks, capillaries, small fat cells)
count as tissue. Debris under 50 µm, dust and bubbles are not tissue (``Drawn.artefacts``
marks every thumbnail pixel they touch). ``ink`` is every mark's footprint (the tip's width),
whatever its load.
"""

from __future__ import annotations

import io
from dataclasses import dataclass

import numpy as np
from PIL import Image
from scipy import ndimage as ndi

from confirm_family_blood import HB, bleed, faint, red_cells
from confirm_family_marks import DYE_P, KINDS, Pen, draw_mark
from confirm_family_paint import resample, scatter, smooth_noise, star_piece, tube, wander
from confirm_family_tissue import LAYOUT_P, LAYOUTS, Canvas, lay_out

H_RJ = np.array([0.65, 0.70, 0.29])  # Ruifrok & Johnston (2001), haematoxylin
E_RJ = np.array([0.07, 0.99, 0.11])  # Ruifrok & Johnston (2001), eosin


@dataclass
class Drawn:
    rgb: np.ndarray  # (H, W, 3) uint8, after JPEG
    mpp: float
    truth: dict  # tissue, ink, blood, faint: bool (H, W)
    info: dict
    light: np.ndarray  # (H, W) illumination, 1 at its brightest (glass colour times this)
    artefacts: np.ndarray  # (H, W) bool: pixels touched by dust, debris or bubble rims


def turn(v, rng, max_deg=8.0):
    """A unit vector turned by up to ``max_deg`` degrees about a random axis perpendicular to it,
    kept non-negative. Returns (vector, degrees)."""
    v = v / np.linalg.norm(v)
    axis = np.cross(v, rng.normal(size=3))
    axis /= np.linalg.norm(axis)
    deg = rng.uniform(-max_deg, max_deg)
    a = np.radians(deg)
    out = v * np.cos(a) + np.cross(axis, v) * np.sin(a)  # Rodrigues, axis perpendicular to v
    out = np.clip(out, 0.005, None)
    return out / np.linalg.norm(out), deg


def _reduce(a, f):
    h, w = a.shape[0] // f, a.shape[1] // f
    return a[: h * f, : w * f].reshape(h, f, w, f).mean(axis=(1, 3))


def _wide(holes, r):
    """The parts of ``holes`` that a disc of radius ``r`` (fine px) fits into (an opening)."""
    if not holes.any():
        return holes
    centres = ndi.distance_transform_edt(holes) >= r
    if not centres.any():
        return np.zeros_like(holes)
    return (ndi.distance_transform_edt(~centres) <= r) & holes


def _scale(rng):
    if rng.random() < 0.5:
        return float(rng.uniform(7.5, 8.5)), None
    scan = float(rng.uniform(0.24, 0.5))
    return scan * 2 ** int(np.round(np.log2(8 / scan))), scan


def _artefacts(cv, rng, neutral, dirt, keep_off, info):
    """Folds, bubbles, dust and debris (neutral density or H&E on the glass)."""
    um, (Hf, Wf) = cv.um, cv.shape
    stained = [p for p, k in cv.pieces]
    if rng.random() < 0.35 and stained:
        piece = stained[rng.integers(len(stained))]
        rim = np.argwhere(piece & ~ndi.binary_erosion(piece))
        if len(rim):
            p = rim[rng.integers(len(rim))].astype(float)
            path, _ = resample(wander(rng, p, rng.uniform(0, 6.3), um(rng.uniform(500, 2500)), 2.0, 0.03), 1.0)
            t = tube(cv.shape, path, um(rng.uniform(40, 250)) / 2)
            if t is not None:
                box, dist, near, inside = t
                band = np.zeros(cv.shape, bool)
                band[box] = inside
                band &= cv.outline & ~keep_off
                crease = np.zeros(cv.shape, bool)
                crease[box] = dist <= max(1.0, um(4))
                crease &= band
                for layer in (cv.H, cv.E, cv.hb):
                    layer[band] *= 2.0
                    layer[crease] *= 1.25
                info["artefacts"].append("fold")
    if rng.random() < 0.25:
        for _ in range(rng.integers(1, 4)):
            r = um(rng.uniform(150, 1000))
            c = (rng.uniform(0, Hf), rng.uniform(0, Wf))
            disc = star_piece(cv.shape, c, r, rng, 3, 0.03)
            ring = disc & ~ndi.binary_erosion(disc, iterations=max(1, int(um(rng.uniform(8, 30)))))
            if (ndi.binary_dilation(disc, iterations=3) & keep_off).any():
                continue
            neutral += np.where(ring, rng.uniform(0.25, 0.7) * smooth_noise(rng, cv.shape, um(20), 0.7, 1.0), 0).astype(np.float32)
            dirt |= ring
            info["artefacts"].append("bubble")
    if rng.random() < 0.6:
        spots = scatter(rng, np.ones(cv.shape, np.float32), rng.uniform(5, 60) / (Hf * Wf))
        for p in spots:
            if rng.random() < 0.2:  # lint: a thin curved fibre
                path, _ = resample(wander(rng, p, rng.uniform(0, 6.3), um(rng.uniform(100, 800)), 2.0, 0.1), 1.0)
                t = tube(cv.shape, path, um(rng.uniform(3, 10)) / 2)
                if t is None:
                    continue
                speck = np.zeros(cv.shape, bool)
                speck[t[0]] = t[3]
            else:
                speck = star_piece(cv.shape, p, um(rng.uniform(3, 30)), rng, 4, 0.35)
            neutral += np.where(speck, rng.uniform(0.15, 1.0), 0).astype(np.float32)
            dirt |= speck
        info["artefacts"].append("dust")
    if rng.random() < 0.5:
        glass = ~ndi.binary_dilation(cv.outline | keep_off, iterations=int(um(30)))
        for p in scatter(rng, glass.astype(np.float32), rng.uniform(5, 40) / glass.sum())[:40]:
            crumb = star_piece(cv.shape, p, um(rng.uniform(5, 25)), rng, 4, 0.3)
            cv.H += np.where(crumb, rng.uniform(0.0, 0.6), 0).astype(np.float32)
            cv.E += np.where(crumb, rng.uniform(0.1, 0.5), 0).astype(np.float32)
            dirt |= crumb
        info["artefacts"].append("debris")


def draw(seed: int) -> Drawn:
    """One hard slide of the family (see the module docstring for what is drawn)."""
    rng = np.random.default_rng([int(seed), 7_331])
    mpp, scan = _scale(rng)
    f = 3 if mpp <= 8.1 else 4
    h, w = int(rng.uniform(380, 560)), int(rng.uniform(480, 720))
    cv = Canvas((h * f, w * f), mpp / f)
    hv, hdeg = turn(H_RJ, rng)
    ev, edeg = turn(E_RJ, rng)
    sh, se = np.exp(rng.uniform(np.log(0.15), np.log(1.6), 2))
    stains = {"h": hv * sh, "e": ev * se}
    glass = np.clip(rng.uniform(228, 248) + rng.normal(0, 4, 3), 220, 250)
    layout = str(rng.choice(LAYOUTS, p=LAYOUT_P))
    info = {"seed": int(seed), "mpp": mpp, "scan_mpp": scan, "layout": layout, "glass": tuple(glass.tolist()),
            "stains": {"h": hv.tolist(), "e": ev.tolist(), "turn_deg": (hdeg, edeg), "strength": (float(sh), float(se))},
            "blood": [], "faint_od": [], "faint_kind": [], "marks": [], "artefacts": []}
    lay_out(cv, rng, layout)
    info["pieces"] = [k for _, k in cv.pieces]
    if rng.random() < 0.5:
        hb_dose = rng.uniform(0.7, 1.3)
        eos = rng.uniform(0, 1) if rng.random() < 0.5 else 0.0
        for i in rng.permutation(len(cv.pieces))[: rng.integers(1, 3)]:
            piece = cv.pieces[i][0]
            region, where = bleed(cv, rng, piece, rng.uniform(0.05, 0.6))
            packing = str(rng.choice(["sheet", "clumps", "fibrin"], p=[0.45, 0.25, 0.3]))
            region = red_cells(cv, rng, region, packing, eos)
            cv.blood |= region
            cv.outline |= region
            info["blood"].append({"where": where, "packing": packing, "share": float((region & piece).sum() / piece.sum())})
        cv.hb *= hb_dose
    faint_map = np.zeros(cv.shape, bool)
    if rng.random() < 0.35:
        for _ in range(rng.integers(1, 3)):
            target = float(rng.uniform(0.03, 0.12))
            got = faint(cv, rng, stains, target)
            if got is not None:
                faint_map |= got[0]
                info["faint_od"].append(target)
                info["faint_kind"].append(got[1])
    neutral = np.zeros(cv.shape, np.float32)
    dirt = np.zeros(cv.shape, bool)
    _artefacts(cv, rng, neutral, dirt, ndi.binary_dilation(faint_map, iterations=int(cv.um(30))), info)

    ink = np.zeros(cv.shape + (3,), np.float32)
    foot = np.zeros(cv.shape, bool)
    tissue_f = (cv.outline | cv.blood) & ~_wide(cv.holes & ~cv.blood, cv.um(50))
    if rng.random() < 0.7:
        dyes = rng.choice(list(DYE_P), size=rng.integers(1, 3), replace=False, p=list(DYE_P.values()))
        for _ in range(rng.integers(1, 4)):
            dye = str(rng.choice(dyes))
            kind = str(rng.choice(list(KINDS), p=list(KINDS.values())))
            broad = kind in ("dots", "underline", "smear")  # rings and writing take finer tips
            tip = float(np.exp(rng.uniform(np.log(200), np.log(1500 if broad else 800))))
            load = rng.uniform(0.5, 1.8) if dye == "black" else rng.uniform(0.35, 1.4)
            pen = Pen(rng, cv.px, dye, tip, load, rng.uniform(0, 0.6))
            mine = draw_mark(rng, pen, ink, foot, kind, cv)
            on = float((mine & tissue_f).sum() / max(1, mine.sum()))
            where = "glass" if on < 0.05 else "tissue" if on > 0.9 else "glass and tissue"
            info["marks"].append({"dye": dye, "kind": kind, "where": where, "tip_mm": tip / 1000, "load": float(load)})

    trans = np.empty((h, w, 3))
    for c in range(3):
        od = cv.H * stains["h"][c] + cv.E * stains["e"][c] + cv.hb * HB[c] + neutral + ink[..., c]
        trans[..., c] = _reduce(10.0 ** -od, f)
    yy, xx = np.mgrid[0:h, 0:w] / np.array([h, w])[:, None, None]
    a = rng.uniform(0, 6.3)
    slope = (np.cos(a) * (xx - 0.5) + np.sin(a) * (yy - 0.5) + 0.71) / 1.42
    light = 1 - rng.uniform(0, 0.04) * slope - rng.uniform(0, 0.04) * ((xx - 0.5) ** 2 + (yy - 0.5) ** 2) * 2
    noise = rng.uniform(0.4, 2.0)
    img = glass * light[..., None] * trans + rng.normal(0, noise, trans.shape)
    img = np.clip(np.round(img), 0, 255).astype(np.uint8)
    quality, sub = int(rng.integers(55, 96)), (2 if rng.random() < 0.7 else 0)
    buf = io.BytesIO()
    Image.fromarray(img).save(buf, format="JPEG", quality=quality, subsampling=sub)
    rgb = np.asarray(Image.open(io.BytesIO(buf.getvalue())).convert("RGB"))
    info.update(jpeg_quality=quality, chroma="4:2:0" if sub == 2 else "4:4:4", noise=float(noise))
    truth = {"tissue": _reduce(tissue_f.astype(np.float32), f) >= 0.5,
             "ink": _reduce(foot.astype(np.float32), f) >= 0.5,
             "blood": _reduce(cv.blood.astype(np.float32), f) >= 0.5,
             "faint": _reduce(faint_map.astype(np.float32), f) >= 0.5}
    return Drawn(rgb, float(mpp), truth, info, light.astype(np.float32), _reduce(dirt.astype(np.float32), f) > 0)
