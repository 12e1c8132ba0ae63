"""tile-out end to end on a fatty slide whose fat the density threshold alone loses (draw 11 of the
fat family in tests/tissue/test_fat_mesh.py: walls of about 0.3 eosin OD, 2.5 µm wide, round cells
of about 70 µm; without the mesh step none of it was kept), under mottled light, written as a
JPEG pyramid at an odd, real-world 20x level-0 µm/px. Ground truth: the region the fat cells were drawn in."""

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import tilewright as tw
from tilewright.cli.tile_out import main as tile_out

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tissue"))
from test_fat_mesh import FINE, scene  # noqa: E402

MPP = 0.4991
SEED = 11
MOTTLE = 0.02  # relative standard deviation of the mottled light


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    import cv2
    from tilewright.demo.pyramid import write_pyramid

    fine, fat, tissue, _, _ = scene(SEED)
    h, w = fat.shape
    # mottled light (haze in the mounting medium, 10-20 µm blotches): it survives the pyramid's
    # averaging, unlike pixel noise, and raises the glass's noise at the thumbnail as on real scans
    mottle = cv2.GaussianBlur(np.random.default_rng(SEED).normal(0, 1, (h, w)).astype(np.float32), (0, 0), 6.0)
    fine = fine * (1.0 + MOTTLE * mottle / mottle.std())[..., None]
    shape = (int(h * FINE / MPP), int(w * FINE / MPP))
    image = np.clip(cv2.resize(fine.astype(np.float32), shape[::-1], interpolation=cv2.INTER_LINEAR) + 0.5, 0, 255).astype(np.uint8)
    src = tmp_path_factory.mktemp("fat")
    write_pyramid(src / "fatty.tif", image, mpp=MPP, tile=256, compression="jpeg")
    out = tmp_path_factory.mktemp("out")
    code = tile_out([str(src), str(out), "--tile", "128", "--quiet"])
    manifest = pd.read_csv(out / "manifest.csv", keep_default_na=False).set_index("slide_id")
    return code, out, manifest, fat, tissue


def test_fat_is_tiled(run):
    import cv2

    code, out, manifest, fat, tissue = run
    assert code == 0 and manifest.loc["fatty", "status"] == "ok"
    store = tw.open_store(out / "fatty.zarr")
    mask = np.asarray(store.mask, bool)
    scale = FINE / float(store.attrs["mask_mpp"])  # the drawing's pixels to the mask's
    size = (int(fat.shape[1] * scale), int(fat.shape[0] * scale))
    truth = cv2.resize(fat.astype(np.float32), size, interpolation=cv2.INTER_AREA) >= 0.5
    hh, ww = min(mask.shape[0], truth.shape[0]), min(mask.shape[1], truth.shape[1])
    assert mask[:hh, :ww][truth[:hh, :ww]].mean() >= 0.9  # aim of issue 28; was 0 without the mesh step
    # tiles are planned over the fat: their centres in the drawn fat region
    f = store.attrs["mpp"] / FINE
    centres = ((np.asarray(store.yx) + store.attrs["tile"] / 2) * f).astype(int)
    inside = [fat[y, x] for y, x in centres if y < fat.shape[0] and x < fat.shape[1]]
    assert sum(inside) >= 0.3 * len(inside) and sum(inside) >= 20
