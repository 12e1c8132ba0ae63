"""tile-out end to end on a slide where discs of marker cover most of what is stained (a draw of
tests/marker_masses.py at 0.3 scale: 2.4 x 3 mm, two H&E pieces and two discs of blue, brown or
green ink about 1.5 mm across, partly over the tissue), written as a JPEG pyramid at an odd,
real-world 20x level-0 µm/px. Before the check in tilewright.tissue.exclusions.off_own_stain the
discs were read as tissue of an unusual colour: tiled, with an ``unusual-stain`` warning. Ground
truth: the layout drawn."""

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import tilewright as tw
from tilewright.cli.tile_out import main as tile_out

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from marker_masses import masses  # noqa: E402

MPP = 0.4991
DRAWN = 4 * MPP  # drawn at 1.9964 µm/px, then resized to level 0 (the mask is read near 8 µm/px)
SEED = 4


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    import cv2
    from tilewright.demo.pyramid import write_pyramid

    slide = masses(SEED, 0.3)
    drawn = slide.render(DRAWN)
    shape = slide.shape_at(MPP)
    image = cv2.resize(drawn, shape[::-1], interpolation=cv2.INTER_LINEAR)
    src = tmp_path_factory.mktemp("masses")
    write_pyramid(src / "masses.tif", image, mpp=MPP, tile=256, compression="jpeg")
    out = tmp_path_factory.mktemp("out")
    code = tile_out([str(src), str(out), "--tile", "128", "--quiet"])
    manifest = pd.read_csv(out / "manifest.csv", keep_default_na=False).set_index("slide_id")
    return code, out, manifest, slide


def test_marker_masses_are_left_out_and_said(run):
    code, out, manifest, slide = run
    assert code == 0 and manifest.loc["masses", "status"] == "ok"
    store = tw.open_store(out / "masses.zarr")
    mask = np.asarray(store.mask, bool)
    truth = slide.truth(float(store.attrs["mask_mpp"]))
    hh, ww = min(mask.shape[0], truth["tissue"].shape[0]), min(mask.shape[1], truth["tissue"].shape[1])
    mask, ink, tissue = mask[:hh, :ww], truth["ink"][:hh, :ww], truth["tissue"][:hh, :ww]
    assert ink.sum() >= 0.7 * (ink | tissue).sum()  # ground truth: marker is most of what is stained
    assert mask[tissue & ~ink].mean() >= 0.9
    assert (mask & ink).sum() <= 0.05 * mask.sum()  # was about 0.9 of the mask
    note = manifest.loc["masses", "warnings"]
    assert "high-ink" in note and "unusual-stain" not in note
    # no tile is planned on the discs: tile centres in the drawn layout, on ink-free tissue
    f = store.attrs["mpp"] / float(store.attrs["mask_mpp"])
    centres = ((np.asarray(store.yx) + store.attrs["tile"] / 2) * f).astype(int)
    on_ink = [ink[y, x] for y, x in centres if y < hh and x < ww]
    assert len(on_ink) >= 20 and np.mean(on_ink) <= 0.05
