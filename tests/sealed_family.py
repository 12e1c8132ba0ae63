"""The SEALED held-back family of hard slides: H&E thumbnails with ground truth, for confirming the
tissue mask's aims once (tests/tissue/test_sealed_family.py). Never tune the mask on it.

``draw(seed)`` renders a thumbnail of a slide at the pyramid level nearest 8 um/px of a scan at
0.24-0.5 um/px. The scene is drawn on a grid of 3 x 3 subpixels per thumbnail pixel: every absorber
adds optical density per RGB channel (Beer–Lambert); hematoxylin and eosin use the vectors of
Ruifrok & Johnston (2001) turned by up to 8 degrees, red blood cells absorb as oxy-haemoglobin,
marker dyes with their own vectors. Transmission 10^-OD is averaged per thumbnail pixel (light, not
OD), then multiplied by tinted glass and uneven illumination, given sensor noise, rounded to 8 bits
and JPEG-coded. Truth maps hold the thumbnail pixels at least half covered.

Layouts (tests/sealed_family_surfaces.py, tests/sealed_family_organs.py): skin ellipses, cervical
cones, polyps on stalks, lymph nodes, curved liver cores, fatty breast, placental villi; cracks and
tears, mucin lakes, blood (tests/sealed_family_blood.py), separate faint pieces, marker ink
(tests/sealed_family_marks.py) and artefacts (tests/sealed_family_debris.py).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import cv2
import numpy as np

import sealed_family_debris as debris
from sealed_family_blood import blood_regions, faint_piece, mucin, red_cells
from sealed_family_marks import mark
from sealed_family_optics import block_mean, covered, glass_light, jpeg, sensor, transmission
from sealed_family_organs import breast, liver_core, node, placenta
from sealed_family_plan import plan
from sealed_family_shapes import Piece, crack
from sealed_family_surfaces import cone, polyp, skin

S = 3  # subpixels per thumbnail pixel, each way
RENDER = {"skin ellipse": skin, "cervical cone": cone, "polyp on stalk": polyp, "lymph node": node,
          "liver core": liver_core, "fatty breast": breast, "placental villi": placenta}


@dataclass
class Drawn:
    """A drawn slide: ``rgb`` thumbnail, its ``mpp``, ``truth`` maps (tissue, ink, blood, faint),
    ``info`` (what was drawn; ``faint_od`` per faint piece) and ``clean``: the noise-free
    ``transmission`` (mean 10^-OD per pixel), the ``glass`` light and the ``faint_labels``."""
    rgb: np.ndarray
    mpp: float
    truth: dict
    info: dict
    clean: dict = field(default_factory=dict)


def _as_one(pieces) -> Piece:
    pieces = pieces if isinstance(pieces, list) else [pieces]
    one = pieces[0]
    for p in pieces[1:]:
        one.mask |= p.mask
        one.h += p.h
        one.e += p.e
    one.h *= one.mask
    one.e *= one.mask
    return one


def _place(rng, piece: Piece, busy: np.ndarray, room: tuple, clear: np.ndarray | None = None, tries: int = 80):
    """A free spot for ``piece`` (top-left aligned to the thumbnail grid) inside ``room`` (y0, x0,
    y1, x1 subpixels): its mask must not meet ``busy``; or, with ``clear``, lie where ``clear``."""
    h, w = piece.mask.shape
    y0, x0, y1, x1 = room
    if y1 - y0 < h or x1 - x0 < w:
        return None
    for _ in range(tries):
        y = int(rng.integers(y0, y1 - h + 1)) // S * S
        x = int(rng.integers(x0, x1 - w + 1)) // S * S
        y, x = max(y, y0), max(x, x0)
        if y + h > y1 or x + w > x1:
            continue
        sl = (slice(y, y + h), slice(x, x + w))
        if clear is not None and clear[sl][piece.mask].all():
            return sl
        if clear is None and not (busy[sl] & piece.mask).any():
            return sl
    return None


def _faint_strength(piece: Piece, od_g: np.ndarray, target: float) -> float:
    """Scale of a faint piece's pattern (green OD ``od_g`` per unit) so that its mean green OD
    above glass, -log10 of the mean green transmission over its truth pixels, is ``target``."""
    ph, pw = -(-od_g.shape[0] // S) * S, -(-od_g.shape[1] // S) * S
    g = np.zeros((ph, pw), np.float32)
    g[:od_g.shape[0], :od_g.shape[1]] = od_g
    m = np.zeros((ph, pw), bool)
    m[:od_g.shape[0], :od_g.shape[1]] = piece.mask
    px = covered(m, S)
    lo, hi = 0.0, 50.0
    for _ in range(50):
        k = 0.5 * (lo + hi)
        t = block_mean(np.power(10.0, -k * g).astype(np.float32), S)[px].mean()
        lo, hi = (k, hi) if -np.log10(t) < target else (lo, k)
    return 0.5 * (lo + hi)


def draw(seed: int) -> Drawn:
    """Render draw ``seed`` (deterministic)."""
    p = plan(seed)
    rng = np.random.default_rng([seed, 7002])
    (H, W), mpp = p["shape"], p["mpp"]
    FH, FW, u = H * S, W * S, S / mpp  # u: subpixels per micrometre
    span = min(H, W) * mpp
    hv, ev, hb = (np.array(p[k], np.float32) for k in ("h_vector", "e_vector", "hb_vector"))
    edge = p["coverslip_edge"]
    inset = (edge[1] if edge else 0) + 0.02
    room = (int(inset * FH), int(inset * FW), int((1 - inset) * FH), int((1 - inset) * FW))
    h_od, e_od = np.zeros((FH, FW), np.float32), np.zeros((FH, FW), np.float32)
    tissue, busy = np.zeros((FH, FW), bool), np.zeros((FH, FW), bool)
    gap = max(1, int(p["gap_um"] * u))
    placed, notes = [], []
    for i, kind in enumerate(p["layouts"]):
        scale = 1.0 / len(p["layouts"]) ** 0.5
        for _ in range(4):
            piece = _as_one(RENDER[kind](rng, u, span * scale))
            if i == 0:
                for c in p["cracks"]:
                    crack(rng, piece, (rng.uniform(10, 80) if c == "narrow" else rng.uniform(160, 300)) * u, c == "tear")
                if p["mucin_lake"] and kind != "placental villi":
                    piece.notes["mucin_lake"] = mucin(rng, u, piece)
            sl = _place(rng, piece, busy, room)
            if sl is not None:
                break
            scale *= 0.75
        if sl is None:
            continue
        tissue[sl] |= piece.mask
        h_od[sl] += piece.h
        e_od[sl] += piece.e
        grown = cv2.dilate(piece.mask.astype(np.uint8), cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (15, 15)))
        busy[sl] |= grown.astype(bool)
        busy = busy if gap <= 7 else _grow(busy, gap)
        placed.append((kind, sl, piece, p["blood_planned"][i]))
        notes.append({"kind": kind, **{k: v for k, v in piece.notes.items() if not isinstance(v, np.ndarray)}})

    gran, sheet = np.zeros((FH, FW), bool), np.zeros((FH, FW), bool)
    for kind, sl, piece, frac in placed:
        if frac <= 0:
            continue
        grow = int(0.3 * max(piece.mask.shape))
        win = (slice(max(room[0], sl[0].start - grow), min(room[2], sl[0].stop + grow)),
               slice(max(room[1], sl[1].start - grow), min(room[3], sl[1].stop + grow)))
        this = np.zeros((FH, FW), bool)
        this[sl] = piece.mask
        g, s = blood_regions(rng, u, this, win, frac)
        gran[win] |= g
        sheet[win] |= s
    blood = gran | sheet
    tissue |= blood
    hb_amt = red_cells(rng, u, gran, sheet)
    h_od[blood] *= 0.35
    e_od[blood] *= 0.35
    h_od *= p["h_strength"]
    e_od *= p["e_strength"]

    faint = np.zeros((FH, FW), bool)
    labels = np.zeros((H, W), np.int32)
    faint_kinds = []
    for fp in p["faint_planned"]:
        piece = faint_piece(rng, u, fp["kind"], min(fp["size_um"], 0.4 * span))
        clear = cv2.distanceTransform((~(tissue | faint)).astype(np.uint8), cv2.DIST_L2, 5) >= 300 * u
        far = int(300 * u)  # nothing within 0.3 mm, the coverslip's edge included
        sl = _place(rng, piece, busy, (room[0] + far, room[1] + far, room[2] - far, room[3] - far), clear=clear)
        if sl is None:
            continue
        k = _faint_strength(piece, piece.h * hv[1] + piece.e * ev[1], fp["od"])
        h_od[sl] += k * piece.h
        e_od[sl] += k * piece.e
        faint[sl] |= piece.mask
        tissue[sl] |= piece.mask
        one = np.zeros((FH, FW), bool)
        one[sl] = piece.mask
        labels[covered(one, S)] = len(faint_kinds) + 1
        faint_kinds.append(fp["kind"])
    keep_out = cv2.distanceTransform((~faint).astype(np.uint8), cv2.DIST_L2, 5) < 300 * u if faint.any() else None

    od = np.zeros((FH, FW, 3), np.float32)
    for c in range(3):
        od[..., c] = h_od * hv[c] + e_od * ev[c] + hb_amt * hb[c]
    del h_od, e_od, hb_amt
    ink, buf, drawn_marks = np.zeros((FH, FW), bool), np.zeros((FH, FW), np.float32), []
    for mk in p["marks"]:
        for _ in range(6):
            buf[:] = 0
            if mk["kind"] in ("ring", "arrow") or (mk["over_tissue"] and placed):
                _, sl, piece, _ = placed[rng.integers(len(placed))] if placed else (None, None, None, None)
                ys, xs = np.nonzero(piece.mask)
                i = rng.integers(ys.size)
                target = ((sl[1].start + xs.mean(), sl[0].start + ys.mean()) if mk["kind"] in ("ring", "arrow")
                          else (sl[1].start + xs[i], sl[0].start + ys[i]))
                half = 0.5 * max(np.ptp(xs), np.ptp(ys))
            else:
                target, half = (rng.uniform(0, FW), rng.uniform(0, FH)), 300 * u
            mark(buf, mk["kind"], rng, u, mk["width_mm"] * 1000, 1.0, target, half)
            foot = buf > 0
            if foot.any() and (keep_out is None or not (foot & keep_out).any()):
                ink |= foot
                vec = np.array(p["dye_vectors"][mk["dye"]], np.float32) * mk["strength"]
                for c in range(3):
                    od[..., c] += buf * vec[c]
                drawn_marks.append(mk)
                break
    del buf
    specks = debris.dust(od, rng, u, p["dust"], keep_out)
    fibres = debris.lint(od, rng, u, p["lint"], keep_out)
    rims = debris.bubbles(od, rng, u, p["bubbles"], keep_out)
    if edge:
        debris.coverslip_edge(od, rng, u, edge[0], edge[1])

    trans = transmission(od, S)
    del od
    glass = glass_light((H, W), p["glass"], p["vignette"], p["tilt"], p["light_centre"], rng)
    rgb = jpeg(sensor(glass * trans, p["read_noise"], p["shot_noise"], rng), p["jpeg"], p["jpeg_tile"],
               p["chroma_subsampling"])
    truth = {"tissue": covered(tissue, S), "ink": covered(ink, S)}
    truth["blood"] = covered(blood, S) & truth["tissue"]
    truth["faint"] = covered(faint, S) & truth["tissue"]
    faint_od = [float(-np.log10(trans[..., 1][labels == i + 1].mean())) for i in range(len(faint_kinds))]
    fracs = [round(float((blood[sl] & pc.mask).sum()) / max(1, int(pc.mask.sum())), 3) for _, sl, pc, _ in placed]
    info = {k: v for k, v in p.items() if k not in ("marks", "faint_planned")}
    info.update(pieces=notes, blood_fraction=fracs, faint_od=faint_od, faint_kinds=faint_kinds, marks=drawn_marks,
                marks_planned=len(p["marks"]), dust_drawn=specks, lint_drawn=fibres, bubbles_drawn=rims)
    return Drawn(rgb, float(mpp), truth, info, {"transmission": trans, "glass": glass, "faint_labels": labels})


def _grow(mask: np.ndarray, by: int) -> np.ndarray:
    return cv2.distanceTransform((~mask).astype(np.uint8), cv2.DIST_L2, 5) < by


def describe(info: dict) -> str:
    """One line saying what a draw holds."""
    marks = ", ".join(f"{m['dye']} {m['kind']} {m['width_mm']:.2f} mm" for m in info["marks"]) or "no ink"
    faint = ", ".join(f"{k} {od:.3f} OD" for k, od in zip(info["faint_kinds"], info["faint_od"])) or "no faint piece"
    blood = ", ".join(f"{b:.0%}" for b in info["blood_fraction"])
    return (f"seed {info['seed']}: {'+'.join(p['kind'] for p in info['pieces'])} at {info['mpp']:.2f} um/px "
            f"(scan {info['scan_mpp']:.3f}), H x{info['h_strength']:.2f} E x{info['e_strength']:.2f}, blood {blood}; "
            f"{faint}; {marks}; dust {info['dust_drawn']}, lint {info['lint_drawn']}, bubbles {info['bubbles_drawn']}, "
            f"coverslip edge {'yes' if info['coverslip_edge'] else 'no'}; JPEG q{info['jpeg']}")
