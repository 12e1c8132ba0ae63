"""Builds walkthrough.ipynb from the cells below.

Run ``python notebooks/build_walkthrough.py --execute`` to store it with its outputs (pictures).
"""

from pathlib import Path

import nbformat as nbf

CELLS = [
    ("md", """# tilewright walkthrough

From one whole-slide image to a lazily readable tile store: open a slide at a common µm/px, mask
tissue, plan tiles, normalize stain, tile, and read the tiles back. Everything runs on a small
synthetic slide written here (an invented example; no patient data).

*Research use only: not for diagnosis or clinical decisions.*"""),
    ("code", """import tempfile
from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np

import tilewright as tw
from tilewright.demo.pyramid import write_pyramid
from tilewright.demo.synth import random_layout

work = Path(tempfile.mkdtemp(prefix="tilewright-walkthrough-"))
# A 1.6 x 2 mm synthetic H&E section scanned at 0.25 µm/px ("40x"), with a blue pen stroke
layout = random_layout(1600.0, 2000.0, seed=4, n_islands=2, pens=1)
slide_path = work / "example40x.svs"
write_pyramid(slide_path, layout.renderer(0.25), shape=layout.shape_at(0.25), mpp=0.25,
              layout="svs", objective=40.0)
slide_path"""),
    ("md", """## Open the slide and read it at 0.5 µm/px
`tw.open` picks the TIFF backend (tifffile, decoding only the tiles a read touches) or OpenSlide.
`at_mpp(0.5)` area-averages the 40x level down to 0.5 µm/px."""),
    ("code", """slide = tw.open(slide_path)
print(slide.backend, slide.mpp, slide.objective, slide.dimensions)
for level in slide.levels:
    print(level)
view = slide.at_mpp(0.5)
print("view at 0.5 µm/px:", view.shape, "from level", view.source_level, "scale", view.scale)
thumb = slide.thumbnail(mpp=8.0)
plt.figure(figsize=(5, 4)); plt.imshow(thumb); plt.title("thumbnail at 8 µm/px"); plt.axis("off")
plt.show()"""),
    ("md", "## Tissue mask (ink excluded) and tile plan"),
    ("code", """mask = tw.tissue_mask(slide)
plan = tw.plan_tiles(view, mask, tile=256, min_tissue=0.5)
print(f"tissue {mask.tissue_fraction:.1%} of the slide, ink {mask.ink.mean():.1%}, {len(plan)} tiles")
overlay = tw.render_overlay(slide, mask, plan, work / "overlay.png")
plt.figure(figsize=(6, 5)); plt.imshow(plt.imread(overlay)); plt.axis("off"); plt.show()"""),
    ("md", """## Stain normalization
Macenko et al. (2009): fit a target on a reference image, estimate this slide's stain once from a
sample of its tiles, then map every tile. Here the reference is a second synthetic section stained
differently."""),
    ("code", """from tilewright.demo.cohort import SITES
other = random_layout(800.0, 800.0, seed=9, n_islands=1, stains=SITES["site-south"]["stains"],
                      concentration=(1.3, 1.3))
reference = other.render(0.5, 0, 0, *other.shape_at(0.5))
target = tw.MacenkoTransfer().fit(reference)
tiles = np.stack([view.read(int(y), int(x), 256, 256) for y, x in plan.yx[:6]])
bound = target.fit_source(tiles)
normalized = bound.transform(tiles)
fig, axes = plt.subplots(2, 6, figsize=(12, 4))
for i in range(6):
    axes[0, i].imshow(tiles[i]); axes[1, i].imshow(normalized[i])
    axes[0, i].axis("off"); axes[1, i].axis("off")
axes[0, 0].set_title("raw"); axes[1, 0].set_title("Macenko")
plt.show()
print("target stain matrix (H, E rows):\\n", np.round(target.stain_matrix, 3))"""),
    ("md", "## Tile the slide into a store and read it lazily"),
    ("code", """config = tw.TilingConfig(mpp=0.5, tile=256, normalizer="macenko", reference=target.to_dict())
result = tw.tile_slide(slide_path, work / "out", config)
store = tw.open_store(result.store)
print(result.status, len(store), "tiles;", store.attrs["mpp"], "µm/px; source level", store.attrs["source_level"])
lazy = store.to_dask()
print(lazy)
print("mean colour of the first 16 tiles:", lazy[:16].mean(axis=(0, 1, 2)).compute().round(1))
assert np.array_equal(store[0], lazy[0].compute())"""),
    ("code", """fig, axes = plt.subplots(1, 6, figsize=(12, 2.2))
for ax, i in zip(axes, np.linspace(0, len(store) - 1, 6).astype(int)):
    ax.imshow(store[i]); ax.set_title(f"y={store.yx[i][0]} x={store.yx[i][1]}", fontsize=8); ax.axis("off")
plt.show()"""),
    ("md", """## For training
`tilewright.torch.TileStoreDataset` is a map-style PyTorch dataset over a store or a whole output
folder; it works with `DataLoader(num_workers>0)` (optional extra `torch`)."""),
    ("code", """try:
    from torch.utils.data import DataLoader
    from tilewright.torch import TileStoreDataset
    ds = TileStoreDataset(store)
    images, (slide_index, tile_index) = next(iter(DataLoader(ds, batch_size=8, shuffle=True)))
    print(images.shape, images.dtype)
except ImportError:
    print("torch not installed: pip install 'tilewright[torch]'")
slide.close()"""),
]


def build(path: Path, execute: bool = False) -> None:
    nb = nbf.v4.new_notebook()
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nb.cells = [nbf.v4.new_markdown_cell(src) if kind == "md" else nbf.v4.new_code_cell(src)
                for kind, src in CELLS]
    if execute:
        import tempfile

        from nbclient import NotebookClient

        with tempfile.TemporaryDirectory() as d:
            NotebookClient(nb, timeout=300, kernel_name="python3", resources={"metadata": {"path": d}}).execute()
    nbf.write(nb, str(path))


if __name__ == "__main__":
    import sys

    build(Path(__file__).with_name("walkthrough.ipynb"), execute="--execute" in sys.argv)
