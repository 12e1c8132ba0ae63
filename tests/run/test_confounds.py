"""Confounds kept out of the tiles: every tile from level 0 whatever the scanner's pyramid, each
tile's ink share stored and capped, each kept class's fraction stored (end to end through tile-out)."""

from __future__ import annotations

import json

import cv2
import numpy as np
import pytest
import shapely

import tilewright as tw
from helpers import write_slide
from tilewright.cli.tile_out import main as tile_out

pytestmark = pytest.mark.timeout(300)

FAST = ["--tile", "128", "--min-tissue", "0.3", "--quiet"]


def _blurry_levels(monkeypatch):
    """Make the slide writer build its lower levels the way a softer scanner does (area reduction,
    then a Gaussian blur of sigma 1.2 px): level 0 is untouched."""
    import tilewright.demo.pyramid as pyramid

    real = pyramid._area_reduce

    def soft(strip, factor):
        return cv2.GaussianBlur(real(strip, factor), (0, 0), 1.2)

    monkeypatch.setattr(pyramid, "_area_reduce", soft)


def test_from_level0_makes_two_scanners_tiles_alike(tmp_path, monkeypatch):
    """Two sites scan the same tissue (same level-0 pixels, 0.24955 µm/px: level 1 at 0.4991, within
    0.5 % of 0.5); site-soft's scanner smooths its own lower levels. Ground truth: the constructed
    level-0 pixels are identical, so tiles computed from level 0 must be identical too."""
    src = tmp_path / "slides"
    write_slide(src / "site-sharp" / "a.tif", mpp=0.24955, size_um=(700.0, 900.0), seed=5)
    _blurry_levels(monkeypatch)
    # concentration a millionth lower: another cache key of the slide writer, so this slide is
    # written anew with the soft levels (its level-0 render differs by at most one grey level)
    write_slide(src / "site-soft" / "b.tif", mpp=0.24955, size_um=(700.0, 900.0), seed=5,
                concentration=(1.0, 0.999999))
    monkeypatch.undo()

    out = tmp_path / "pyramid"
    assert tile_out([str(src), str(out), "--mpp", "0.5", *FAST]) == 0
    a, b = tw.open_store(out / "a.zarr"), tw.open_store(out / "b.zarr")
    assert a.attrs["source_level"] == b.attrs["source_level"] == 1 and not a.attrs["from_level0"]
    # the confound: the same tissue is far less sharp at one site
    assert np.median(b.sharpness) < 0.5 * np.median(a.sharpness)

    out0 = tmp_path / "level0"
    assert tile_out([str(src), str(out0), "--mpp", "0.5", "--from-level0", *FAST]) == 0
    a0, b0 = tw.open_store(out0 / "a.zarr"), tw.open_store(out0 / "b.zarr")
    for s in (a0, b0):
        assert s.attrs["source_level"] == 0 and s.attrs["from_level0"] and s.attrs["config"]["from_level0"]
        assert s.attrs["mpp"] == pytest.approx(0.5, rel=1e-12)  # area-averaged to the target, not the level's 0.4991
    # the tissue masks come from each file's thumbnail level (soft at one site): an edge tile may differ
    common = sorted({tuple(v) for v in a0.yx} & {tuple(v) for v in b0.yx})
    assert len(common) >= 0.9 * max(len(a0), len(b0))
    row_a = {tuple(v): i for i, v in enumerate(a0.yx)}
    row_b = {tuple(v): i for i, v in enumerate(b0.yx)}
    ia, ib = [row_a[c] for c in common], [row_b[c] for c in common]
    diff = np.abs(a0[ia].astype(int) - b0[ib].astype(int))
    assert np.percentile(diff, 99.9) <= 2  # same level 0 (JPEG of a hair-different render): same tiles
    ratio = np.median(b0.sharpness[ib]) / np.median(a0.sharpness[ia])
    assert 0.9 < ratio < 1.1


def _ink_truth(store, samples: int = 48) -> np.ndarray:
    """Each stored tile's ink share from the store's own ink mask picture, by point sampling the
    footprint (an independent computation: no summed-area table, no box arithmetic)."""
    ink = np.asarray(store._group["ink"][...], bool)
    mask_mpp, mpp, tile = store.attrs["mask_mpp"], store.attrs["mpp"], store.attrs["tile"]
    offs = (np.arange(samples) + 0.5) / samples * tile
    out = []
    for y, x in store.yx:
        ys = ((y + offs) * mpp / mask_mpp).astype(int)
        xs = ((x + offs) * mpp / mask_mpp).astype(int)
        inside = (ys[:, None] < ink.shape[0]) & (xs[None, :] < ink.shape[1])
        hit = ink[np.minimum(ys, ink.shape[0] - 1)][:, np.minimum(xs, ink.shape[1] - 1)] & inside
        out.append(hit.mean())
    return np.asarray(out)


