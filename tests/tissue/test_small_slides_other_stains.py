"""Small slides stained with a real stain pair other than Ruifrok & Johnston's keep their tissue.

A biopsy-sized slide (0.7 x 0.9 mm) gives its thumbnail few pixels; stained with a stain pair
turned away from the Ruifrok & Johnston plane, its first plane fit (with the pieces off that plane
left out as possible marker) can be refused, and the tissue was then taken for ink and the slide
reported "all tissue is ink". The stain pair here is a widely used Macenko reference pair
(hematoxylin (0.5626, 0.7201, 0.4062), eosin (0.2159, 0.8012, 0.5581); 8 and 29 degrees from the
Ruifrok & Johnston vectors): H&E by any measure. Ground truth: the tissue the test drew.
"""

from __future__ import annotations

import numpy as np
import pytest

import tilewright as tw
from helpers import write_slide

OTHER_PAIR = np.stack([np.array([0.5626, 0.7201, 0.4062]), np.array([0.2159, 0.8012, 0.5581])])


@pytest.mark.parametrize("seed", [31, 32, 33, 34])
@pytest.mark.parametrize("mpp", [0.4991, 0.2428])
def test_small_slide_of_another_stain_pair_is_tissue_not_ink(tmp_path, seed, mpp):
    path, layout = write_slide(tmp_path / f"s{seed}.tif", mpp=mpp, size_um=(700.0, 900.0), seed=seed,
                               stains=OTHER_PAIR, concentration=(1.3, 1.2))
    with tw.open(path) as slide:
        mask = tw.tissue_mask(slide)
    truth = layout.tissue_truth(mask.mpp)[: mask.array.shape[0], : mask.array.shape[1]]
    kept = (mask.array & truth).sum() / truth.sum()
    assert kept >= 0.9, (kept, mask.warnings)  # ground truth: the drawn tissue
    assert mask.params["ink_share"] <= 0.05, mask.warnings  # no marker was drawn
