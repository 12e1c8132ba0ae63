"""Reinhard colour transfer in CIE L*a*b* for H&E images.

References
----------
Reinhard E, Adhikhmin M, Gooch B, Shirley P (2001). Color transfer between images. IEEE
Computer Graphics and Applications 21(5):34-41.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from ..errors import ConfigError, StainEstimationError
from .density import WHITE, check_rgb, od_lut
from .lab import _unit_lut, rgb_to_lab
from .normalizer import StainNormalizer, as_float_list
from .od_transform import BLOCK_PIXELS
from .tissue_pixels import DEFAULT_BETA, MAX_STAT_PIXELS, tissue_od

__all__ = ["ReinhardNormalizer", "LabStats", "lab_statistics"]

#: Fewer pixels than this and colour statistics are not trusted.
MIN_PIXELS = 500
#: A channel with a smaller standard deviation (L*a*b* units) is flat and cannot be matched.
MIN_STD = 1e-2


class LabStats(NamedTuple):
    """Per-channel CIE L*a*b* mean and standard deviation (each shape (3,))."""

    mean: np.ndarray
    std: np.ndarray


def lab_statistics(rgb, *, tissue_only: bool = True, beta: float = DEFAULT_BETA) -> LabStats:
    """Mean and standard deviation of each CIE L*a*b* channel of an image.

    Parameters
    ----------
    rgb : array_like, uint8, shape (..., 3)
        Image or batch of images (pixels pooled).
    tissue_only : bool, default True
        Use only pixels whose optical-density norm is at least ``beta`` (see
        :mod:`tilewright.stain.tissue_pixels`), so that glass does not dominate.
    beta : float, default 0.15
        OD threshold (Macenko et al. 2009).

    Returns
    -------
    LabStats

    Raises
    ------
    StainEstimationError
        Fewer than 500 usable pixels, or a channel without variation.
    """
    import cv2

    arr = check_rgb(rgb)
    if tissue_only:
        _, pixels = tissue_od(arr, beta=beta)
    else:
        pixels = arr.reshape(-1, 3)
        if pixels.shape[0] > MAX_STAT_PIXELS:
            pixels = pixels[:: -(-pixels.shape[0] // MAX_STAT_PIXELS)]
    if pixels.shape[0] < MIN_PIXELS:
        raise StainEstimationError(
            f"only {pixels.shape[0]} tissue pixels (optical density >= {beta}); at least "
            f"{MIN_PIXELS} are needed for colour statistics. Give a region with more tissue."
        )
    mean, std = cv2.meanStdDev(rgb_to_lab(np.ascontiguousarray(pixels).reshape(-1, 1, 3)))
    mean, std = mean.ravel(), std.ravel()
    if np.any(std < MIN_STD):
        raise StainEstimationError(
            f"the image colours do not vary (L*a*b* standard deviations {std.round(4).tolist()}); "
            "a flat image cannot be colour-matched"
        )
    return LabStats(mean, std)


class ReinhardNormalizer(StainNormalizer):
    """Match each CIE L*a*b* channel's mean and standard deviation to a target (Reinhard 2001).

    The Lab space is CIE L*a*b* of sRGB under D65, as ``skimage.color.rgb2lab`` (computed with
    OpenCV's float32 conversion, not its quantized 8-bit Lab; see :mod:`tilewright.stain.lab`).
    Reinhard et al. worked in their decorrelated l-alpha-beta space; CIELAB is the common
    choice for stained tissue and is what this class uses.

    Parameters
    ----------
    tissue_only : bool, default True
        Take statistics over tissue pixels only (OD norm >= ``beta``) and leave glass as is:
        pixels with OD norm below ``beta / 2`` are unchanged, pixels at or above ``beta`` are
        fully transformed, with a linear blend between so no seam appears. With False, every
        pixel counts and every pixel is transformed (the original method).
    per_tile : bool, default False
        Source statistics per image of a batch (an image with too little tissue falls back to
        the bound statistics of :meth:`fit_source`, or is returned unchanged).
    beta : float, default 0.15
        OD threshold for tissue.

    Attributes
    ----------
    target_mean, target_std : ndarray (3,) or None
        Target CIELAB statistics (L*, a*, b*).
    source : LabStats or None
        Bound source statistics.

    References
    ----------
    Reinhard E, Adhikhmin M, Gooch B, Shirley P (2001). Color transfer between images. IEEE
    Computer Graphics and Applications 21(5):34-41.

    Examples
    --------
    >>> from skimage import data
    >>> img = data.immunohistochemistry()
    >>> ReinhardNormalizer().fit(img).transform(img).dtype
    dtype('uint8')
    """

    method = "reinhard"

    def __init__(self, *, tissue_only: bool = True, per_tile: bool = False,
                 beta: float = DEFAULT_BETA):
        super().__init__(per_tile=per_tile)
        beta = float(beta)
        if not (np.isfinite(beta) and beta >= 0):
            raise ValueError(f"beta must be a finite OD threshold >= 0, got {beta}")
        self.tissue_only = bool(tissue_only)
        self.beta = beta
        self.target_mean = None
        self.target_std = None

    @property
    def is_fitted(self) -> bool:
        return self.target_mean is not None

    def _estimate(self, rgb) -> LabStats:
        return lab_statistics(rgb, tissue_only=self.tissue_only, beta=self.beta)

    def _set_target(self, stats: LabStats) -> None:
        self.target_mean = np.asarray(stats.mean, np.float64)
        self.target_std = np.asarray(stats.std, np.float64)

    def _apply(self, rgb, source: LabStats, out) -> None:
        import cv2

        scale = self.target_std / np.asarray(source.std, np.float64)
        shift = self.target_mean - np.asarray(source.mean, np.float64) * scale
        m = np.zeros((3, 4), np.float32)
        m[:, :3] = np.diag(scale)
        m[:, 3] = shift
        src = np.ascontiguousarray(rgb).reshape(-1, 1, 3)
        dst = out.reshape(-1, 1, 3) if out.flags.c_contiguous else np.empty_like(src)
        unit, od = _unit_lut(), od_lut()
        lo, hi = np.float32(self.beta / 2), np.float32(self.beta)
        for start in range(0, src.shape[0], BLOCK_PIXELS):
            block = src[start : start + BLOCK_PIXELS]
            lab = cv2.cvtColor(cv2.LUT(block, unit), cv2.COLOR_RGB2Lab)
            cv2.transform(lab, m, dst=lab)
            new = cv2.cvtColor(lab, cv2.COLOR_Lab2RGB)
            np.maximum(new, 0, out=new)
            if self.tissue_only:
                dens = cv2.LUT(block, od)
                norm = np.sqrt(np.einsum("ijk,ijk->ij", dens, dens))[..., None]
                weight = np.clip((norm - lo) / (hi - lo), 0, 1) if hi > lo else norm >= hi
                orig = cv2.LUT(block, unit)
                new = orig + weight * (new - orig)
            cv2.convertScaleAbs(new, dst=dst[start : start + BLOCK_PIXELS], alpha=float(WHITE))
        if not out.flags.c_contiguous:
            out[...] = dst.reshape(out.shape)

    def _params(self) -> dict:
        return {"tissue_only": self.tissue_only, "per_tile": self.per_tile, "beta": self.beta}

    @classmethod
    def _param_names(cls) -> tuple:
        return ("tissue_only", "per_tile", "beta")

    def _target_dict(self) -> dict:
        return {"target_mean": self.target_mean.tolist(), "target_std": self.target_std.tolist()}

    @classmethod
    def _stats_to_dict(cls, stats: LabStats) -> dict:
        return {"mean": np.asarray(stats.mean, float).tolist(),
                "std": np.asarray(stats.std, float).tolist()}

    @classmethod
    def _stats_from_dict(cls, d) -> LabStats:
        if not isinstance(d, dict):
            raise ConfigError("reinhard statistics must be a dict")
        mean_key, std_key = ("target_mean", "target_std") if "target_mean" in d else ("mean", "std")
        if mean_key not in d or std_key not in d:
            raise ConfigError("reinhard dictionary needs 'target_mean' and 'target_std'")
        mean = as_float_list(d[mean_key], (3,), mean_key).astype(np.float64)
        std = as_float_list(d[std_key], (3,), std_key).astype(np.float64)
        if np.any(std <= 0):
            raise ConfigError(f"reinhard dictionary: {std_key!r} must be positive")
        return LabStats(mean, std)

    @classmethod
    def from_median(cls, fitted, **params) -> ReinhardNormalizer:
        """Target = per-channel median of several fitted normalizers' means and deviations.

        Parameters
        ----------
        fitted : sequence of ReinhardNormalizer, LabStats or dict
            Fitted normalizers, their statistics, or their ``to_dict()`` output.
        **params
            ``tissue_only``, ``per_tile``, ``beta`` of the result (defaults: those of the first
            normalizer given).

        Returns
        -------
        ReinhardNormalizer

        Raises
        ------
        ConfigError
            When ``fitted`` is empty or holds an unfitted normalizer.
        """
        stats, first = [], None
        for item in fitted:
            if isinstance(item, ReinhardNormalizer):
                item._require_fitted()
                first = first or item
                stats.append(LabStats(item.target_mean, item.target_std))
            elif isinstance(item, dict):
                stats.append(cls._stats_from_dict(item))
            else:
                stats.append(item)
        if not stats:
            raise ConfigError("from_median needs at least one fitted normalizer")
        if first is not None:
            params = {**first._params(), **params}
        obj = cls(**params)
        obj._set_target(LabStats(np.median([s.mean for s in stats], 0),
                                 np.median([s.std for s in stats], 0)))
        return obj
