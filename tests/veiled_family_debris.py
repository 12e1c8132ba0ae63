"""Artefacts of the veiled family, none of them tissue or ink: dust specks, fibres, air bubbles
(dark refractive rings, a touch brighter inside), a coverslip edge (a dark line, with a step in the
glass light beyond it), a label's shadowed corner, and out-of-focus patches (blurred light). All
absorb by Beer–Lambert with near-neutral OD vectors; none enters the clear zone of faint pieces.
"""

from __future__ import annotations

import math

import cv2
import numpy as np

from veiled_family_canvas import Shape, curve, poly_shape, ragged_outline
from veiled_family_ink import lines_shape
from veiled_family_optics import DUST, NEUTRAL


def _put(canvas, shape: Shape | None, amount, vec, mark: bool = True) -> bool:
    if shape is None or canvas.hits_clear(shape):
        return False
    amt = np.broadcast_to(np.asarray(amount, np.float32), shape.mask.shape) * shape.mask
    canvas.add_od(shape, amt[..., None] * vec.astype(np.float32))
    if mark:
        canvas.mark("debris", shape)
    return True


def add_debris(rng, canvas, p: dict) -> dict:
    """Draw the planned artefacts; returns what was drawn plus, for the optics, the blur patches
    (pixel units) and the coverslip step (a gain map on the glass light, or None)."""
    d, um = p["debris"], canvas.um
    got = {"dust": 0, "fibres": 0, "bubbles": 0, "coverslip_edge": False, "label_corner": False}
    for _ in range(d["dust"]):
        c = rng.uniform([0, 0], [canvas.ws, canvas.hs])
        r = rng.uniform(5, 30) * um
        got["dust"] += _put(canvas, poly_shape(canvas, [ragged_outline(rng, c[0], c[1], r, r * rng.uniform(0.5, 1), 0, 0.4, 24, 6)]),
                            rng.uniform(0.2, 1.0), DUST)
    for _ in range(d["fibres"]):
        c, a, L = rng.uniform([0, 0], [canvas.ws, canvas.hs]), rng.uniform(0, 6.3), canvas.mm(rng.uniform(0.3, 2.0))
        dv = np.array([math.cos(a), math.sin(a)]) * L / 2
        got["fibres"] += _put(canvas, lines_shape(canvas, [curve(rng, c - dv, c + dv, 0.4, 40)], max(1.0, rng.uniform(5, 15) * um)),
                              rng.uniform(0.3, 0.9), NEUTRAL)
    for _ in range(d["bubbles"]):
        c, r = rng.uniform([0, 0], [canvas.ws, canvas.hs]), canvas.mm(rng.uniform(0.2, 1.5))
        ring = ragged_outline(rng, c[0], c[1], r, r * rng.uniform(0.8, 1.0), rng.uniform(0, 3), 0.02, 96, 3)
        inside = poly_shape(canvas, [ring])
        edge = lines_shape(canvas, [np.vstack([ring, ring[:1]])], max(1.0, rng.uniform(8, 25) * um))
        if inside is not None and edge is not None and not canvas.hits_clear(inside):
            _put(canvas, inside, -0.008, NEUTRAL)
            got["bubbles"] += _put(canvas, edge, rng.uniform(0.15, 0.5), NEUTRAL)
    step = None
    if d["coverslip_edge"]:
        a = rng.uniform(0, 2 * math.pi)
        n = np.array([math.cos(a), math.sin(a)])
        c = np.array([canvas.ws, canvas.hs]) / 2 + n * rng.uniform(0.3, 0.45) * min(canvas.ws, canvas.hs)
        t = np.array([-n[1], n[0]]) * 2 * max(canvas.ws, canvas.hs)
        line = lines_shape(canvas, [np.stack([c - t, c + t])], max(1.0, rng.uniform(10, 30) * um))
        if line is not None and not canvas.hits_clear(line):
            yy, xx = np.mgrid[0:canvas.h, 0:canvas.w].astype(np.float32)
            beyond = ((xx + 0.5) * canvas.s - c[0]) * n[0] + ((yy + 0.5) * canvas.s - c[1]) * n[1] > 0
            _put(canvas, line, rng.uniform(0.3, 0.8), NEUTRAL)
            step = np.where(beyond, np.float32(10 ** -rng.uniform(0.01, 0.03)), np.float32(1.0)).astype(np.float32)
            got["coverslip_edge"] = True
    if d["label_corner"] is not None:
        got["label_corner"] = _label_corner(rng, canvas, d["label_corner"])
    patches = []
    for _ in range(d["blur_patches"]):
        patches.append((rng.uniform(0, canvas.h), rng.uniform(0, canvas.w), canvas.mm(rng.uniform(0.5, 2)) / canvas.s,
                        canvas.mm(rng.uniform(0.5, 2)) / canvas.s, rng.uniform(0, 180), rng.uniform(1.0, 3.0)))
    got["blur_patches"] = len(patches)
    return {"drawn": got, "patches": patches, "step": step}


def _label_corner(rng, canvas, corner: int) -> bool:
    """A paper label reaching into one corner: dense, yellowish, with a soft shadow at its edge."""
    hs, ws = canvas.hs, canvas.ws
    size = canvas.mm(rng.uniform(0.6, 1.5))
    cx, cy = (0 if corner in (0, 3) else ws), (0 if corner in (0, 1) else hs)
    outline = ragged_outline(rng, cx, cy, size * rng.uniform(1.0, 1.8), size, 0, 0.03, 64, 3)
    shape = poly_shape(canvas, [outline])
    if shape is None or canvas.hits_clear(shape) or (canvas.tissue[shape.box] & shape.mask).any():
        return False
    dist = cv2.distanceTransform(np.pad(shape.mask, 1).astype(np.uint8), cv2.DIST_L2, 3)[1:-1, 1:-1]
    amount = np.float32(rng.uniform(0.6, 1.5)) * np.clip(dist / (40 * canvas.um), 0.15, 1.0)
    return _put(canvas, shape, amount, np.array([0.45, 0.55, 0.70]) / np.linalg.norm([0.45, 0.55, 0.70]))
