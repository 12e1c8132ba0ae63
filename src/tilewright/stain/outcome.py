"""How close a slide's normalized sample came to the target: the outcome every slide is checked on.

A normalizer is judged by what it does to a slide's tissue, not by its estimate alone. After a
slide's source estimate is bound, its sample of tissue tiles is normalized and measured:

- **colour**: the CIEDE2000 difference between the sample's mean tissue CIELAB and the target's
  colour (the mean tissue CIELAB of the target's own normalized samples), before (raw) and after;
- **stain** (targets with stain vectors): the Macenko estimate of the normalized sample against
  the target's vectors (angle of each) and maxima (ratio of each).

Tissue pixels are those of the raw sample (optical-density norm >= 0.15 against the slide's
glass, :mod:`tilewright.stain.tissue_pixels`); both sides average the same pixels.

A slide whose normalized colour is further from the target than its raw colour (by more than
:data:`WORSE_MARGIN`) was pushed the wrong way: its caller stores it un-normalized rather than
worse. A slide past :data:`OFF_TARGET_DELTA_E`, :data:`OFF_TARGET_ANGLE_DEG` or outside
:data:`OFF_TARGET_MAX_RATIO` is flagged ``stain-off-target``. Tissue composition moves a slide's
mean colour too (a slide rich in nuclei is bluer than the target's average tissue), so the colour
limit is wide; the stain limits do not depend on composition.

References
----------
Sharma G, Wu W, Dalal EN (2005). The CIEDE2000 color-difference formula: implementation notes,
supplementary test data, and mathematical observations. Color Research & Application
30(1):21-30.
"""

from __future__ import annotations

import numpy as np

__all__ = ["tissue_colour", "measure_outcome", "off_target_reason", "pushed_away", "OFF_TARGET_DELTA_E",
           "OFF_TARGET_ANGLE_DEG", "OFF_TARGET_MAX_RATIO", "WORSE_MARGIN", "OUTCOME_KEYS"]

#: A normalized sample's mean tissue colour this far (CIEDE2000) from the target's is off target.
OFF_TARGET_DELTA_E = 10.0
#: A normalized sample's own stain vector this far (degrees) from the target's is off target.
OFF_TARGET_ANGLE_DEG = 8.0
#: A normalized sample's 99th-percentile concentration outside this ratio of the target's is off target.
OFF_TARGET_MAX_RATIO = (0.75, 1.33)
#: Normalized colour further from the target than the raw colour by more than this (CIEDE2000):
#: the slide was pushed away.
WORSE_MARGIN = 0.5
#: Keys of an outcome record (store attribute ``stain_outcome``, manifest columns ``stain_*``).
OUTCOME_KEYS = ("delta_e_raw", "delta_e", "h_angle_deg", "e_angle_deg", "h_max_ratio", "e_max_ratio")


def tissue_colour(rgb, mask: np.ndarray) -> np.ndarray | None:
    """Mean CIELAB (D65, as ``skimage.color.rgb2lab``) of the pixels under ``mask`` (None if none)."""
    from .lab import rgb_to_lab

    pixels = np.asarray(rgb)[mask]
    if pixels.shape[0] == 0:
        return None
    return rgb_to_lab(pixels.reshape(-1, 1, 3)).reshape(-1, 3).astype(np.float64).mean(axis=0)


def _delta_e(a, b) -> float:
    from skimage.color import deltaE_ciede2000

    return float(deltaE_ciede2000(np.asarray(a, np.float64), np.asarray(b, np.float64)))


def _angle(u, v) -> float:
    u, v = np.asarray(u, np.float64), np.asarray(v, np.float64)
    cos = float(np.dot(u, v) / (np.linalg.norm(u) * np.linalg.norm(v)))
    return float(np.degrees(np.arccos(np.clip(cos, -1.0, 1.0))))


def measure_outcome(sample, normalized, *, glass=None, target_colour=None, target_stains=None,
                    target_maxima=None) -> dict:
    """Measure a normalized sample against the target.

    Parameters
    ----------
    sample : ndarray, uint8, (..., H, W, 3)
        The slide's raw sample of tissue tiles.
    normalized : ndarray, uint8, same shape
        ``sample`` normalized.
    glass : array_like (3,), optional
        The raw sample's glass colour (tissue pixels are chosen on the raw sample against it).
    target_colour : array_like (3,), optional
        The target's mean tissue CIELAB; without it the colour distances are None.
    target_stains, target_maxima : array_like, optional
        The target's stain vectors (2, 3) and maxima (2,); without them the stain measures are None.

    Returns
    -------
    dict
        :data:`OUTCOME_KEYS` -> float or None (rounded to 3 decimals).
    """
    from ..errors import StainEstimationError
    from .estimate import estimate_stain_profile
    from .estimate_od import FLOOR
    from .tissue_pixels import tissue_mask

    out = dict.fromkeys(OUTCOME_KEYS)
    mask = tissue_mask(sample, glass=glass)
    if target_colour is not None:
        raw, after = tissue_colour(sample, mask), tissue_colour(normalized, mask)
        if raw is not None:
            out["delta_e_raw"] = _delta_e(raw, target_colour)
            out["delta_e"] = _delta_e(after, target_colour)
    if target_stains is not None and target_maxima is not None:
        # the estimate reads the pixels the slide's own estimate read: pixels clipped as scanned
        # stay left out (normalizing a strong slide lifts them above the floor, damage and all)
        readable = np.array(normalized, copy=True)
        readable[np.asarray(sample).min(axis=-1) < FLOOR] = 0
        try:
            profile = estimate_stain_profile(readable)
        except StainEstimationError:
            profile = None
        if profile is not None:
            stains = np.asarray(target_stains, np.float64)
            out["h_angle_deg"] = _angle(profile.stain_matrix[0], stains[0])
            out["e_angle_deg"] = _angle(profile.stain_matrix[1], stains[1])
            ratio = np.asarray(profile.max_concentrations, np.float64) / np.asarray(target_maxima, np.float64)
            out["h_max_ratio"], out["e_max_ratio"] = float(ratio[0]), float(ratio[1])
    return {k: (None if v is None else round(float(v), 3)) for k, v in out.items()}


def pushed_away(outcome: dict) -> bool:
    """Whether normalization moved the sample's colour away from the target (beyond the margin)."""
    raw, after = outcome.get("delta_e_raw"), outcome.get("delta_e")
    return raw is not None and after is not None and after > raw + WORSE_MARGIN


def off_target_reason(outcome: dict) -> str:
    """Why a normalized sample is off target ("" when it is not), naming the measure and its limit."""
    parts = []
    if outcome.get("delta_e") is not None and outcome["delta_e"] > OFF_TARGET_DELTA_E:
        parts.append(f"mean tissue colour {outcome['delta_e']:.1f} CIEDE2000 from the target's "
                     f"(limit {OFF_TARGET_DELTA_E:g})")
    for name in ("h", "e"):
        angle = outcome.get(f"{name}_angle_deg")
        if angle is not None and angle > OFF_TARGET_ANGLE_DEG:
            parts.append(f"{'hematoxylin' if name == 'h' else 'eosin'} vector {angle:.0f} degrees from the target's "
                         f"(limit {OFF_TARGET_ANGLE_DEG:g})")
        ratio = outcome.get(f"{name}_max_ratio")
        lo, hi = OFF_TARGET_MAX_RATIO
        if ratio is not None and not lo <= ratio <= hi:
            parts.append(f"{'hematoxylin' if name == 'h' else 'eosin'} maximum {ratio:.2f}x the target's "
                         f"(limits {lo:g}-{hi:g})")
    return ", ".join(parts)
