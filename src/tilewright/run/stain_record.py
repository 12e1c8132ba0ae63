"""A slide's stain estimates, recorded beside un-normalized tiles so readers can normalize later.

With ``TilingConfig.estimate_stains`` a run stores the tiles as read (harmonized, colour-managed,
not normalized) and, per slide: the Macenko and Reinhard estimates of the same tissue-tile sample a
normalizing run would take (``stain_sample`` tiles spread over the plan, optical density against
the slide's own glass colour), and 65,536 of that sample's pixels. A reader then binds any target
to the slide exactly as a normalizing run binds it (:meth:`StainTransfer.fit_source_checked`,
with the same fallbacks for an implausible estimate), from the stored pixels.
"""

from __future__ import annotations

import numpy as np

__all__ = ["stain_record", "SAMPLE_PIXELS"]

#: Pixels of the stain sample a store keeps (uint8 RGB: 192 KiB).
SAMPLE_PIXELS = 65_536


def stain_record(view, plan, config, glass) -> tuple[np.ndarray, dict, list | None, list]:
    """``(pixels (n, 3) uint8, {method: estimate dict or {"method", "error"}}, glass, positions)`` of a slide.

    ``positions``: the ``[y, x]`` of the sampled tiles; their stored tiles (un-normalized) are the
    very sample the estimates and a normalizing run's checks read, so a reader binds a target on
    them (the pixels serve stores whose sampled tiles were not all kept).

    Each estimate is a normalizer fitted on the slide's sample (``to_dict()``): its target is the
    slide's own stain (the input of a cohort's median target). A method whose estimate fails or,
    for Macenko, is implausible records why (``error``), never raises: the read-time binding
    falls back as a normalizing run would.
    """
    from tilewright.errors import StainEstimationError
    from tilewright.run.reference import sample_positions, sample_tiles
    from tilewright.stain.registry import METHODS, make_transfer

    positions = sample_positions(plan.yx, config.stain_sample, config.seed)  # what a normalizing run samples
    sample = sample_tiles(view, positions, config.tile, len(positions), config.seed, threads=config.threads)
    flat = sample.reshape(-1, 3)
    if len(flat) > SAMPLE_PIXELS:
        pick = np.sort(np.random.default_rng(config.seed).choice(len(flat), SAMPLE_PIXELS, replace=False))
        flat = flat[pick]
    estimates = {}
    for method in METHODS:
        if not len(sample):
            estimates[method] = {"method": method, "error": "no tile planned"}
            continue
        try:
            fitted = make_transfer(method).fit(sample, glass=glass)
            why = fitted._implausible(fitted._target_stats())
            estimates[method] = fitted.to_dict() if not why else {"method": method, "error": why}
        except StainEstimationError as exc:
            estimates[method] = {"method": method, "error": getattr(exc, "reason", str(exc))}
    glass_out = None if glass is None else [float(v) for v in glass]
    return np.ascontiguousarray(flat, dtype=np.uint8), estimates, glass_out, positions.astype(int).tolist()
