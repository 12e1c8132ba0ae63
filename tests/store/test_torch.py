"""The optional PyTorch side: labels from a table, the per-slide sampler, slide bags, workers, ranks."""

from collections import Counter

import numpy as np
import pandas as pd
import pytest

from tilewright.errors import ConfigError

from .fakes import write_store

torch = pytest.importorskip("torch", reason="optional extra 'torch' not installed")
from torch.utils.data import DataLoader  # noqa: E402

from tilewright.torch import SlideBagDataset, SlideTileSampler, TileStoreDataset  # noqa: E402

#: slide id -> (tiles, label); "007" checks that ids stay text, "S-9" has no label in the table
SLIDES = {"007": (9, "tumour"), "A1": (6, "normal"), "B2": (3, "tumour"), "C3": (12, "normal"),
          "D4": (5, "tumour"), "S-9": (4, None)}


def _marked(n, s):
    tiles = np.random.default_rng(s).integers(0, 256, (n, 16, 16, 3), dtype=np.uint8)
    tiles[:, 0, 0, 0] = np.arange(n)  # ground truth written into each tile: its index...
    tiles[:, 0, 0, 1] = s  # ...and its slide's number
    return tiles


@pytest.fixture(scope="module")
def cohort(tmp_path_factory):
    d = tmp_path_factory.mktemp("cohort")
    tiles = {}
    for s, (sid, (n, _)) in enumerate(SLIDES.items()):
        tiles[sid] = _marked(n, s)
        yx = np.stack([np.arange(n) * 16 + s, np.arange(n) * 32 + 7], 1)
        write_store(d / f"{sid}.zarr", tiles[sid], shard=4, yx=yx, slide_id=sid)
    meta = d / "meta.csv"
    pd.DataFrame({"slide_id": [k for k, v in SLIDES.items() if v[1]], "site": "site-north",
                  "label": [v[1] for v in SLIDES.values() if v[1]]}).to_csv(meta, index=False)
    return d, sorted(d.glob("*.zarr")), tiles, meta


def _ids(paths):
    return [p.stem for p in paths]


def test_labels_from_a_table_joined_on_slide_id_as_text(cohort):
    d, paths, tiles, meta = cohort
    with pytest.raises(ConfigError, match="S-9"):  # a slide without a label is named
        TileStoreDataset(paths, labels=meta)
    ds = TileStoreDataset(paths, labels=str(meta), missing="drop", with_info=True)
    assert ds.slide_ids == ["007", "A1", "B2", "C3", "D4"] and ds.classes == ["normal", "tumour"]
    assert len(ds) == 9 + 6 + 3 + 12 + 5  # ground truth: tiles written, S-9 left out
    for index in (0, 9, 20, len(ds) - 1):
        image, label, info = ds[index]
        sid = info["slide_id"]
        assert label == ["normal", "tumour"].index(SLIDES[sid][1])
        s = list(SLIDES).index(sid)
        np.testing.assert_array_equal(image.permute(1, 2, 0).numpy(), tiles[sid][info["tile"]])
        assert (info["y"], info["x"]) == (info["tile"] * 16 + s, info["tile"] * 32 + 7)  # yx written
    batch = ds.__getitems__([20, 0, 20, 9, 1])  # what DataLoader calls: one read a slide, order kept
    for index, (image, label, info) in zip([20, 0, 20, 9, 1], batch):
        single = ds[index]
        assert torch.equal(image, single[0]) and label == single[1] and info == single[2]
    as_frame = TileStoreDataset(paths, labels=pd.read_csv(meta, dtype={"slide_id": str}), missing="drop")
    as_dict = TileStoreDataset(paths, labels={k: v[1] for k, v in SLIDES.items() if v[1]}, missing="drop")
    assert as_frame.slide_labels == as_dict.slide_labels == ds.slide_labels == [1, 0, 1, 0, 1]
    numeric = TileStoreDataset(paths, labels={k: i for i, k in enumerate(SLIDES)})
    assert numeric.slide_labels == [0, 1, 2, 3, 4, 5]  # numbers pass as they are
    with pytest.raises(ConfigError, match="column"):
        TileStoreDataset(paths, labels=meta, label_column="subtype")
    with pytest.raises(ConfigError, match="not found"):
        TileStoreDataset(paths, labels=d / "nope.csv")


def _slide_of(ds, indices):
    return [ds.slide_ids[ds.locate(int(i))[0]] for i in indices]


def test_sampler_draws_k_a_slide_each_epoch_reproducibly(cohort):
    _, paths, _, meta = cohort
    ds = TileStoreDataset(paths, labels=meta, missing="drop")
    sampler = SlideTileSampler(ds, tiles_per_slide=5, seed=3)
    for epoch in range(3):
        sampler.set_epoch(epoch)
        drawn = list(sampler)
        assert len(drawn) == len(set(drawn)) == len(sampler)  # no tile twice
        counts = Counter(_slide_of(ds, drawn))
        assert counts == {"007": 5, "A1": 5, "B2": 3, "C3": 5, "D4": 5}  # ground truth: min(k, tiles)
    sampler.set_epoch(1)
    again = SlideTileSampler(ds, tiles_per_slide=5, seed=3)
    again.set_epoch(1)
    assert list(again) == list(sampler)  # seed + epoch decide the draw
    again.set_epoch(2)
    assert list(again) != list(sampler)


