"""Macenko stain normalization for H&E images.

References
----------
Macenko M, Niethammer M, Marron JS, Borland D, Woosley JT, Guan X, Schmitt C, Thomas NE (2009).
A method for normalizing histology slides for quantitative analysis. IEEE International
Symposium on Biomedical Imaging (ISBI), 1107-1110.
"""

from __future__ import annotations

import numpy as np

from ..errors import ConfigError
from .estimate import (PLAUSIBLE_MAX_RANGE, StainProfile, estimate_stain_profile, estimate_stains, implausible,
                       sample_maxima, MIN_TISSUE_PIXELS)
from .estimate_od import estimate_od
from .density import glass_od
from .transfer import StainTransfer, as_float_list, glass_list
from .od_transform import apply_od_affine
from .tissue_pixels import DEFAULT_BETA, MAX_STAT_PIXELS

#: Each stain's concentration is scaled by the target's maximum over the source's, at most
#: MAX_GAIN: a failed source estimate (maxima near 0) is not blown up, with its noise and JPEG
#: blocks, into dark nuclei the slide never had. Scaling down is not capped (it amplifies
#: nothing). 3 lets a slide stained at a third of the target's strength reach it: an earlier cap
#: of 1.25 left a site stained at 0.7x the cohort's 3.7 CIEDE2000 away from the others after
#: normalization (tests/normalize). Failed estimates are caught by the plausibility check and the
#: per-slide outcome check (tilewright.run.outcome) rather than by this cap.
MAX_GAIN = 3.0

__all__ = ["MacenkoTransfer", "estimate_stains", "estimate_stain_profile", "StainProfile"]


def _unit_rows(matrix: np.ndarray) -> np.ndarray:
    return matrix / np.linalg.norm(matrix, axis=1, keepdims=True)


