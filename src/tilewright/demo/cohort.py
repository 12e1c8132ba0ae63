"""The demo cohort: an invented two-site scenario written as real pyramidal TIFF files.

Scenario (fictional): a colorectal subtype study pools slides from "site-north", scanned at
0.25 µm/px ("40x", common practice) on "scanner-A" with a standard H&E, and "site-south",
scanned at 0.5 µm/px ("20x") on "scanner-B" whose hematoxylin is bluer and eosin stronger. The
label ("subtype-1"/"subtype-2") is independent of site. One slide carries marker-pen strokes and
one slide is blank glass. Patient ids are invented.

Scanner-B records a wide-gamut device RGB and embeds its ICC profile
(:data:`tilewright.demo.icc.SCANNER_B`): its files hold the device values of the rendered sRGB
colours (less saturated numbers), and applying the profile brings them back to sRGB. Scanner-A
embeds no profile (its files are sRGB).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from tilewright.demo.icc import SCANNER_B, matrix_trc_profile
from tilewright.demo.synth import RUIFROK_E, RUIFROK_H, random_layout

__all__ = ["DemoSlide", "SITES", "demo_slides", "write_demo_cohort", "device_renderer"]


def _rotate_towards(v, w, degrees):
    """Rotate unit vector ``v`` by ``degrees`` in the plane of ``v`` and ``w``."""
    v = np.asarray(v, float)
    w = np.asarray(w, float) - np.dot(w, v) * v
    w /= np.linalg.norm(w)
    a = np.deg2rad(degrees)
    return np.cos(a) * v + np.sin(a) * w


#: Per-site scanning and staining (all invented).
SITES = {
    "site-north": dict(mpp=0.25, objective=40.0, scanner="scanner-A", layout="svs",
                       stains=np.stack([RUIFROK_H, RUIFROK_E]), concentration=(1.0, 1.0),
                       background=(238.0, 236.0, 240.0)),
    "site-south": dict(mpp=0.5, objective=20.0, scanner="scanner-B", layout="ome",
                       stains=np.stack([_rotate_towards(RUIFROK_H, (0.9, 0.3, 0.1), 12.0),
                                        _rotate_towards(RUIFROK_E, (0.05, 0.6, 0.8), -10.0)]),
                       concentration=(1.15, 1.2), background=(232.0, 234.0, 226.0), profile=SCANNER_B),
}


@dataclass(frozen=True)
class DemoSlide:
    slide_id: str
    site: str
    label: str
    patient_id: str
    seed: int
    pens: int = 0
    blank: bool = False


def demo_slides(n_per_site: int = 6) -> list[DemoSlide]:
    """The slides of the scenario: ``n_per_site`` a site, labels alternating within each site."""
    out = []
    k = 0
    for s, site in enumerate(SITES):
        for i in range(n_per_site):
            k += 1
            out.append(DemoSlide(
                slide_id=f"{site.split('-')[1][0].upper()}{i + 1:02d}", site=site,
                label=("subtype-1", "subtype-2")[(i + s) % 2], patient_id=f"P-{1000 + 7 * k}",
                seed=100 + k, pens=2 if (s == 0 and i == 1) else 0, blank=(s == 1 and i == n_per_site - 1)))
    return out


def _slide_variation(site: dict, seed: int) -> dict:
    """Slide-to-slide variation inside a site (staining batches): stain angle, amount, glass colour."""
    rng = np.random.default_rng(seed)
    stains = np.stack([_rotate_towards(v, rng.normal(size=3) ** 2 + 0.1, rng.uniform(-3.0, 3.0))
                       for v in site["stains"]])
    conc = tuple(float(c * rng.uniform(0.85, 1.15)) for c in site["concentration"])
    background = tuple(float(np.clip(b + rng.uniform(-3, 3), 0, 255)) for b in site["background"])
    return dict(stains=stains, concentration=conc, background=background)


def device_renderer(render, profile: bytes):
    """``render`` (sRGB pixels) as a scanner with ``profile`` records them: sRGB -> the profile's
    device RGB, relative colorimetric (LittleCMS through Pillow's ImageCms)."""
    import io

    from PIL import Image, ImageCms

    transform = ImageCms.buildTransform(ImageCms.createProfile("sRGB"), ImageCms.ImageCmsProfile(io.BytesIO(profile)),
                                        "RGB", "RGB", renderingIntent=ImageCms.Intent.RELATIVE_COLORIMETRIC)

    def device(y, x, h, w):
        rgb = np.ascontiguousarray(render(y, x, h, w), dtype=np.uint8)
        return np.asarray(ImageCms.applyTransform(Image.fromarray(rgb), transform))

    return device


def write_demo_cohort(out_dir: str | os.PathLike, *, n_per_site: int = 6, size_um=(2400.0, 3000.0),
                      log=print) -> tuple[Path, Path]:
    """Write the demo slides and ``metadata.csv``.

    Parameters
    ----------
    out_dir : path
        Folder to create; slides go to ``out_dir/slides/<site>/``.
    n_per_site : int
        Slides a site.
    size_um : (float, float)
        Physical height and width of each slide.

    Returns
    -------
    (slides_dir, metadata_csv)
    """
    import pandas as pd

    from tilewright.demo.pyramid import write_pyramid

    out_dir = Path(out_dir)
    rows = []
    for d in demo_slides(n_per_site):
        site = SITES[d.site]
        folder = out_dir / "slides" / d.site
        folder.mkdir(parents=True, exist_ok=True)
        suffix = ".svs" if site["layout"] == "svs" else ".ome.tif"
        path = folder / f"{d.slide_id}{suffix}"
        layout = random_layout(*size_um, seed=d.seed, n_islands=0 if d.blank else 2, pens=d.pens,
                               tumour=not d.blank, **_slide_variation(site, d.seed))
        shape = layout.shape_at(site["mpp"])
        if not path.exists():
            log(f"  writing {path.relative_to(out_dir)} ({shape[1]} x {shape[0]} px at {site['mpp']} µm/px)")
            tmp = path.with_name(".tmp-" + path.name)
            render, icc = layout.renderer(site["mpp"]), None
            if site.get("profile"):
                icc = matrix_trc_profile(**site["profile"])
                render = device_renderer(render, icc)
            write_pyramid(tmp, render, shape=shape, mpp=site["mpp"], tile=256, compression="jpeg", quality=90,
                          layout=site["layout"], objective=site["objective"], icc_profile=icc)
            os.replace(tmp, path)
        rows.append(dict(slide_id=d.slide_id, patient_id=d.patient_id, site=d.site, scanner=site["scanner"],
                         label=d.label, pen_marks=d.pens > 0, blank=d.blank))
    meta = out_dir / "metadata.csv"
    pd.DataFrame(rows).to_csv(meta, index=False)
    return out_dir / "slides", meta
