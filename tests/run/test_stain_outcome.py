"""Every slide's normalized outcome is checked against the target, and never made worse (issue 27).

Ground truths are constructed here: a target whose recorded colour is the slide's own raw colour
(so any change moves the slide away from it), a target colour far from every slide (so the slide
stays off target), and slides whose stored tiles are compared with the view's own reads.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

import tilewright as tw

from helpers import write_slide


@pytest.fixture(scope="module")
def slide(tmp_path_factory):
    path, _ = write_slide(tmp_path_factory.mktemp("s") / "o25.tif", mpp=0.2527, size_um=(900.0, 1100.0), seed=5)
    return path


def _raw_colour(path, cfg):
    """The slide's sample read as the run reads it, and its mean tissue CIELAB (skimage rgb2lab)."""
    from skimage.color import rgb2lab

    from tilewright.run.reference import sample_tiles
    from tilewright.run.target import slide_glass
    from tilewright.stain.tissue_pixels import tissue_mask

    with tw.open(path) as s:
        view = s.at_mpp(cfg.mpp)
        thumb = s.thumbnail(cfg.mask_mpp)
        mask = tw.tissue_mask(thumb, mpp=thumb.mpp)
        plan = tw.plan_tiles(view, mask, tile=cfg.tile, min_tissue=cfg.min_tissue, max_tiles=cfg.stain_sample,
                             seed=cfg.seed)
        sample = sample_tiles(view, plan.yx, cfg.tile, cfg.stain_sample, cfg.seed)
        glass = slide_glass(thumb, mask)
    pixels = sample[tissue_mask(sample, glass=glass)]
    return rgb2lab(pixels[None].astype(np.float64) / 255.0)[0].mean(axis=0)


def _rotated(v, towards, degrees):
    v = np.asarray(v, float) / np.linalg.norm(v)
    w = np.asarray(towards, float) - np.dot(towards, v) * v
    w /= np.linalg.norm(w)
    a = np.deg2rad(degrees)
    return np.cos(a) * v + np.sin(a) * w


def _target(colour, *, turn=0.0, maxima=(1.4, 0.7)):
    """A Macenko target: Ruifrok & Johnston (2001) vectors, each turned ``turn`` degrees (H towards
    blue absorption, E towards red), with a recorded target colour of our choosing."""
    stains = np.stack([_rotated((0.65, 0.70, 0.29), (0.1, 0.3, 0.9), turn),
                       _rotated((0.07, 0.99, 0.11), (0.9, 0.2, 0.1), turn)])
    target = tw.MacenkoTransfer.from_dict({"method": "macenko", "stain_matrix": stains.tolist(),
                                             "max_concentrations": list(maxima)})
    target.target_colour = np.asarray(colour, np.float64)
    return target


def test_a_slide_pushed_away_from_the_target_is_stored_as_scanned(slide, tmp_path):
    cfg = tw.TilingConfig(mpp=0.5, tile=128, normalizer="macenko", max_tiles=12)
    # target colour = the slide's raw colour, stains rotated 20 degrees and much stronger: any
    # normalization towards those stains moves the colour away from the recorded target colour
    target = _target(_raw_colour(slide, cfg), turn=20.0, maxima=(2.6, 1.6))
    res = tw.tile_slide(slide, tmp_path, cfg, target=target)
    assert res.stain_check == "not-normalized"
    assert "stain-not-normalized" in res.warnings
    store = tw.open_store(res.store)
    assert store.attrs["normalizer"] is None and store.attrs["stain_outcome"]["check"] == "not-normalized"
    assert store.attrs["stain_outcome"]["delta_e"] > store.attrs["stain_outcome"]["delta_e_raw"]
    with tw.open(slide) as s:  # reference: the view's own reads, un-normalized
        view = s.at_mpp(0.5)
        for i in range(len(store)):
            y, x = store.yx[i]
            np.testing.assert_array_equal(store[i], view.read(int(y), int(x), 128, 128))


def test_a_slide_that_stays_far_is_flagged_off_target(slide, tmp_path):
    cfg = tw.TilingConfig(mpp=0.5, tile=128, normalizer="macenko", max_tiles=12)
    # a target colour no H&E tissue has (L* 15, grey): raw and normalized are both far from it,
    # and normalizing to the target's own stains does not move the slide further away
    target = _target([15.0, 0.0, 0.0])
    res = tw.tile_slide(slide, tmp_path, cfg, target=target)
    assert res.stain_check == "off-target" and "stain-off-target" in res.warnings
    assert "CIEDE2000 from the target's (limit 10)" in res.warnings
    outcome = tw.open_store(res.store).attrs["stain_outcome"]
    assert outcome["delta_e"] > 10 and tw.open_store(res.store).attrs["normalizer"] is not None


def test_outcome_in_store_and_manifest(slide, tmp_path):
    from tilewright.cli.tile_out import main as tile_out

    assert tile_out([str(slide), str(tmp_path / "out"), "--mpp", "0.5", "--tile", "128", "--normalize", "macenko",
                     "--max-tiles", "12"]) == 0
    manifest = pd.read_csv(tmp_path / "out" / "manifest.csv")
    row = manifest.iloc[0]
    outcome = tw.open_store(tmp_path / "out" / f"{row['slide_id']}.zarr").attrs["stain_outcome"]
    # one slide is its own cohort target: normalizing it to itself moves it by less than noise
    assert row["stain_check"] == outcome["check"] == "ok"
    assert row["stain_delta_e"] == pytest.approx(outcome["delta_e"]) and outcome["delta_e"] < 1.0
    assert outcome["h_angle_deg"] < 2 and abs(outcome["h_max_ratio"] - 1) < 0.05
    saved = json.loads((tmp_path / "out" / "stain_target.macenko.json").read_text())
    assert len(saved["target_colour"]) == 3 and saved["slides"][0]["slide_id"] == row["slide_id"]
