"""CPU cost of binding one slide's stain normalizer: the estimate and the outcome check.

A run estimates each slide's stain once, from ``stain_sample`` (64) tissue tiles of 256 x 256 px,
then normalizes that sample and measures it against the target (:mod:`tilewright.run.stain_bind`).
This prints the CPU seconds (``time.process_time``, one thread) of: the estimate as it reads
pixels now (clipped pixels left out, 5 x 5 intensity means; :mod:`tilewright.stain.estimate_od`),
the same maths on the pixels as they are (the reading of earlier versions, rebuilt here), the
outcome check, and the per-tile transform of the same 64 tiles for scale. The per-tile transform
itself is unchanged by the estimate and the check (they run once a slide, beside the first reads).

Run: ``.venv/bin/python benchmarks/stain_estimate_cost.py``
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[_var] = "1"

import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import cv2  # noqa: E402
import numpy as np  # noqa: E402

cv2.setNumThreads(1)
sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

from stain.he_draws import draw  # noqa: E402

from tilewright import MacenkoTransfer  # noqa: E402
from tilewright.stain.estimate import _stain_vectors, estimate_stain_profile, max_concentrations  # noqa: E402
from tilewright.stain.outcome import measure_outcome  # noqa: E402
from tilewright.stain.tissue_pixels import tissue_od  # noqa: E402


def cpu(fn, repeat=3):
    best = float("inf")
    for _ in range(repeat):
        t0 = time.process_time()
        fn()
        best = min(best, time.process_time() - t0)
    return best


def main():
    tiles = np.stack([draw(seed, side=256).rgb for seed in range(64)])  # 64 tiles, 256 x 256
    glass = None

    def as_read_before():
        od, _ = tissue_od(tiles)
        stains = _stain_vectors(od, 1.0)
        return max_concentrations(od, stains)

    target = MacenkoTransfer().fit(tiles[:16])
    bound = target.fit_source(tiles)
    out = bound.transform(tiles)
    rows = [("estimate, pixels as they are (earlier reading)", cpu(as_read_before)),
            ("estimate, clipped left out + 5x5 intensity means (now)", cpu(lambda: estimate_stain_profile(tiles))),
            ("outcome check on 16 of the tiles (normalize, re-estimate, colour)",
             cpu(lambda: measure_outcome(tiles[::4], bound.transform(tiles[::4]), glass=glass,
                                         target_colour=[50.0, 40.0, -30.0], target_stains=target.stain_matrix,
                                         target_maxima=target.max_concentrations))),
            ("per-tile transform of the 64 tiles (unchanged)", cpu(lambda: bound.transform(tiles, out=out)))]
    print(f"{'step (64 tiles of 256 x 256 px, one thread)':60s} CPU s")
    for name, seconds in rows:
        print(f"{name:60s} {seconds:6.3f}")


if __name__ == "__main__":
    main()