def test_ink_share_is_stored_and_capped(tmp_path):
    src = tmp_path / "slides"
    write_slide(src / "inked.tif", mpp=0.2527, size_um=(1500.0, 1800.0), seed=11, pens=2)
    out = tmp_path / "out"
    assert tile_out([str(src), str(out), "--mpp", "1.0", "--min-tissue", "0.3", "--tile", "64", "--quiet"]) == 0
    store = tw.open_store(out / "inked.zarr")
    share = store.ink_share
    assert share.shape == (len(store),) and share.dtype == np.float32
    truth = _ink_truth(store)
    assert np.abs(share - truth).max() < 0.05  # point sampling at 48 x 48 is within ~2 % of the exact area
    assert (share > 0.05).sum() >= 3, "the slide must store some tiles with ink for the cap to be tested"

    capped = tmp_path / "capped"
    assert tile_out([str(src), str(capped), "--mpp", "1.0", "--min-tissue", "0.3", "--tile", "64",
                     "--max-ink", "0.05", "--quiet"]) == 0
    s2 = tw.open_store(capped / "inked.zarr")
    assert (s2.ink_share <= 0.05).all()
    kept = {tuple(v) for v, f in zip(store.yx, share) if f <= 0.05}
    assert {tuple(v) for v in s2.yx} == kept  # exactly the uncapped run's tiles at or under the cap
    assert s2.attrs["plan"]["n_ink"] == len(kept) and s2.attrs["config"]["max_ink"] == 0.05


MPP0 = 0.2527


def region_fractions(corners, tile, f, geometry):
    """Area of each tile's level-0 box inside ``geometry`` over the box's area (reference: shapely)."""
    boxes = shapely.box(*(np.asarray(v, dtype=np.float64) for v in (
        [x * f for _, x in corners], [y * f for y, _ in corners],
        [(x + tile) * f for _, x in corners], [(y + tile) * f for y, _ in corners])))
    return shapely.area(shapely.intersection(boxes, geometry)) / shapely.area(boxes)

A = [[300, 300], [1500, 300], [1500, 1600], [300, 1600], [300, 300]]
B = [[1500, 300], [2600, 300], [2600, 1600], [1500, 1600], [1500, 300]]


def test_every_kept_class_has_its_own_fraction(tmp_path):
    src = tmp_path / "slides"
    path, _ = write_slide(src / "r.tif", mpp=MPP0, size_um=(700.0, 900.0), seed=40)
    regions = tmp_path / "r.geojson"
    feats = [{"type": "Feature", "properties": {"classification": {"name": n}},
              "geometry": {"type": "Polygon", "coordinates": [ring]}} for n, ring in (("Tumor", A), ("Stroma", B))]
    regions.write_text(json.dumps({"type": "FeatureCollection", "features": feats}))
    out = tmp_path / "out"
    assert tile_out([str(src), str(out), "--mpp", "1.0", "--tile", "64", "--min-tissue", "0.3", "--quiet",
                     "--regions", str(regions), "--keep", "tumor,stroma,necrosis", "--min-region", "0.2"]) == 0
    store = tw.open_store(out / "r.zarr")
    fr = store.region_fractions
    assert list(fr.columns) == ["Tumor", "Stroma", "necrosis"]  # the file's names; an absent kept class last
    assert (fr["necrosis"] == 0).all()
    f = store.attrs["mpp"] / MPP0
    corners = [tuple(v) for v in store.yx]
    for name, ring in (("Tumor", A), ("Stroma", B)):
        truth = region_fractions(corners, 64, f, shapely.Polygon(ring))  # reference: shapely
        assert np.abs(fr[name].to_numpy() - truth).max() < 1e-4
    assert ((fr["Tumor"] > 0.05) & (fr["Stroma"] > 0.05)).any()  # tiles on the border carry both labels
    np.testing.assert_allclose(fr["Tumor"] + fr["Stroma"], store.region, atol=1e-4)  # disjoint classes


def test_stores_of_earlier_versions_without_the_new_settings_are_kept_on_resume():
    """A store made before ``from_level0`` and ``max_ink`` existed records neither; a run at their
    defaults would write the same store, so the resume identity sees no change (a run asking for
    either does)."""
    from tilewright.run.config import TilingConfig
    from tilewright.run.identity import _settings, identity_changes

    old = _settings({k: v for k, v in TilingConfig().to_dict().items() if k not in ("from_level0", "max_ink")})
    assert identity_changes(old, _settings(TilingConfig().to_dict())) == []
    changed = identity_changes(old, _settings(TilingConfig(from_level0=True, max_ink=0.1).to_dict()))
    assert [c.split()[0] for c in changed] == ["from_level0", "max_ink"]
