"""A small two-site cohort of real pyramidal TIFF slides, tiled by ``tile_cohort``.

Sites differ as in the demo scenario (``tilewright.demo.cohort.SITES``, invented): site-south's
hematoxylin and eosin vectors are rotated and 15-20 % stronger, and it is scanned at 0.4991
µm/px where site-north is scanned at 0.2527 µm/px. Every slide also gets its own small stain
variation (a staining batch). The label alternates within each site, so colour follows site and
not the label by construction. Slides are written where ``tile_cohort`` reads them, so the
audit can re-read the sampled tiles raw from them.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from helpers import write_slide

#: Level-0 µm/px of each site: odd, scanner-like values (40x and 20x, common practice).
SITE_MPP = {"site-north": 0.2527, "site-south": 0.4991}


def make_real_cohort(out: Path, *, per_site: int = 5, normalize: bool = True, size_um=(640.0, 760.0)):
    """Write and tile the cohort; return (tiles folder, metadata DataFrame)."""
    import tilewright as tw
    from tilewright.demo.cohort import SITES, _slide_variation

    out = Path(out)
    paths, rows = [], []
    for s, site in enumerate(SITE_MPP):
        for i in range(per_site):
            seed = 40 + 10 * s + i
            variation = _slide_variation(SITES[site], seed)
            slide_id = f"{site.split('-')[1][0].upper()}{i + 1:02d}"
            path, _ = write_slide(out / "slides" / site / f"{slide_id}.tif", mpp=SITE_MPP[site], size_um=size_um,
                                  seed=seed, n_islands=2, stains=variation["stains"],
                                  concentration=variation["concentration"])
            paths.append(path)
            rows.append({"slide_id": slide_id, "patient_id": f"P-{500 + 3 * len(rows)}", "site": site,
                         "label": ("subtype-1", "subtype-2")[(i + s) % 2]})
    # default level tolerance (0.5 %): north's tiles are area-averaged from its finer level, south's
    # read from its JPEG level as is. An earlier version pinned tolerance 0.05 here because the
    # Macenko estimate read JPEG chroma artifacts of a level used as is (eosin maximum ~30 % high on
    # that side only); the estimate now leaves clipped pixels out and averages intensities
    # (tilewright.stain.estimate_od), and the site gap closes either way (issue 27)
    config = tw.TilingConfig(mpp=1.0, tile=64, normalizer="macenko" if normalize else None, qc_overlay=False)
    tw.tile_cohort(paths, out / "tiles", config, progress=False)
    return out / "tiles", pd.DataFrame(rows)
