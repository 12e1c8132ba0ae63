"""tile-out end to end on two kinds of drawn slide with marker the mask once kept as tissue, each
written as a JPEG pyramid at an odd, real-world 20x level-0 µm/px (drawn at 4 x that, resized).
Ground truth: the layouts drawn.

- Marker masses (tests/marker_masses.py at 0.3 scale: 2.4 x 3 mm, two H&E pieces and two discs of
  blue, brown or green ink about 1.5 mm across, partly over the tissue): before the check in
  tilewright.tissue.exclusions.off_own_stain the discs were read as tissue of an unusual colour,
  tiled, with an ``unusual-stain`` warning.
- Dark violet discs over tissue (tests/tissue/test_dark_films.py at 0.4 scale: 2.4 x 3.2 mm):
  before tilewright.tissue.films.dark_films they were kept as tissue and tiled.
"""

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tissue"))
from drawn_runs import mask_and_truth, run_drawn, tiles_on  # noqa: E402
from marker_masses import masses  # noqa: E402
from test_dark_films import violet_over_tissue  # noqa: E402

MPP = 0.4991
SLIDES = {"masses": lambda: masses(4, 0.3), "violet": lambda: violet_over_tissue(2, 0.4)}


@pytest.fixture(scope="module", params=sorted(SLIDES))
def run(request, tmp_path_factory):
    slide = SLIDES[request.param]()
    code, out, manifest = run_drawn(tmp_path_factory, request.param, slide, MPP, 4 * MPP)
    assert code == 0 and manifest.loc[request.param, "status"] == "ok"
    store, mask, truth = mask_and_truth(out, request.param, slide)
    return request.param, manifest.loc[request.param, "warnings"], store, mask, truth


def test_marker_is_left_out_and_not_tiled(run):
    name, note, store, mask, truth = run
    ink, tissue = truth["ink"], truth["tissue"]
    assert mask[tissue & ~ink].mean() >= 0.9
    on_ink = tiles_on(store, ink)  # tiles are not planned on the marker
    assert len(on_ink) >= 20 and np.mean(on_ink) <= 0.05
    if name == "masses":
        assert ink.sum() >= 0.7 * (ink | tissue).sum()  # ground truth: marker is most of what is stained
        assert (mask & ink).sum() <= 0.05 * mask.sum()  # was about 0.9 of the mask
        assert "high-ink" in note and "unusual-stain" not in note
    else:
        assert mask[ink].mean() <= 0.1  # was 1.0
        for kind in ("fold", "dense", "blood"):  # two layers; 1.6 x hematoxylin; haemoglobin
            assert mask[truth[kind] & ~ink].mean() >= 0.9, kind
