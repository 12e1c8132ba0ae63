"""The VEILED held-back family of generated hard slides: ``draw(seed)`` renders one slide thumbnail
with its ground truth, ``describe(info)`` says in one line what a draw holds.

A draw is planned from its seed (veiled_family_plan), then drawn on a subpixel canvas
(veiled_family_canvas): tissue in one of six layouts (veiled_family_layouts, veiled_family_tissue),
red blood cells (veiled_family_blood), faint pieces (veiled_family_faint), marker ink
(veiled_family_ink) and artefacts (veiled_family_debris). Every absorber adds optical density
(Beer–Lambert, with Ruifrok & Johnston 2001 H and E vectors and a Prahl oxy-haemoglobin vector);
the scanner (veiled_family_optics) averages light over subpixels, multiplies by the glass light,
adds sensor noise, rounds to 8 bits and JPEG-codes. Truth maps mark a pixel when at least half of
its subpixels hold the thing. Written apart from the masker and from every other family: a
confirmation set only.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from veiled_family_blood import add_blood
from veiled_family_canvas import Canvas
from veiled_family_debris import add_debris
from veiled_family_faint import add_faint
from veiled_family_ink import add_ink
from veiled_family_layouts import layout
from veiled_family_optics import E_RJ, H_RJ, blur_patches, glass_light, jpeg, sensor, to_light, turned
from veiled_family_plan import plan
from veiled_family_tissue import render_piece


@dataclass
class Drawn:
    rgb: np.ndarray  # uint8 (H, W, 3)
    mpp: float
    truth: dict  # "tissue", "ink", "blood", "faint": bool (H, W)
    info: dict  # JSON-friendly
    layers: dict = field(default_factory=dict)  # noise-free light and glass, piece labels, debris


def _region(p: dict, canvas: Canvas):
    """Where the layout goes: the canvas less a small margin and, when faint pieces are planned,
    less a band on one side kept for them."""
    x0, y0, x1, y1 = 0.03 * canvas.ws, 0.03 * canvas.hs, 0.97 * canvas.ws, 0.97 * canvas.hs
    if p["faint"]["targets"]:
        side, f = p["faint"]["side"], 0.3
        if side == 0:
            x0 = canvas.ws * f
        elif side == 1:
            x1 = canvas.ws * (1 - f)
        elif side == 2:
            y0 = canvas.hs * f
        else:
            y1 = canvas.hs * (1 - f)
    return x0, y0, x1, y1


def _coverage(a: np.ndarray, c: Canvas) -> np.ndarray:
    return a.reshape(c.h, c.s, c.w, c.s).sum(axis=(1, 3), dtype=np.int32) * 2 >= c.s * c.s


def draw(seed: int) -> Drawn:
    p = plan(seed)
    rng = np.random.default_rng([int(seed), 0xD7A3])
    canvas = Canvas(p)
    st = p["stain"]
    vh, ve = turned(H_RJ, st["h_turn"], st["h_axis"]), turned(E_RJ, st["e_turn"], st["e_axis"])
    for piece in layout(rng, canvas, _region(p, canvas), p):
        render_piece(rng, canvas, piece, p, vh, ve)
    blood = add_blood(rng, canvas, p)
    faint_labels = add_faint(rng, canvas, p, vh, ve)
    ink = add_ink(rng, canvas, p)
    debris = add_debris(rng, canvas, p)

    t = blur_patches(to_light(canvas.od, canvas.s), debris["patches"])
    glass = glass_light(p, canvas.h, canvas.w)
    if debris["step"] is not None:
        glass = glass * debris["step"][..., None]
    light = glass * t
    rgb = jpeg(sensor(light, p["noise"], rng), p["jpeg"]["quality"], p["jpeg"]["subsample"])

    truth = {k: _coverage(getattr(canvas, k), canvas) for k in ("tissue", "ink", "blood", "faint")}
    label = canvas.label[canvas.s // 2::canvas.s, canvas.s // 2::canvas.s]
    faint_od = []
    for lab in faint_labels:
        sel = truth["faint"] & (label == lab)
        faint_od.append(round(float(-np.log10(t[..., 1][sel].mean())), 5) if sel.any() else 0.0)
    info = {"seed": int(seed), "mpp": p["mpp"], "scan_mpp": p["scan_mpp"], "downsample": p["downsample"],
            "size": p["size"], "layout": p["layout"], "pieces": canvas.pieces, "blood": blood,
            "faint_od": faint_od, "ink": ink, "debris": debris["drawn"], "stain": st,
            "glass": p["glass"], "noise": p["noise"], "jpeg": p["jpeg"], "folds": p["folds"], "tears": p["tears"]}
    layers = {"light": light, "glass": glass, "label": label, "debris": _coverage(canvas.debris, canvas),
              "debris_any": canvas.debris.reshape(canvas.h, canvas.s, canvas.w, canvas.s).any(axis=(1, 3)),
              "ink_label": np.where(_coverage(canvas.ink_count == 1, canvas), canvas.ink_label[canvas.s // 2::canvas.s, canvas.s // 2::canvas.s], 0),
              "plan": p}
    return Drawn(rgb=rgb, mpp=p["mpp"], truth=truth, info=info, layers=layers)


def describe(info: dict) -> str:
    """One line: what the draw holds."""
    kinds = {}
    for q in info["pieces"]:
        if q["kind"] != "faint":
            kinds[q["kind"]] = kinds.get(q["kind"], 0) + 1
    types = sorted({t for q in info["pieces"] if q["kind"] != "faint" for t in q["types"]})
    ink = ", ".join(f"{m['dye']} {m['kind']}{' on tissue' if m['over_tissue'] else ''}" for m in info["ink"]) or "no ink"
    d = info["debris"]
    arte = [f"{d[k]} {k}" for k in ("dust", "fibres", "bubbles", "blur_patches") if d[k]]
    arte += [k.replace("_", " ") for k in ("coverslip_edge", "label_corner") if d[k]]
    arte += [f"{info[k]} {k}" for k in ("folds", "tears") if info[k]]
    faint = ", ".join(f"{v:.3f}" for v in info["faint_od"])
    return (f"seed {info['seed']}: {info['layout'].replace('_', ' ')} ({', '.join(f'{n} {k}' for k, n in kinds.items())}; "
            f"{'/'.join(types)}) at {info['mpp']:.2f} um/px {info['size'][1]}x{info['size'][0]}; "
            f"H {info['stain']['h']:.2f} E {info['stain']['e']:.2f}; blood regions {len(info['blood'])}; "
            f"faint OD [{faint}]; ink: {ink}; artefacts: {', '.join(arte) or 'none'}; "
            f"JPEG q{info['jpeg']['quality']}{' 4:2:0' if info['jpeg']['subsample'] else ' 4:4:4'}")
