"""Reinhard colour transfer in CIE L*a*b* for H&E images.

With a glass colour ``I0`` (the incident light of the Beer–Lambert law) each channel is first
divided by the glass, ``I / I0`` clipped at 1 — the same as measuring optical density relative
to the glass, ``OD = max(0, log10(I0 / I))``, and rendering it on white. The tissue/glass split
and the CIELAB statistics then describe the stains alone, not the scanner's glass tint.

References
----------
Reinhard E, Adhikhmin M, Gooch B, Shirley P (2001). Color transfer between images. IEEE
Computer Graphics and Applications 21(5):34-41.
"""

from __future__ import annotations

from functools import lru_cache
from typing import NamedTuple

import numpy as np

from ..errors import ConfigError, StainEstimationError
from .density import WHITE, check_glass, check_rgb, glass_key, glass_od_lut, od_lut
from .lab import _unit_lut
from .transfer import StainTransfer, as_float_list, glass_list
from .od_transform import BLOCK_PIXELS
from .tissue_pixels import DEFAULT_BETA, MAX_STAT_PIXELS, tissue_od

__all__ = ["ReinhardTransfer", "LabStats", "lab_statistics"]

#: Fewer pixels than this and colour statistics are not trusted.
MIN_PIXELS = 500
#: A channel with a smaller standard deviation (L*a*b* units) is flat and cannot be matched.
MIN_STD = 1e-2


@lru_cache(maxsize=64)
def _glass_unit_lut(key: tuple) -> np.ndarray:
    lut = np.minimum(np.arange(256, dtype=np.float64)[:, None] / np.asarray(key)[None, :], 1.0)
    lut = lut.astype(np.float32).reshape(256, 1, 3)
    lut.flags.writeable = False
    return lut


def unit_lut(glass=None) -> np.ndarray:
    """Lookup table from uint8 to 0..1 intensity relative to the glass, for ``cv2.LUT``.

    Parameters
    ----------
    glass : array_like (3,), optional
        RGB of blank glass; default pure white.

    Returns
    -------
    ndarray, float32
        Shape (256,) ``i / 255`` for white glass, else (256, 1, 3) ``min(i / glass[c], 1)``.
    """
    key = glass_key(glass)
    return _unit_lut() if key is None else _glass_unit_lut(key)


def _od_lut_for(glass) -> np.ndarray:
    if check_glass(glass) is None:
        return od_lut()
    return np.ascontiguousarray(glass_od_lut(glass)).reshape(256, 1, 3)


class LabStats(NamedTuple):
    """Per-channel CIE L*a*b* mean and standard deviation (each shape (3,))."""

    mean: np.ndarray
    std: np.ndarray


