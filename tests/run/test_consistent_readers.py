"""Readers serve one set of settings: ``open_cohort`` and the training datasets leave out stores
made with another µm/px, tile, normalization or codec than the cohort's ``config.toml``, and say
which and why (end to end through tile-out)."""

from __future__ import annotations

import pytest

import tilewright as tw
from helpers import write_slide
from tilewright.cli.tile_out import main as tile_out
from tilewright.errors import StoreError

pytestmark = pytest.mark.timeout(300)

FAST = ["--tile", "128", "--min-tissue", "0.3", "--quiet"]


@pytest.fixture
def cohort_src(tmp_path):
    src = tmp_path / "slides"
    for i, mpp in enumerate((0.2428, 0.2527, 0.4991)):
        write_slide(src / f"s{i}.tif", mpp=mpp, size_um=(512.0, 640.0), seed=i + 1)
    return src


def _only(src, tmp_path, names):
    listing = tmp_path / "some.txt"
    listing.write_text("\n".join(str(src / f"{n}.tif") for n in names))
    return listing


def _left(cohort):
    return dict(zip(cohort.left_out["slide_id"], cohort.left_out["reason"]))


def test_stores_of_an_earlier_run_at_another_mpp_are_left_out(cohort_src, tmp_path):
    out = tmp_path / "out"
    assert tile_out([str(cohort_src), str(out), "--mpp", "1.0", *FAST]) == 0
    # two slides re-tiled at 0.9 µm/px: the folder's config.toml is now 0.9, s2 is still at 1.0
    assert tile_out([str(_only(cohort_src, tmp_path, ["s0", "s1"])), str(out), "--mpp", "0.9", "--overwrite",
                     *FAST]) == 0
    cohort = tw.open_cohort(out)
    assert sorted(cohort.stores) == ["s0", "s1"]
    left = _left(cohort)
    # s2's x2 level (2 x 0.4991 = 0.9982) was within 0.5 % of 1.0 and used as is: its true µm/px
    assert list(left) == ["s2"] and "µm/px 0.9982 -> 0.9" in left["s2"] and "config.toml" in left["s2"]
    assert {s.attrs["mpp"] for s in cohort.stores.values()} == {0.9}  # ground truth: the stores' own record
    # the datasets serve the same stores; unchecked, every store
    torch_ds = pytest.importorskip("tilewright.torch")
    ds = torch_ds.TileStoreDataset(out)
    assert ds.slide_ids == ["s0", "s1"]
    assert len(ds) == sum(len(s) for s in cohort.stores.values())
    assert sorted(tw.open_cohort(out, settings=None).stores) == ["s0", "s1", "s2"]
    bags = torch_ds.SlideBagDataset(out)
    assert bags.slide_ids == ["s0", "s1"]


def test_normalization_codec_and_tile_are_checked(cohort_src, tmp_path):
    out = tmp_path / "out"
    assert tile_out([str(cohort_src), str(out), "--mpp", "1.0", *FAST]) == 0
    assert tile_out([str(_only(cohort_src, tmp_path, ["s0"])), str(out), "--mpp", "1.0", "--overwrite",
                     "--normalize", "reinhard", *FAST]) == 0
    left = _left(tw.open_cohort(out))
    assert sorted(left) == ["s1", "s2"] and all("normalization none -> reinhard" in r for r in left.values())

    # a lossless codec changes no pixel: lz4 and zstd stores mix; JPEG does not
    out2 = tmp_path / "out2"
    assert tile_out([str(cohort_src), str(out2), "--mpp", "1.0", *FAST]) == 0
    assert tile_out([str(_only(cohort_src, tmp_path, ["s0"])), str(out2), "--mpp", "1.0", "--overwrite",
                     "--compression", "zstd", *FAST]) == 0
    assert sorted(tw.open_cohort(out2).stores) == ["s0", "s1", "s2"]
    assert tile_out([str(_only(cohort_src, tmp_path, ["s1"])), str(out2), "--mpp", "1.0", "--overwrite",
                     "--compression", "jpeg", "--quality", "80", *FAST]) == 0
    left = _left(tw.open_cohort(out2))
    assert sorted(left) == ["s0", "s2"] and "codec lossless -> jpeg quality 80" in left["s2"]

    # a list of stores must agree with itself
    torch_ds = pytest.importorskip("tilewright.torch")
    stores = [out2 / "s1.zarr", out2 / "s2.zarr"]
    with pytest.raises(StoreError, match="codec"):
        torch_ds.TileStoreDataset(stores)
    assert len(torch_ds.TileStoreDataset(stores, settings=None).slide_ids) == 2


def test_stores_normalized_to_another_cohort_target_are_left_out(cohort_src, tmp_path):
    out = tmp_path / "out"
    assert tile_out([str(cohort_src), str(out), "--mpp", "1.0", "--normalize", "macenko", *FAST]) == 0
    target = out / "stain_target.macenko.json"
    assert target.exists()
    target.unlink()  # the next run estimates another target, from one slide only
    assert tile_out([str(_only(cohort_src, tmp_path, ["s2"])), str(out), "--mpp", "1.0", "--normalize", "macenko",
                     "--overwrite", *FAST]) == 0
    from tilewright.run.identity import target_digest
    import json

    saved = target_digest(json.loads(target.read_text()))
    cohort = tw.open_cohort(out)
    assert sorted(cohort.stores) == ["s2"]
    assert cohort.stores["s2"].attrs["stain_target"] == saved  # ground truth: the target file in OUT
    left = _left(cohort)
    assert sorted(left) == ["s0", "s1"] and all("stain target" in r for r in left.values())


def test_a_folder_without_config_toml_must_hold_one_set_of_settings(cohort_src, tmp_path):
    out = tmp_path / "stores"
    cfg = tw.TilingConfig(mpp=1.0, tile=128, min_tissue=0.3, qc_overlay=False)
    tw.tile_slide(cohort_src / "s0.tif", out, cfg)
    tw.tile_slide(cohort_src / "s1.tif", out, cfg)
    assert sorted(tw.open_cohort(out).stores) == ["s0", "s1"]
    tw.tile_slide(cohort_src / "s2.tif", out, cfg.replace(tile=96))
    with pytest.raises(StoreError, match="tile 96 -> 128|tile 128 -> 96"):
        tw.open_cohort(out)
    assert sorted(tw.open_cohort(out, settings=cfg).stores) == ["s0", "s1"]
    assert list(tw.open_cohort(out, settings=cfg.replace(tile=96)).stores) == ["s2"]
    assert len(tw.open_cohort(out, settings=None).stores) == 3
