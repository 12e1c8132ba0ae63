"""Throughput of stain normalization on one thread: tilewright kernels vs plain float64 numpy.

Prints megapixels per second (MP/s) of ``transform`` for Macenko and Reinhard, each beside a
plain-numpy float64 implementation of the same maths run in the same process, and the ratio.
The input is a synthetic H&E batch (64 tiles of 256 x 256 px, Beer–Lambert mixtures of the
Ruifrok & Johnston 2001 vectors) so the numbers need no data download.

Run: ``.venv/bin/python benchmarks/stain_throughput.py``
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[_var] = "1"

import time  # noqa: E402

import cv2  # noqa: E402
import numpy as np  # noqa: E402

cv2.setNumThreads(1)

from tilewright import MacenkoTransfer, ReinhardTransfer  # noqa: E402
from tilewright.stain.tissue_pixels import tissue_mask  # noqa: E402

HE = np.array([[0.65, 0.70, 0.29], [0.07, 0.99, 0.11]])
HE /= np.linalg.norm(HE, axis=1, keepdims=True)


def synthetic_batch(seed, n=64, size=256, stains=HE, scale=(1.0, 1.0)):
    rng = np.random.default_rng(seed)
    conc = rng.gamma(2.0, 0.35, (n, size, size, 2)) * scale
    conc[rng.random((n, size, size)) < 0.3] = 0  # glass
    od = conc.astype(np.float32) @ stains.astype(np.float32)
    return np.clip(np.rint(255 * 10 ** (-od)), 0, 255).astype(np.uint8)


def numpy_macenko(rgb, source, target):
    """Float64 numpy: OD, least-squares unmixing, concentration rescale, remix, inverse OD."""
    od = -np.log10(np.maximum(rgb, 1).astype(np.float64) / 255.0)
    conc = od.reshape(-1, 3) @ np.linalg.pinv(source.stain_matrix.astype(np.float64))
    conc *= target.max_concentrations / source.max_concentrations
    out = 255.0 * 10.0 ** (-(conc @ target.stain_matrix.astype(np.float64)))
    return np.clip(np.rint(out), 0, 255).astype(np.uint8).reshape(rgb.shape)


def numpy_reinhard(rgb, source, target_mean, target_std):
    """Float64 numpy (skimage.color rgb2lab / lab2rgb): per-channel mean/std matching."""
    from skimage.color import lab2rgb, rgb2lab

    lab = rgb2lab(rgb)
    lab = (lab - source.mean) * (target_std / source.std) + target_mean
    out = lab2rgb(lab) * 255.0
    tissue = tissue_mask(rgb)[..., None]  # same glass rule as the fast path (hard edge)
    return np.where(tissue, np.clip(np.rint(out), 0, 255), rgb).astype(np.uint8)


def best_rate(fn, megapixels, repeats=3):
    fn()  # warm-up
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return megapixels / best


def main():
    reference = synthetic_batch(1, n=8)
    batch = synthetic_batch(2, stains=HE[::-1][::-1], scale=(0.7, 1.3))
    mp = batch.shape[0] * batch.shape[1] * batch.shape[2] / 1e6
    print(f"input: {batch.shape} uint8 = {mp:.1f} MP, one thread (cv2.setNumThreads(1), BLAS=1)")

    mac = MacenkoTransfer().fit(reference)
    mac_bound = mac.fit_source(batch[:16])
    fast = best_rate(lambda: mac_bound.transform(batch), mp)
    slow = best_rate(lambda: numpy_macenko(batch, mac_bound.source, mac), mp, repeats=1)
    diff = np.abs(mac_bound.transform(batch).astype(int) - numpy_macenko(batch, mac_bound.source, mac))
    print(f"Macenko  transform (bound source) : {fast:7.1f} MP/s | float64 numpy {slow:6.1f} MP/s "
          f"| x{fast / slow:4.1f} | max |diff| {diff.max()} levels")
    est = best_rate(lambda: mac.transform(batch), mp, repeats=1)
    print(f"Macenko  transform (estimate from the batch, then apply): {est:7.1f} MP/s")

    rei = ReinhardTransfer().fit(reference)
    rei_bound = rei.fit_source(batch[:16])
    fast = best_rate(lambda: rei_bound.transform(batch), mp)
    src = rei_bound.source
    slow = best_rate(lambda: numpy_reinhard(batch, src, rei.target_mean, rei.target_std), mp,
                     repeats=1)
    diff = np.abs(rei_bound.transform(batch).astype(int)
                  - numpy_reinhard(batch, src, rei.target_mean, rei.target_std))
    print(f"Reinhard transform (bound source) : {fast:7.1f} MP/s | float64 numpy {slow:6.1f} MP/s "
          f"| x{fast / slow:4.1f} | mean |diff| {diff.mean():.2f} levels")


if __name__ == "__main__":
    main()
