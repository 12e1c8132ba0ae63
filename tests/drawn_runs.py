"""tile-out end to end on a drawn hard slide (tests/hard_slides.HardSlide): written as a JPEG
pyramid at a level-0 µm/px, run, and its store's mask read back beside the layout's truth."""

from __future__ import annotations

import numpy as np
import pandas as pd

import tilewright as tw
from tilewright.cli.tile_out import main as tile_out


def run_drawn(tmp_path_factory, name: str, slide, mpp: float, drawn_mpp: float):
    """Write ``slide`` as ``<name>.tif`` (drawn at ``drawn_mpp``, resized to level 0 at ``mpp``:
    the mask is read near 8 µm/px, far coarser than either), run tile-out on its folder; returns
    (exit code, output folder, manifest indexed by slide id)."""
    import cv2
    from tilewright.demo.pyramid import write_pyramid

    image = cv2.resize(slide.render(drawn_mpp), slide.shape_at(mpp)[::-1], interpolation=cv2.INTER_LINEAR)
    src = tmp_path_factory.mktemp(name)
    write_pyramid(src / f"{name}.tif", image, mpp=mpp, tile=256, compression="jpeg")
    out = tmp_path_factory.mktemp("out")
    code = tile_out([str(src), str(out), "--tile", "128", "--quiet"])
    return code, out, pd.read_csv(out / "manifest.csv", keep_default_na=False).set_index("slide_id")


def mask_and_truth(out, name: str, slide):
    """The store, its tissue mask and the layout's truth maps at the mask's µm/px, same shape."""
    store = tw.open_store(out / f"{name}.zarr")
    mask = np.asarray(store.mask, bool)
    truth = slide.truth(float(store.attrs["mask_mpp"]))
    h, w = min(mask.shape[0], truth["tissue"].shape[0]), min(mask.shape[1], truth["tissue"].shape[1])
    return store, mask[:h, :w], {k: v[:h, :w] for k, v in truth.items()}


def tiles_on(store, where: np.ndarray) -> list[bool]:
    """For each tile of the store, whether its centre (in the mask's pixels) lies in ``where``."""
    f = store.attrs["mpp"] / float(store.attrs["mask_mpp"])
    centres = ((np.asarray(store.yx) + store.attrs["tile"] / 2) * f).astype(int)
    return [bool(where[y, x]) for y, x in centres if y < where.shape[0] and x < where.shape[1]]