class MacenkoTransfer(StainTransfer):
    """Map an image's stain vectors and concentration range onto a target's (Macenko 2009).

    Each pixel's optical density is unmixed with the source stain matrix into hematoxylin and
    eosin concentrations, each concentration is scaled by the ratio of the target's to the
    source's 99th-percentile maximum, and the result is remixed with the target stain matrix.
    The whole map is linear in optical density, so it is applied as one 3x3 matrix; glass
    (optical density 0) becomes exactly white.

    Optical density follows the Beer–Lambert law with the glass as incident light:
    ``OD = max(0, log10(I0 / I))`` where ``I0`` is the source slide's glass colour
    (:meth:`fit_source` / :meth:`with_glass`, default pure white) for the source and the
    reference's glass (``fit(..., glass=)``) for the target. The output is rendered as
    ``I = I0_out * 10**(-OD')`` with ``I0_out = output_glass`` (default white), which the affine
    kernel absorbs as the offset ``log10(255 / I0_out)``. A slide scanned through tinted glass
    thus loses its tint in both glass and tissue, instead of keeping it as a site signature.

    Parameters
    ----------
    per_tile : bool, default False
        Estimate the source separately for every image of a batch. An image with too little
        tissue for its own estimate uses the bound estimate from :meth:`fit_source`, or is
        returned unchanged when there is none. By default one source estimate is taken from all
        the pixels given to ``transform`` (or from the bound sample).
    beta : float, default 0.15
        OD threshold for tissue pixels (Macenko et al. 2009).
    alpha : float, default 1.0
        Angle percentile of the extreme stain directions (Macenko et al. 2009).
    output_glass : array_like (3,), optional
        RGB of the glass the output is rendered with; default pure white (255, 255, 255).
    max_gain : float or None, default :data:`MAX_GAIN` (3)
        Largest factor a stain's concentration is scaled up by (scaling down is not capped).
        None applies the published map unbounded.

    Attributes
    ----------
    stain_matrix : ndarray (2, 3) or None
        Target unit OD rows, hematoxylin first.
    max_concentrations : ndarray (2,) or None
        Target 99th-percentile concentrations.
    source : StainProfile or None
        The bound source estimate (set by :meth:`fit_source`).
    glass : ndarray (3,) or None
        Glass colour of the images transformed (None: white).
    reference_glass : ndarray (3,) or None
        Glass colour of the reference the target was fitted on (None: white).

    References
    ----------
    Macenko M, Niethammer M, Marron JS, Borland D, Woosley JT, Guan X, Schmitt C, Thomas NE
    (2009). A method for normalizing histology slides for quantitative analysis. IEEE
    International Symposium on Biomedical Imaging (ISBI), 1107-1110.

    Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
    deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.

    Examples
    --------
    >>> from skimage import data
    >>> img = data.immunohistochemistry()
    >>> norm = MacenkoTransfer().fit(img)
    >>> norm.transform(img).shape
    (512, 512, 3)
    """

    method = "macenko"

    def __init__(self, *, per_tile: bool = False, beta: float = DEFAULT_BETA, alpha: float = 1.0,
                 output_glass=None, max_gain: float | None = MAX_GAIN):
        super().__init__(per_tile=per_tile, output_glass=output_glass)
        beta, alpha = float(beta), float(alpha)
        if not (np.isfinite(beta) and beta >= 0):
            raise ValueError(f"beta must be a finite OD threshold >= 0, got {beta}")
        if not (0 <= alpha < 50):
            raise ValueError(f"alpha must be a percentile in [0, 50), got {alpha}")
        self.beta = beta
        self.alpha = alpha
        if max_gain is not None and not (np.isfinite(max_gain) and max_gain >= 1):
            raise ValueError(f"max_gain must be a number >= 1 or None, got {max_gain}")
        self.max_gain = None if max_gain is None else float(max_gain)
        self.stain_matrix = None
        self.max_concentrations = None

    @property
    def is_fitted(self) -> bool:
        return self.stain_matrix is not None

    def _estimate(self, rgb, glass=None):
        return estimate_stain_profile(rgb, beta=self.beta, alpha=self.alpha, glass=glass)

    def _set_target(self, stats: StainProfile) -> None:
        self.stain_matrix = np.asarray(stats.stain_matrix, np.float32)
        self.max_concentrations = np.asarray(stats.max_concentrations, np.float32)

    def od_matrix(self, source: StainProfile | None = None) -> np.ndarray:
        """The 3x3 optical-density map ``OD_out = OD_in @ A`` from a source to the target.

        Parameters
        ----------
        source : StainProfile, optional
            Defaults to the bound source estimate.

        Returns
        -------
        ndarray, float64, shape (3, 3)
            ``pinv(S_src) @ diag(max_tgt / max_src) @ S_tgt``, each ratio at most ``max_gain``
            (unless ``max_gain`` is None, the published map).
        """
        self._require_fitted()
        source = self.source if source is None else source
        if source is None:
            raise ConfigError("no source estimate: pass one or call fit_source(sample) first")
        unmix = np.linalg.pinv(np.asarray(source.stain_matrix, np.float64))  # (3, 2)
        scale = np.asarray(self.max_concentrations, np.float64) / np.asarray(
            source.max_concentrations, np.float64
        )
        if self.max_gain is not None:
            scale = np.minimum(scale, self.max_gain)  # reducing a stain amplifies nothing: not capped
        return (unmix * scale) @ np.asarray(self.stain_matrix, np.float64)

    def _implausible(self, source) -> str:
        return implausible(source)

    def _target_stats(self):
        return StainProfile(self.stain_matrix, self.max_concentrations, 0)

    def _fallback_source(self, rgb, glass):
        """The target's stains with the slide's own 99th-percentile concentrations under them
        (the slide keeps its intensity range), read like an estimate (clipped pixels left out,
        :func:`~tilewright.stain.estimate.sample_maxima`), or the target's maxima too when the
        slide has too few tissue pixels or its maxima are out of range."""
        sample = estimate_od(rgb, beta=self.beta, glass=glass, max_pixels=MAX_STAT_PIXELS)
        if sample.single.shape[0] >= MIN_TISSUE_PIXELS:
            maxima = sample_maxima(sample, self.stain_matrix)
            lo, hi = PLAUSIBLE_MAX_RANGE
            if np.all(np.isfinite(maxima)) and np.all((maxima >= lo) & (maxima <= hi)):
                return (StainProfile(np.asarray(self.stain_matrix, np.float32), maxima, int(sample.n_tissue),
                                     float(sample.clipped_share)),
                        "the target's stain vectors with the slide's own concentration maxima")
        return self._target_stats(), "the target's stain vectors and concentration maxima"

    def _apply(self, rgb, source, out) -> None:
        offset = None if self.output_glass is None else glass_od(self.output_glass)
        apply_od_affine(rgb, self.od_matrix(source), offset, out=out, glass=self.glass)

    def _params(self) -> dict:
        return {"per_tile": self.per_tile, "beta": self.beta, "alpha": self.alpha,
                "output_glass": glass_list(self.output_glass), "max_gain": self.max_gain}

    @classmethod
    def _param_names(cls) -> tuple:
        return ("per_tile", "beta", "alpha", "output_glass", "max_gain")

    def _target_dict(self) -> dict:
        return self._stats_to_dict(StainProfile(self.stain_matrix, self.max_concentrations, 0))

    @classmethod
    def _stats_to_dict(cls, stats: StainProfile) -> dict:
        return {
            "stain_matrix": np.asarray(stats.stain_matrix, np.float64).tolist(),
            "max_concentrations": np.asarray(stats.max_concentrations, np.float64).tolist(),
        }

    @classmethod
    def _stats_from_dict(cls, d) -> StainProfile:
        if not isinstance(d, dict) or "stain_matrix" not in d or "max_concentrations" not in d:
            raise ConfigError("macenko dictionary needs 'stain_matrix' and 'max_concentrations'")
        matrix = as_float_list(d["stain_matrix"], (2, 3), "stain_matrix")
        maxima = as_float_list(d["max_concentrations"], (2,), "max_concentrations")
        if np.any(np.linalg.norm(matrix, axis=1) == 0) or np.any(maxima <= 0):
            raise ConfigError("macenko dictionary: stain rows must be non-zero, maxima positive")
        return StainProfile(_unit_rows(matrix).astype(np.float32), maxima, 0)

    @classmethod
    def from_median(cls, fitted, **params) -> MacenkoTransfer:
        """Target = elementwise median of several fitted normalizers (a cohort's own centre).

        Parameters
        ----------
        fitted : sequence of MacenkoTransfer, StainProfile or dict
            Fitted normalizers (for example one fitted on a sample of each slide), their
            profiles, or their ``to_dict()`` output.
        **params
            ``per_tile``, ``beta``, ``alpha``, ``output_glass`` of the result (defaults: those of the first
            normalizer given, else the class defaults).

        Returns
        -------
        MacenkoTransfer
            Unbound, with white input glass; stain rows are renormalized to unit length after
            the median. Each fit's stains are relative to its own reference glass, so a median
            over slides with different glass colours is not biased by them.

        Raises
        ------
        ConfigError
            When ``fitted`` is empty or holds an unfitted normalizer.
        """
        profiles, first = [], None
        for item in fitted:
            if isinstance(item, MacenkoTransfer):
                item._require_fitted()
                first = first or item
                profiles.append(StainProfile(item.stain_matrix, item.max_concentrations, 0))
            elif isinstance(item, dict):
                profiles.append(cls._stats_from_dict(item))
            else:
                profiles.append(item)
        if not profiles:
            raise ConfigError("from_median needs at least one fitted normalizer")
        if first is not None:
            params = {**first._params(), **params}
        matrix = np.median(np.stack([np.asarray(p.stain_matrix, np.float64) for p in profiles]), 0)
        maxima = np.median(np.stack([np.asarray(p.max_concentrations, np.float64) for p in profiles]), 0)
        obj = cls(**params)
        obj._set_target(StainProfile(_unit_rows(matrix), maxima, 0))
        return obj


def __getattr__(name: str):  # old spellings, one release (tilewright.renamed)
    from tilewright.renamed import old_name

    return old_name(__name__, name)
