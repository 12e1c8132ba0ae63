"""tile_slide end to end on generated slides (issue: the tile store and tile_slide)."""

import numpy as np
import pytest
import zarr

import tilewright as tw

from helpers import write_slide
from tilewright.errors import TilewrightError


@pytest.fixture(scope="module")
def slide40(tmp_path_factory):
    path, lay = write_slide(tmp_path_factory.mktemp("s") / "a40.tif", mpp=0.25, size_um=(1000.0, 1300.0),
                            seed=3)
    return path


def test_stored_tiles_equal_view_reads(slide40, tmp_path):
    cfg = tw.TilingConfig(mpp=0.5, tile=128, block=512, shard_tiles=16)
    res = tw.tile_slide(slide40, tmp_path, cfg)
    store = tw.open_store(res.store)
    with tw.open(slide40) as slide:
        view = slide.at_mpp(0.5)
        mask = tw.tissue_mask(slide, mpp=cfg.mask_mpp)
        plan = tw.plan_tiles(view, mask, tile=128, min_tissue=cfg.min_tissue)
        # ground truth: the plan computed independently here
        assert len(store) == len(plan) == res.n_tiles > 10
        assert {tuple(p) for p in store.yx} == {tuple(p) for p in plan.yx}
        for i in range(len(store)):
            y, x = store.yx[i]
            # reference: the view's own read of the recorded coordinates (normalization off)
            np.testing.assert_array_equal(store[i], view.read(int(y), int(x), 128, 128))
        # yx_level0 = yx * scale (±1 px), scale = 0.5 / 0.25
        assert view.scale == pytest.approx(2.0, rel=1e-6)
        assert np.abs(store.yx_level0 - store.yx * view.scale).max() <= 1
    a = store.attrs
    from tilewright.store.layout import REQUIRED_ATTRS

    assert set(REQUIRED_ATTRS) <= set(a)  # the documented provenance is all there
    assert a["complete"] and a["mpp"] == 0.5 and a["mpp_source"] == pytest.approx(0.25)
    assert tw.TilingConfig.from_dict(a["config"]) == cfg  # attributes round-trip the config
    assert a["source"]["size"] == slide40.stat().st_size and a["source"]["digest"].startswith("sha256")


def test_same_inputs_same_tiles(slide40, tmp_path):
    cfg = tw.TilingConfig(mpp=0.5, tile=128, max_tiles=20, seed=5, threads=2)
    a = tw.open_store(tw.tile_slide(slide40, tmp_path / "a", cfg).store)
    b = tw.open_store(tw.tile_slide(slide40, tmp_path / "b", cfg.replace(threads=1, block=256)).store)
    c = tw.open_store(tw.tile_slide(slide40, tmp_path / "c", cfg).store)
    assert len(a) == 20  # ground truth: max_tiles
    # same config: identical arrays, same order
    np.testing.assert_array_equal(a.yx, c.yx)
    np.testing.assert_array_equal(a.tiles[...], c.tiles[...])
    # other threads / block size: the same tiles (store order follows the read blocks)
    oa, ob = np.lexsort(a.yx.T[::-1]), np.lexsort(b.yx.T[::-1])
    np.testing.assert_array_equal(a.yx[oa], b.yx[ob])
    np.testing.assert_array_equal(a.tiles[...][oa], b.tiles[...][ob])


def test_failure_mid_write_leaves_no_complete_store(slide40, tmp_path, monkeypatch):
    from tilewright.store import writer as writer_mod

    cfg = tw.TilingConfig(mpp=0.5, tile=128, shard_tiles=8, block=256)  # many blocks, many appends
    calls = {"n": 0}
    real = writer_mod.StoreWriter.append

    def failing(self, *a, **k):
        calls["n"] += 1
        if calls["n"] == 2:
            raise OSError(28, "No space left on device")  # simulated ENOSPC
        return real(self, *a, **k)

    monkeypatch.setattr(writer_mod.StoreWriter, "append", failing)
    with pytest.raises((OSError, TilewrightError)):
        tw.tile_slide(slide40, tmp_path, cfg)
    assert calls["n"] == 2  # the failure did happen mid-write
    assert list(tmp_path.iterdir()) == []  # nothing that looks like a store
    monkeypatch.setattr(writer_mod.StoreWriter, "append", real)
    res = tw.tile_slide(slide40, tmp_path, cfg)
    ref = tw.tile_slide(slide40, tmp_path / "ref", cfg)
    np.testing.assert_array_equal(tw.open_store(res.store).tiles[...], tw.open_store(ref.store).tiles[...])


def test_plain_zarr_reads_tiles_and_coordinates(slide40, tmp_path):
    res = tw.tile_slide(slide40, tmp_path, tw.TilingConfig(mpp=0.5, tile=128, max_tiles=8))
    g = zarr.open_group(res.store, mode="r")  # reference: zarr-python alone
    assert g["tiles"].shape == (8, 128, 128, 3) and g["yx"].shape == (8, 2)
    assert g.attrs["format"] == "tilewright.tiles"


def test_macenko_normalized_store_records_normalizer(slide40, tmp_path):
    cfg = tw.TilingConfig(mpp=0.5, tile=128, max_tiles=16, normalizer="macenko")
    store = tw.open_store(tw.tile_slide(slide40, tmp_path, cfg).store)
    norm = tw.MacenkoTransfer.from_dict(store.attrs["normalizer"])
    assert norm.stain_matrix.shape == (2, 3)
    assert len(store) == 16


def test_cohort_output_path_that_is_a_file_is_a_typed_error(slide40, tmp_path):
    from tilewright.errors import StoreError

    f = tmp_path / "out"
    f.write_text("")
    with pytest.raises(StoreError, match="output folder"):
        tw.tile_cohort([slide40], f, progress=False)


def test_qc_picture_and_store_pictures_match_the_survey(slide40, tmp_path):
    # reference: the thumbnail, mask and plan recomputed here, and the picture drawn from them
    from tilewright.store.provenance import source_digest
    from tilewright.tissue.overlay import overlay_png

    cfg = tw.TilingConfig(mpp=0.5, tile=128)
    res = tw.tile_slide(slide40, tmp_path, cfg)
    store = tw.open_store(res.store)
    with tw.open(slide40) as slide:
        thumb = slide.thumbnail(cfg.mask_mpp)
        mask = tw.tissue_mask(thumb, mpp=cfg.mask_mpp)
        plan = tw.plan_tiles(slide.at_mpp(0.5), mask, tile=128, min_tissue=cfg.min_tissue)
    np.testing.assert_array_equal(store.thumbnail, thumb[: mask.shape[0], : mask.shape[1]])
    np.testing.assert_array_equal(store.mask, mask.array)
    png = (tmp_path / "qc" / f"{res.slide_id}.png").read_bytes()
    assert png == overlay_png(thumb, mask, plan, mpp=cfg.mask_mpp, title=res.slide_id)
    assert store.attrs["source"]["digest"] == source_digest(slide40)  # computed beside the tiles


def test_a_failing_qc_picture_costs_no_tiles(slide40, tmp_path, monkeypatch, caplog):
    import tilewright.tissue.overlay as overlay

    def boom(*a, **k):
        raise RuntimeError("drawing failed")

    monkeypatch.setattr(overlay, "overlay_png", boom)
    res = tw.tile_slide(slide40, tmp_path, tw.TilingConfig(mpp=0.5, tile=128))
    assert res.status == "ok" and tw.open_store(res.store).attrs["complete"]
    assert not (tmp_path / "qc").exists() and "QC overlay not written" in caplog.text