def lab_statistics(rgb, *, tissue_only: bool = True, beta: float = DEFAULT_BETA,
                   glass=None) -> LabStats:
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
    glass : array_like (3,), optional
        RGB of the image's blank glass (incident light ``I0``; default pure white). Tissue is
        found by OD relative to it and colours are taken as ``min(I / I0, 1)``, so a tinted
        glass does not tint the statistics.

    Returns
    -------
    LabStats

    Raises
    ------
    StainEstimationError
        Fewer than 500 usable pixels, or a channel without variation.
    ValueError
        For an invalid glass colour.
    """
    import cv2

    arr = check_rgb(rgb)
    if tissue_only:
        _, pixels = tissue_od(arr, beta=beta, glass=glass)
    else:
        pixels = arr.reshape(-1, 3)
        if pixels.shape[0] > MAX_STAT_PIXELS:
            pixels = pixels[:: -(-pixels.shape[0] // MAX_STAT_PIXELS)]
    if pixels.shape[0] < MIN_PIXELS:
        raise StainEstimationError(
            f"only {pixels.shape[0]} tissue pixels (optical density >= {beta}); at least "
            f"{MIN_PIXELS} are needed for colour statistics. Give a region with more tissue."
        )
    unit = cv2.LUT(np.ascontiguousarray(pixels).reshape(-1, 1, 3), unit_lut(glass))
    mean, std = cv2.meanStdDev(cv2.cvtColor(unit, cv2.COLOR_RGB2Lab))
    mean, std = mean.ravel(), std.ravel()
    if np.any(std < MIN_STD):
        raise StainEstimationError(
            f"the image colours do not vary (L*a*b* standard deviations {std.round(4).tolist()}); "
            "a flat image cannot be colour-matched"
        )
    return LabStats(mean, std)


class ReinhardTransfer(StainTransfer):
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
        pixel counts and every pixel is transformed (the original method). When the images'
        glass colour is set (:meth:`fit_source` / :meth:`with_glass`), "unchanged" means
        divided by the glass, so the glass itself becomes white.
    per_tile : bool, default False
        Source statistics per image of a batch (an image with too little tissue falls back to
        the bound statistics of :meth:`fit_source`, or is returned unchanged).
    beta : float, default 0.15
        OD threshold for tissue.
    output_glass : array_like (3,), optional
        RGB of the glass the output is rendered with (each channel scaled by ``I0_out / 255``);
        default pure white.

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
    >>> ReinhardTransfer().fit(img).transform(img).dtype
    dtype('uint8')
    """

    method = "reinhard"

    def __init__(self, *, tissue_only: bool = True, per_tile: bool = False,
                 beta: float = DEFAULT_BETA, output_glass=None):
        super().__init__(per_tile=per_tile, output_glass=output_glass)
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

    def _estimate(self, rgb, glass=None) -> LabStats:
        return lab_statistics(rgb, tissue_only=self.tissue_only, beta=self.beta, glass=glass)

    def _set_target(self, stats: LabStats) -> None:
        self.target_mean = np.asarray(stats.mean, np.float64)
        self.target_std = np.asarray(stats.std, np.float64)

    def _target_stats(self) -> LabStats:
        return LabStats(self.target_mean, self.target_std)

    def _apply(self, rgb, source: LabStats, out) -> None:
        import cv2

        scale = self.target_std / np.asarray(source.std, np.float64)
        shift = self.target_mean - np.asarray(source.mean, np.float64) * scale
        m = np.zeros((3, 4), np.float32)
        m[:, :3] = np.diag(scale)
        m[:, 3] = shift
        src = np.ascontiguousarray(rgb).reshape(-1, 1, 3)
        dst = out.reshape(-1, 1, 3) if out.flags.c_contiguous else np.empty_like(src)
        unit, od = unit_lut(self.glass), _od_lut_for(self.glass)
        render = None if self.output_glass is None else (self.output_glass / WHITE).astype(np.float32)
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
            if render is not None:
                new = new * render
            cv2.convertScaleAbs(new, dst=dst[start : start + BLOCK_PIXELS], alpha=float(WHITE))
        if not out.flags.c_contiguous:
            out[...] = dst.reshape(out.shape)

    def _params(self) -> dict:
        return {"tissue_only": self.tissue_only, "per_tile": self.per_tile, "beta": self.beta,
                "output_glass": glass_list(self.output_glass)}

    @classmethod
    def _param_names(cls) -> tuple:
        return ("tissue_only", "per_tile", "beta", "output_glass")

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
    def from_median(cls, fitted, **params) -> ReinhardTransfer:
        """Target = per-channel median of several fitted normalizers' means and deviations.

        Parameters
        ----------
        fitted : sequence of ReinhardTransfer, LabStats or dict
            Fitted normalizers, their statistics, or their ``to_dict()`` output.
        **params
            ``tissue_only``, ``per_tile``, ``beta``, ``output_glass`` of the result (defaults: those of the first
            normalizer given).

        Returns
        -------
        ReinhardTransfer

        Raises
        ------
        ConfigError
            When ``fitted`` is empty or holds an unfitted normalizer.
        """
        stats, first = [], None
        for item in fitted:
            if isinstance(item, ReinhardTransfer):
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


def __getattr__(name: str):  # old spellings, one release (tilewright.renamed)
    from tilewright.renamed import old_name

    return old_name(__name__, name)
