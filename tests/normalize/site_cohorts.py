"""Seeded multi-site cohorts of real pyramidal TIFF slides, as a user would bring them to ``tile-out``.

Three invented sites differ the way scanners and staining labs do (values invented, ranges
common practice):

- **site-a**: 0.2527 µm/px ("40x"), Ruifrok & Johnston (2001) stain vectors, stain strength
  1.0, slightly cool glass, JPEG quality 90, no ICC profile;
- **site-b**: 0.5 µm/px ("20x"), both stain vectors rotated by 5-6 degrees, 1.3x stronger stain,
  darker, warmer glass, JPEG quality 80, and a wide-gamut device RGB with its ICC profile embedded
  (the slides hold the device values; LittleCMS through Pillow ImageCms encodes them);
- **site-c**: 0.2428 µm/px, vectors rotated the other way, 0.7x weaker stain, bright glass, JPEG
  quality 95.

Every slide adds its own staining batch (vectors within 3 degrees, strength and glass within a
few per cent) to its site's. Tissue is the project's Beer–Lambert layout
(:func:`tilewright.demo.synth.random_layout`): colour is ``glass * 10**-(c_H h + c_E e)``.
The seed draws the rotation directions and every slide's variation, so each seed is a new cohort.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from tilewright.demo.synth import RUIFROK_E, RUIFROK_H


def _rotate(v, w, degrees):
    v = np.asarray(v, float) / np.linalg.norm(v)
    w = np.asarray(w, float) - np.dot(w, v) * v
    w /= np.linalg.norm(w)
    a = np.deg2rad(degrees)
    out = np.cos(a) * v + np.sin(a) * w
    return out / np.linalg.norm(out)


def _direction(rng, v):
    """A random direction that keeps a rotated stain vector positive in every channel."""
    while True:
        w = rng.normal(size=3)
        if np.all(_rotate(v, w, 6.0) > 0.02):
            return w


def site_specs(seed: int) -> dict:
    """The three sites of cohort ``seed`` (see the module notes)."""
    from tilewright.demo.icc import SCANNER_B

    rng = np.random.default_rng([seed, 2027])
    dh, de = _direction(rng, RUIFROK_H), _direction(rng, RUIFROK_E)
    turn = rng.uniform(5.0, 6.0)
    return {
        "site-a": dict(mpp=0.2527, stains=np.stack([RUIFROK_H, RUIFROK_E]), strength=1.0,
                       glass=(238.0, 236.0, 240.0), quality=90, profile=None, layout="svs"),
        "site-b": dict(mpp=0.5, stains=np.stack([_rotate(RUIFROK_H, dh, turn), _rotate(RUIFROK_E, de, turn)]),
                       strength=1.3, glass=(229.0, 231.0, 222.0), quality=80, profile=SCANNER_B, layout="ome"),
        "site-c": dict(mpp=0.2428, stains=np.stack([_rotate(RUIFROK_H, dh, -turn), _rotate(RUIFROK_E, de, -turn)]),
                       strength=0.7, glass=(246.0, 244.0, 247.0), quality=95, profile=None, layout="ifd"),
    }


def _batch(spec: dict, rng: np.random.Generator) -> dict:
    """One slide's staining batch inside its site."""
    stains = np.stack([_rotate(v, rng.normal(size=3) ** 2 + 0.1, rng.uniform(-3.0, 3.0)) for v in spec["stains"]])
    strength = tuple(float(spec["strength"] * rng.uniform(0.9, 1.1)) for _ in range(2))
    glass = tuple(float(np.clip(g + rng.uniform(-2.0, 2.0), 0, 255)) for g in spec["glass"])
    return dict(stains=stains, concentration=strength, background=glass)


def write_site_cohort(folder, seed: int, *, per_site: int = 3, size_um=(900.0, 1100.0)) -> tuple[Path, pd.DataFrame]:
    """Write cohort ``seed`` under ``folder/slides/<site>/``; return (slides folder, metadata)."""
    from tilewright.demo.cohort import device_renderer
    from tilewright.demo.icc import matrix_trc_profile
    from tilewright.demo.pyramid import write_pyramid
    from tilewright.demo.synth import random_layout

    folder = Path(folder)
    rows = []
    for s, (site, spec) in enumerate(site_specs(seed).items()):
        for i in range(per_site):
            slide_seed = 1000 * seed + 10 * s + i
            rng = np.random.default_rng([slide_seed, 7])
            layout = random_layout(*size_um, seed=slide_seed, n_islands=2, tumour=(i % 2 == 0), **_batch(spec, rng))
            render, icc = layout.renderer(spec["mpp"]), None
            if spec["profile"] is not None:
                icc = matrix_trc_profile(**spec["profile"])
                render = device_renderer(render, icc)
            slide_id = f"{site[-1].upper()}{seed}-{i + 1}"
            suffix = {"svs": ".svs", "ome": ".ome.tif", "ifd": ".tif"}[spec["layout"]]
            path = folder / "slides" / site / f"{slide_id}{suffix}"
            path.parent.mkdir(parents=True, exist_ok=True)
            write_pyramid(path, render, shape=layout.shape_at(spec["mpp"]), mpp=spec["mpp"], tile=256,
                          compression="jpeg", quality=spec["quality"], layout=spec["layout"], icc_profile=icc)
            rows.append({"slide_id": slide_id, "site": site, "label": ("subtype-1", "subtype-2")[(i + s) % 2]})
    return folder / "slides", pd.DataFrame(rows)
