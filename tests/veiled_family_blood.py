"""Red blood cells of the veiled family: haemorrhage regions at the edges and inside pieces, and
thin smears drawn out from a piece onto the glass. Cells are discs about 7 um across packed at
60-100 % (smears 35-60 %), absorbing as oxy-haemoglobin (the Prahl-derived RGB vector, strong in
green and blue, weak in red) with a little eosin; every blood region is built to at least 0.15 mean
green OD above glass, and counts as tissue (a blood region reaching onto glass adds to the piece).
"""

from __future__ import annotations

import math

import numpy as np

from veiled_family_canvas import Shape, band_outline, curve, dots, poly_shape, ragged_outline, smooth_noise
from veiled_family_optics import E_RJ, HB, unit
from veiled_family_tissue import scale_to

MIN_BLOOD_OD = 0.15


def _region(rng, canvas, shape: Shape, area: float, at_edge: bool, to_glass: bool):
    ys, xs = np.nonzero(shape.mask)
    if at_edge:  # a point on the piece's outline
        inner = np.zeros_like(shape.mask)
        inner[1:-1, 1:-1] = shape.mask[1:-1, 1:-1] & shape.mask[:-2, 1:-1] & shape.mask[2:, 1:-1] & shape.mask[1:-1, :-2] & shape.mask[1:-1, 2:]
        ys, xs = np.nonzero(shape.mask & ~inner)
    i = rng.integers(len(ys))
    r = math.sqrt(area / math.pi) * (1.6 if at_edge else 1.0)
    outline = ragged_outline(rng, xs[i] + shape.x0, ys[i] + shape.y0, r, r * rng.uniform(0.5, 1.0),
                             rng.uniform(0, 6.3), rng.uniform(0.15, 0.4), n=120, kmax=16)
    blob = poly_shape(canvas, [outline])
    if blob is None:
        return None
    if not (at_edge and to_glass):  # keep the region inside the piece
        piece = np.zeros_like(blob.mask)
        ys0, xs0 = max(blob.y0, shape.y0), max(blob.x0, shape.x0)
        ys1 = min(blob.y0 + blob.mask.shape[0], shape.y0 + shape.mask.shape[0])
        xs1 = min(blob.x0 + blob.mask.shape[1], shape.x0 + shape.mask.shape[1])
        if ys1 > ys0 and xs1 > xs0:
            piece[ys0 - blob.y0:ys1 - blob.y0, xs0 - blob.x0:xs1 - blob.x0] = \
                shape.mask[ys0 - shape.y0:ys1 - shape.y0, xs0 - shape.x0:xs1 - shape.x0]
        blob.mask &= piece
    return blob if blob.mask.sum() > 20 else None


def _smear(rng, canvas, shape: Shape):
    ys, xs = np.nonzero(shape.mask)
    i = rng.integers(len(ys))
    a = rng.uniform(0, 2 * math.pi)
    start = np.array([xs[i] + shape.x0, ys[i] + shape.y0], float)
    end = start + canvas.mm(rng.uniform(0.5, 2.0)) * np.array([math.cos(a), math.sin(a)])
    path = curve(rng, start, end, 0.2, 48)
    width = canvas.mm(rng.uniform(0.05, 0.2)) * np.linspace(1.0, 0.4, 48)
    return poly_shape(canvas, [band_outline(path, width)])


def fill_cells(rng, canvas, blob: Shape, packing: float, b: dict, p: dict, label: int) -> None:
    """Pack the region with haemoglobin discs; the tissue beneath gives way to the cells."""
    um, m = canvas.um, blob.mask
    area_um2 = m.sum() / um ** 2
    cells = dots(rng, m, int(packing * area_um2 / (math.pi * 3.5 ** 2)), max(0.6, 3.5 * um / 1.6))
    clot = 1 + 0.25 * smooth_noise(rng, m.shape, 40 * um)
    amount = np.clip(cells * clot, 0, 1.4) * m
    od = amount[..., None] * (b["hb"] * 0.9 * HB.astype(np.float32))
    od += amount[..., None] * np.float32(b["eosin"] * p["stain"]["e"]) * unit(E_RJ).astype(np.float32)
    od *= np.float32(scale_to(od, m, MIN_BLOOD_OD, rng))
    under = canvas.od[blob.box]
    under[m] *= np.float32(1 - 0.6 * packing)
    canvas.add_od(blob, od)
    canvas.mark("blood", blob)
    canvas.mark("tissue", blob)
    lab = canvas.label[blob.box]
    lab[m & (lab == 0)] = label


def add_blood(rng, canvas, p: dict) -> list[dict]:
    """Blood regions in the ordinary pieces (red-cell share up to the planned one); returns what
    was drawn, per region."""
    b = p["blood"]
    if b is None or not canvas.pieces:
        return []
    drawn = []
    order = sorted(range(len(canvas.shapes)), key=lambda k: -canvas.shapes[k].mask.sum())
    for k in order[: int(rng.integers(1, 4))]:
        shape = canvas.shapes[k]
        share = b["share"] * rng.uniform(0.4, 1.0)
        if share < 0.01 or shape.mask.sum() < 200:
            continue
        n = int(rng.integers(1, 4))
        for j in range(n):
            at_edge = rng.random() < 0.6
            blob = _region(rng, canvas, shape, share * shape.mask.sum() / n, at_edge, b["to_glass"])
            if blob is not None:
                packing = rng.uniform(0.6, 1.0)
                fill_cells(rng, canvas, blob, packing, b, p, k + 1)
                drawn.append({"piece": k + 1, "where": "edge" if at_edge else "inside", "packing": round(packing, 2)})
        if b["smear"] and rng.random() < 0.7:
            blob = _smear(rng, canvas, shape)
            if blob is not None and not canvas.hits_clear(blob):
                packing = rng.uniform(0.35, 0.6)
                fill_cells(rng, canvas, blob, packing, b, p, k + 1)
                drawn.append({"piece": k + 1, "where": "smear", "packing": round(packing, 2)})
    return drawn