def test_balanced_sampler_gives_each_label_the_same_count(cohort):
    _, paths, _, meta = cohort
    ds = TileStoreDataset(paths, labels=meta, missing="drop")
    sampler = SlideTileSampler(ds, tiles_per_slide=6, balance=True, seed=0)
    # ground truth: tumour slides give 6 + 3 + 5 = 14 tiles, normal slides 6 + 6 = 12 -> 12 each
    for epoch in range(4):
        sampler.set_epoch(epoch)
        drawn = list(sampler)
        labels = Counter(ds.classes[ds.slide_labels[ds.locate(i)[0]]] for i in drawn)
        assert labels == {"tumour": 12, "normal": 12} and len(set(drawn)) == 24 == len(sampler)
        assert max(Counter(_slide_of(ds, drawn)).values()) <= 6  # never more than k a slide
    with pytest.raises(ConfigError, match="labels"):
        SlideTileSampler(TileStoreDataset(paths), 4, balance=True)


def test_dataloader_workers_see_the_samplers_epoch(cohort):
    _, paths, tiles, meta = cohort
    ds = TileStoreDataset(paths, labels=meta, missing="drop", with_info=True)
    sampler = SlideTileSampler(ds, tiles_per_slide=4, seed=11)
    loader = DataLoader(ds, batch_size=5, sampler=sampler, num_workers=2)
    for epoch in (0, 1):
        sampler.set_epoch(epoch)
        seen = []
        for images, labels, info in loader:
            for img, sid, t in zip(images, info["slide_id"], info["tile"].tolist()):
                np.testing.assert_array_equal(img.permute(1, 2, 0).numpy(), tiles[sid][t])  # the tile written
                seen.append((sid, t))
        expected = [(ds.slide_ids[s], t) for s, t in map(ds.locate, sampler.epoch_indices(epoch))]
        assert seen == expected  # the order the sampler gave, fetched by two worker processes
        assert Counter(sid for sid, _ in seen) == {"007": 4, "A1": 4, "B2": 3, "C3": 4, "D4": 4}


def test_two_ranks_get_disjoint_equal_shares(cohort):
    _, paths, _, meta = cohort
    ds = TileStoreDataset(paths, labels=meta, missing="drop")
    ranks = [SlideTileSampler(ds, tiles_per_slide=5, seed=2, rank=r, world_size=2) for r in (0, 1)]
    for epoch in (0, 5):
        for r in ranks:
            r.set_epoch(epoch)
        a, b = list(ranks[0]), list(ranks[1])
        whole = ranks[0].epoch_indices(epoch)
        assert len(a) == len(b) == len(whole) // 2 == len(ranks[0])  # 23 drawn: one left out, 11 each
        assert not set(a) & set(b) and len(set(a)) == len(a)  # disjoint, no tile twice in a rank
        assert set(a) | set(b) == set(whole[:22].tolist())


def test_slide_bags_for_multiple_instance_learning(cohort):
    _, paths, tiles, meta = cohort
    bags = SlideBagDataset(paths, labels=meta, missing="drop")
    assert len(bags) == 5
    images, label, info = bags[3]  # C3: all 12 tiles
    assert info["slide_id"] == "C3" and label == 0 and images.shape == (12, 3, 16, 16)
    np.testing.assert_array_equal(images.permute(0, 2, 3, 1).numpy(), tiles["C3"])
    np.testing.assert_array_equal(info["yx"].numpy(), np.stack([np.arange(12) * 16 + 3, np.arange(12) * 32 + 7], 1))
    some = SlideBagDataset(paths, labels=meta, missing="drop", max_tiles=4, seed=5)
    first = some[3][2]["tiles"].tolist()
    assert len(first) == len(set(first)) == 4 and first == sorted(first)
    assert some[3][2]["tiles"].tolist() == first  # same epoch, same bag
    some.set_epoch(1)
    assert some[3][2]["tiles"].tolist() != first
    assert some[2][0].shape[0] == 3  # B2 has only 3 tiles
    loader = DataLoader(some, batch_size=1, num_workers=2)
    got = {info["slide_id"][0]: (imgs[0], info["tiles"][0]) for imgs, _, info in loader}
    assert sorted(got) == ["007", "A1", "B2", "C3", "D4"]
    for sid, (imgs, idx) in got.items():
        np.testing.assert_array_equal(imgs.permute(0, 2, 3, 1).numpy(), tiles[sid][idx.numpy()])


def test_dataloader_two_workers_every_tile_once(cohort):
    _, paths, tiles, _ = cohort
    ds = TileStoreDataset(paths[:2])
    seen = []
    loader = DataLoader(ds, batch_size=4, shuffle=True, num_workers=2, generator=torch.Generator().manual_seed(0))
    for images, (slide, tile) in loader:
        assert images.shape[1:] == (3, 16, 16) and images.dtype == torch.uint8
        for img, s, t in zip(images, slide.tolist(), tile.tolist()):
            np.testing.assert_array_equal(img.permute(1, 2, 0).numpy(), tiles[ds.slide_ids[s]][t])
            seen.append((s, t))
    assert sorted(seen) == [(0, i) for i in range(9)] + [(1, i) for i in range(6)]
