"""A fair before/after: both sides from the same tiles, pixels, metrics and k (issue 19, item 3)."""

import shutil
import warnings

import numpy as np
import pandas as pd
import pytest
import zarr

import tilewright as tw
from tilewright.audit.before_after import audit_before_after
from tilewright.audit.source import read_pair
from tilewright.errors import StoreError


def quiet(fn, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fn(*args, **kwargs)


@pytest.fixture(scope="module")
def unnormalized(real_cohort, tmp_path_factory):
    """Six of the cohort's slides tiled again without normalization: (tiles folder, metadata)."""
    tiles, meta = real_cohort
    slides = sorted((tiles.parent / "slides").rglob("*.tif"))
    keep = [p for p in slides if p.stem in {"N01", "N02", "N03", "S01", "S02", "S03"}]
    out = tmp_path_factory.mktemp("unnormalized") / "tiles"
    tw.tile_cohort(keep, out, tw.TilingConfig(mpp=1.0, tile=64, qc_overlay=False), progress=False)
    return out, meta[meta["slide_id"].isin([p.stem for p in keep])]


def test_without_normalization_both_sides_are_identical(unnormalized):
    out, meta = unnormalized
    raw, stored = read_pair(out, "S02", max_tiles=6, seed=1)
    # ground truth constructed: the run stored its tiles as read, so re-reading the same positions
    # from the slide file gives the same pixels, bit for bit
    assert raw.tissue.shape[0] > 1000
    np.testing.assert_array_equal(raw.tissue, stored.tissue)
    np.testing.assert_array_equal(raw.background, stored.background)
    before, after = quiet(audit_before_after, out, metadata=meta, tsne=False, max_tiles=8)
    pd.testing.assert_frame_equal(before.metrics, after.metrics)
    pd.testing.assert_frame_equal(before.associations, after.associations)
    assert "The only difference is stain normalization (none)" in before.notes["_pairing"]


def test_normalized_sides_share_tiles_pixels_and_k(real_cohort, audits):
    out, _ = real_cohort
    raw, stored = read_pair(out, "N02", max_tiles=16, seed=0)
    # one set of tissue masks (from the raw tiles) selects the pixels of both sides
    assert raw.tissue.shape == stored.tissue.shape and raw.background.shape == stored.background.shape
    assert not np.array_equal(raw.tissue, stored.tissue)  # normalization changed the colours
    before, after = audits
    assert list(before.metrics.index) == list(after.metrics.index)
    assert before.n_clusters == after.n_clusters
    assert before.embedding.features == after.embedding.features
    for name in ("tissue_fraction", "n_tiles"):  # the same tiles of the same slides on both sides
        pd.testing.assert_series_equal(before.metrics[name], after.metrics[name])
    assert before.source == "source" and after.source == "tiles"
    assert "same pixels" in before.notes["_pairing"] and "(macenko)" in before.notes["_pairing"]


def test_missing_or_changed_source_slides_are_skipped_on_both_sides(real_cohort, tmp_path):
    tiles, meta = real_cohort
    copy = tmp_path / "tiles"
    shutil.copytree(tiles, copy)
    slides = {p.stem: p for p in (tiles.parent / "slides").rglob("*.tif")}
    # repoint two stores at copies of their slides: one then removed, one then changed
    for slide_id in ("N03", "S04"):
        moved = tmp_path / f"{slide_id}.tif"
        shutil.copyfile(slides[slide_id], moved)
        group = zarr.open_group(str(copy / f"{slide_id}.zarr"), mode="r+")
        group.attrs["source"] = {**dict(group.attrs["source"]), "path": str(moved)}
    (tmp_path / "N03.tif").unlink()
    with open(tmp_path / "S04.tif", "ab") as handle:
        handle.write(b"\0" * 10)
    before, after = quiet(audit_before_after, copy, metadata=meta, tsne=False, max_tiles=4)
    assert "N03" not in before.metrics.index and "S04" not in after.metrics.index and len(after.metrics) == 8
    reasons = dict(zip(before.skipped["slide_id"], before.skipped["reason"]))
    assert "source slide not found" in reasons["N03"] and "changed since it was tiled" in reasons["S04"]
    assert after.skipped.equals(before.skipped)
    for store in copy.glob("*.zarr"):  # every source gone: a clear error
        group = zarr.open_group(str(store), mode="r+")
        group.attrs["source"] = {**dict(group.attrs["source"]), "path": str(tmp_path / "gone.tif")}
    with pytest.raises(StoreError, match="no slide could be read both from its source and its store"):
        quiet(audit_before_after, copy, metadata=meta, tsne=False, max_tiles=4)


def test_cli_audits_the_raw_tiles_alone(real_cohort, tmp_path, capsys):
    from tilewright.cli.audit_cmd import build_parser, run

    out, meta = real_cohort
    meta_csv = tmp_path / "meta.csv"
    meta.to_csv(meta_csv, index=False)
    args = build_parser().parse_args(["audit", str(out), "--source", "source", "--metadata", str(meta_csv),
                                      "--max-tiles", "4", "--report", str(tmp_path / "rep")])
    assert run(args) == 0
    printed = capsys.readouterr().out
    # ground truth constructed (real_cohort.py): raw colour follows site
    assert "read raw from the source slides" in printed and "Colour clusters follow site" in printed
    assert "Before / after" not in printed and (tmp_path / "rep" / "report.html").is_file()
