"""Faint pieces of the veiled family: small, lightly eosin-stained fragments whose mean green optical
density above glass is a planned 0.038-0.12 (the amount is solved for it on the noise-free
subpixel light, Beer–Lambert), each placed well apart (0.3-0.6 mm) from all other tissue and the
image border; the zone around them is then kept clear of marker ink and debris.
"""

from __future__ import annotations


import cv2
import numpy as np

from veiled_family_canvas import dots, poly_shape, ragged_outline, smooth_noise
from veiled_family_tissue import scale_to


def _free_distance(canvas) -> np.ndarray:
    """Per thumbnail pixel, the distance (px) to the nearest tissue or ink or the border."""
    s = canvas.s
    busy = (canvas.tissue | canvas.ink).reshape(canvas.h, s, canvas.w, s).any(axis=(1, 3))
    free = np.pad(~busy, 1).astype(np.uint8)  # the border counts as busy
    return cv2.distanceTransform(free, cv2.DIST_L2, 5)[1:-1, 1:-1]


def add_faint(rng, canvas, p: dict, vh, ve) -> list[int]:
    """Draw the planned faint pieces that fit; returns their labels."""
    labels = []
    margin_px = p["faint"]["margin_mm"] * 1000 / p["mpp"]
    for target in p["faint"]["targets"]:
        r_px = rng.uniform(0.15, 0.6) * 1000 / p["mpp"]
        dist = _free_distance(canvas)
        for _try in range(4):
            ys, xs = np.nonzero(dist >= r_px * 1.25 + margin_px)
            if len(ys):
                break
            r_px *= 0.7
        else:
            continue
        if r_px * p["mpp"] < 100:  # too little room for a piece of at least 0.1 mm radius
            continue
        i = rng.integers(len(ys))
        s = canvas.s
        cx, cy = (xs[i] + 0.5) * s, (ys[i] + 0.5) * s
        outline = ragged_outline(rng, cx, cy, r_px * s, r_px * s * rng.uniform(0.45, 1.0), rng.uniform(0, 6.3),
                                 rng.uniform(0.1, 0.35), n=120, kmax=16)
        shape = poly_shape(canvas, [outline])
        if shape is None or shape.mask.sum() < 30 * s * s:
            continue
        m, um = shape.mask, canvas.um
        eos = (1 + 0.2 * smooth_noise(rng, m.shape, 40 * um) + 0.1 * smooth_noise(rng, m.shape, 10 * um)).clip(0.3)
        hem = 0.15 * dots(rng, m, int(m.sum() / um ** 2 / 1000 * 2), max(0.7, 7 * um / 2.4))
        od = eos[..., None] * ve.astype(np.float32) + hem[..., None] * vh.astype(np.float32)
        od[~m] = 0
        od *= np.float32(scale_to(od, m, target, rng, at_least=False))
        canvas.add_od(shape, od)
        canvas.mark("tissue", shape)
        canvas.mark("faint", shape)
        labels.append(canvas.add_piece({"kind": "faint", "types": ["light eosin"], "target_od": round(target, 4)}, shape))
        _keep_clear(canvas, shape, 0.8 * margin_px)
    return labels


def _keep_clear(canvas, shape, radius_px: float) -> None:
    """Mark the zone within ``radius_px`` of a faint piece as clear of ink and debris."""
    s = canvas.s
    m = np.zeros((canvas.hs, canvas.ws), bool)
    m[shape.box] = shape.mask
    px = m.reshape(canvas.h, s, canvas.w, s).any(axis=(1, 3))
    near = cv2.distanceTransform((~px).astype(np.uint8), cv2.DIST_L2, 5) <= radius_px
    canvas.clear |= np.repeat(np.repeat(near, s, axis=0), s, axis=1)
