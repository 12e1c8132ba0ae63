"""A generated two-site cohort in the tile-out folder layout, written with plain zarr.

Pixels follow the Beer–Lambert law: OD = C @ S, RGB = 255 * 10**(-OD), with per-pixel hematoxylin
and eosin concentrations C (nuclei blobs and stroma texture) and a site stain matrix S. Site
"site-north" uses the Ruifrok & Johnston (2001) H and E vectors; "site-south" uses the same
vectors rotated about the grey axis and 35 % more stain. The label is balanced within each site
and never changes the pixels, so colour follows site and not the label by construction.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import zarr
from scipy import ndimage

# Ruifrok & Johnston (2001), Anal Quant Cytol Histol 23:291-299
RJ_H = np.array([0.65, 0.70, 0.29])
RJ_E = np.array([0.07, 0.99, 0.11])
GREY = np.ones(3) / np.sqrt(3)


def unit(v):
    v = np.asarray(v, float)
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def rotate_about_grey(v, degrees):
    """Rodrigues rotation of ``v`` about the grey axis (a hue shift of the stain)."""
    t = np.radians(degrees)
    v = np.asarray(v, float)
    return unit(v * np.cos(t) + np.cross(GREY, v) * np.sin(t) + GREY * np.dot(GREY, v) * (1 - np.cos(t)))


SITE_STAINS = {
    "site-north": (unit(np.stack([RJ_H, RJ_E])), 1.0),
    "site-south": (np.stack([rotate_about_grey(RJ_H, 14.0), rotate_about_grey(RJ_E, -12.0)]), 1.35),
}


def concentrations(rng, shape, h_level, e_level):
    """(h, w, 2) hematoxylin/eosin concentrations: nuclei blobs over an eosin stroma texture."""
    h, w = shape
    nuclei = ndimage.gaussian_filter(rng.random((h, w)), 1.2)
    nuclei = (nuclei > np.quantile(nuclei, 0.7)).astype(float)
    nuclei = ndimage.gaussian_filter(nuclei, 0.7)
    stroma = 0.6 + 0.4 * ndimage.gaussian_filter(rng.random((h, w)), 2.0) / 0.5
    c_h = h_level * nuclei  # pure eosin where there is no nucleus
    c_e = e_level * stroma * (1.0 - nuclei)  # pure hematoxylin at nucleus centres
    return np.stack([c_h, c_e], axis=-1)


def render(conc, stains, scale, rng):
    od = (conc * scale) @ stains
    rgb = 255.0 * 10.0 ** (-od) + rng.normal(0, 1.5, od.shape)
    return np.clip(np.rint(rgb), 0, 255).astype(np.uint8)


def make_slide(rng, site, *, thumb=64, tile=32, n_tiles=12):
    """Thumbnail, mask and tiles of one synthetic slide."""
    stains, scale = SITE_STAINS[site]
    h_level = rng.uniform(0.45, 0.75)
    e_level = rng.uniform(0.25, 0.45)
    # tissue region of the thumbnail: a smooth blob covering 30-70 % of it
    field = ndimage.gaussian_filter(rng.random((thumb, thumb)), 6)
    mask = field > np.quantile(field, rng.uniform(0.3, 0.7))
    conc = concentrations(rng, (thumb, thumb), h_level, e_level) * mask[..., None]
    thumbnail = render(conc, stains, scale, rng)
    tiles = np.stack(
        [render(concentrations(rng, (tile, tile), h_level, e_level), stains, scale, rng) for _ in range(n_tiles)]
    )
    return thumbnail, mask, tiles


def write_store(path: Path, slide_id, thumbnail, mask, tiles, *, mpp_source=0.25, normalizer=None, complete=True):
    group = zarr.open_group(str(path), mode="w", zarr_format=3)
    n, t = tiles.shape[0], tiles.shape[1]
    arr = group.create_array("tiles", shape=tiles.shape, chunks=(1, t, t, 3), dtype="uint8")
    arr[...] = tiles
    group.create_array("yx", shape=(n, 2), dtype="int64")[...] = np.stack([np.arange(n) * t, np.zeros(n)], 1)
    group.create_array("tissue", shape=(n,), dtype="float32")[...] = np.ones(n, np.float32)
    group.create_array("thumbnail", shape=thumbnail.shape, dtype="uint8")[...] = thumbnail
    group.create_array("mask", shape=mask.shape, dtype="bool")[...] = mask
    group.attrs.update(
        {
            "slide_id": slide_id,
            "mpp": 0.5,
            "mpp_source": mpp_source,
            "mask_mpp": 8.0,
            "normalizer": normalizer,
            "complete": bool(complete),
        }
    )


def make_cohort(out: Path, *, per_cell=4, seed=7, normalize=False, extra_rows=()):
    """Write a two-site cohort (``per_cell`` slides per site × label) and return its metadata.

    With ``normalize=True`` the stored tiles are Macenko-normalized to a site-north reference
    (the thumbnails stay raw, as tile-out stores them).
    """
    from tilewright.stain.macenko import MacenkoTransfer

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    slides, rows = [], []
    for site in SITE_STAINS:
        for label in ("subtype-a", "subtype-b"):
            for _ in range(per_cell):
                slide_id = f"{site.split('-')[1]}-{len(slides):02d}"
                slides.append((slide_id, site, label, *make_slide(rng, site)))
    normalizer = None
    if normalize:
        ref_rng = np.random.default_rng(seed + 1000)
        reference = np.concatenate(list(make_slide(ref_rng, "site-north", n_tiles=24)[2]), axis=0)
        normalizer = MacenkoTransfer().fit(reference)
    for slide_id, site, label, thumbnail, mask, tiles in slides:
        # the source µm/px is a scanner trait independent of site here (alternating 40x / 20x)
        mpp_source = 0.25 if int(slide_id[-2:]) % 2 == 0 else 0.5
        if normalizer is not None:
            tiles = normalizer.transform(tiles)
        write_store(
            out / f"{slide_id}.zarr", slide_id, thumbnail, mask, tiles, mpp_source=mpp_source,
            normalizer=None if normalizer is None else {"method": "macenko"},
        )  # fmt: skip
        rows.append(
            {"slide_id": slide_id, "source": f"/data/{slide_id}.tif", "status": "ok", "error": "",
             "n_tiles": len(tiles), "mpp_source": mpp_source, "objective": 40.0 if mpp_source == 0.25 else 20.0,
             "source_level": 1 if mpp_source == 0.25 else 0, "seconds": 0.1, "site": site, "label": label}
        )  # fmt: skip
    rows.extend(extra_rows)
    table = pd.DataFrame(rows)
    manifest_cols = ["slide_id", "source", "status", "error", "n_tiles", "mpp_source", "objective", "source_level", "seconds"]
    table[manifest_cols].to_csv(out / "manifest.csv", index=False)
    metadata = table[table["status"] == "ok"][["slide_id", "site", "label"]].dropna().reset_index(drop=True)
    return metadata


def make_one_site_cohort(out: Path, *, n_slides=12, seed=19):
    """``n_slides`` slides of site-north only (no batch effect by construction); returns the slide ids."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(n_slides):
        slide_id = f"north-{i:02d}"
        thumbnail, mask, tiles = make_slide(rng, "site-north")
        write_store(out / f"{slide_id}.zarr", slide_id, thumbnail, mask, tiles, mpp_source=0.2527)
        rows.append({"slide_id": slide_id, "source": f"/data/{slide_id}.tif", "status": "ok", "error": "",
                     "n_tiles": len(tiles), "mpp_source": 0.2527})
    pd.DataFrame(rows).to_csv(out / "manifest.csv", index=False)
    return [r["slide_id"] for r in rows]
