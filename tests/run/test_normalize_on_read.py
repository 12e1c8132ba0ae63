"""Normalize when reading: one run stores un-normalized tiles and each slide's stain estimate; readers
apply Macenko or Reinhard to any target lazily (end to end through tile-out). Ground truth: a plain
run's tiles (what is stored), and the stored-normalized path normalizing the same slides to the
same target (what reading normalized must give)."""

from __future__ import annotations

import numpy as np
import pytest

import tilewright as tw
from helpers import write_slide
from tilewright.cli.tile_out import main as tile_out
from tilewright.errors import StoreError

pytestmark = pytest.mark.timeout(400)

FAST = ["--mpp", "1.0", "--tile", "128", "--min-tissue", "0.3", "--quiet"]
#: site-south stains bluer and stronger (Beer–Lambert: other stain vectors, higher concentrations)
SOUTH = np.stack([np.array([0.5626, 0.7201, 0.4062]), np.array([0.2159, 0.8012, 0.5581])])


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("read-normalize")
    src = root / "slides"
    for i, mpp in enumerate((0.2428, 0.2527)):
        write_slide(src / "north" / f"n{i}.tif", mpp=mpp, size_um=(700.0, 900.0), seed=21 + i)
        write_slide(src / "south" / f"s{i}.tif", mpp=0.4991, size_um=(700.0, 900.0), seed=31 + i, stains=SOUTH,
                    concentration=(1.3, 1.2))
    out = {k: root / k for k in ("plain", "estimates", "macenko", "reinhard")}
    assert tile_out([str(src), str(out["plain"]), *FAST]) == 0
    assert tile_out([str(src), str(out["estimates"]), *FAST, "--estimate-stains"]) == 0
    assert tile_out([str(src), str(out["macenko"]), *FAST, "--normalize", "macenko"]) == 0
    assert tile_out([str(src), str(out["reinhard"]), *FAST, "--normalize", "reinhard"]) == 0
    return out


def test_stored_tiles_are_the_plain_run_s_and_estimates_are_recorded(runs):
    plain, est = tw.open_cohort(runs["plain"]), tw.open_cohort(runs["estimates"])
    assert sorted(est.stores) == sorted(plain.stores) == ["n0", "n1", "s0", "s1"]
    for sid, store in est.stores.items():
        assert store.attrs["normalizer"] is None
        assert np.array_equal(store[:], plain.stores[sid][:])  # ground truth: the run without estimates
        estimates = store.attrs["stain_estimates"]
        assert set(estimates) == {"macenko", "reinhard"} and "error" not in estimates["reinhard"]
        assert store._group["stain_sample"].shape == (65_536, 3)
        # a Macenko estimate is recorded as implausible exactly where the normalizing run replaced it
        replaced = any(w.startswith("stain-replaced") for w in
                       tw.open_store(runs["macenko"] / f"{sid}.zarr").attrs["warnings"])
        assert ("error" in estimates["macenko"]) == replaced


@pytest.mark.parametrize("method", ["macenko", "reinhard"])
def test_reading_normalized_gives_the_stored_normalized_tiles(runs, method):
    target = runs[method] / f"stain_target.{method}.json"  # the normalizing run's own cohort target
    cohort = tw.open_cohort(runs["estimates"], normalize=method, target=target)
    stored = tw.open_cohort(runs[method])
    for sid, store in cohort.stores.items():
        got, want = store[:].astype(int), stored.stores[sid][:].astype(int)
        diff = np.abs(got - want)
        # the read side binds the slide from 65,536 of its sample's pixels, the run from all of them
        assert diff.mean() < 0.5 and diff.max() <= 3, (sid, diff.mean(), diff.max())
        assert not np.array_equal(got, cohort.stores[sid]._get(slice(None)).astype(int))  # it did normalize
    assert cohort.normalization["method"] == method


def _site_gap(stores) -> float:
    """CIEDE2000 between the two sites' mean tissue colour (reference: scikit-image)."""
    from skimage.color import deltaE_ciede2000, rgb2lab

    means = {}
    for site in ("n", "s"):
        tiles = np.concatenate([s[:] for sid, s in stores.items() if sid.startswith(site)])
        lab = rgb2lab(tiles.reshape(-1, 1, 3)).reshape(-1, 3)
        tissue = lab[:, 0] < 85  # not glass
        means[site] = lab[tissue].mean(axis=0)
    return float(deltaE_ciede2000(means["n"], means["s"]))


def test_cohort_target_from_the_stores_estimates_closes_the_site_gap(runs):
    raw = tw.open_cohort(runs["estimates"])
    normalized = tw.open_cohort(runs["estimates"], normalize="macenko")  # target: median of the estimates
    before, after = _site_gap(raw.stores), _site_gap(normalized.stores)
    assert after < 0.5 * before, (before, after)  # the outcome the normalizing run promises, at read time


def test_datasets_and_dask_normalize_when_reading(runs):
    torch_ds = pytest.importorskip("tilewright.torch")
    cohort = tw.open_cohort(runs["estimates"], normalize="reinhard")
    ds = torch_ds.TileStoreDataset(runs["estimates"], normalize="reinhard", with_info=True)
    image, _, info = ds[5]
    want = cohort.stores[info["slide_id"]][info["tile"]]
    assert np.array_equal(image.numpy().transpose(1, 2, 0), want)
    import pickle

    clone = pickle.loads(pickle.dumps(ds))  # a DataLoader worker's copy re-opens and re-binds
    assert np.array_equal(clone[5][0].numpy(), image.numpy())
    s0 = cohort.stores["s0"]
    assert np.array_equal(s0.to_dask().compute(scheduler="threads"), s0[:])
    bags = torch_ds.SlideBagDataset(runs["estimates"], normalize="reinhard")
    assert np.array_equal(bags[0][1]["tiles"].numpy(), np.arange(len(cohort.stores[bags.slide_ids[0]])))


def test_refusals(runs, tmp_path):
    with pytest.raises(StoreError, match="normalized already"):
        tw.open_store(runs["macenko"] / "n0.zarr", normalize="reinhard",
                      target=runs["reinhard"] / "stain_target.reinhard.json")
    with pytest.raises(StoreError, match="--estimate-stains"):
        tw.open_store(runs["plain"] / "n0.zarr", normalize="macenko", target=runs["macenko"] / "stain_target.macenko.json")
    with pytest.raises(StoreError, match="target="):
        tw.open_store(runs["estimates"] / "n0.zarr", normalize="macenko")
    assert tile_out([str(runs["plain"] / "nothing"), str(tmp_path / "o"), "--estimate-stains", "--normalize",
                     "macenko"]) == 2
