"""A slide's stain normalizer, bound to its own estimate and checked on its outcome before any tile.

Order: a reproducible sample of the slide's tissue tiles is read; the slide's own estimate is
bound (a failed or implausible one is replaced by the normalizer's fallback); the sample is
normalized and measured against the target (:mod:`tilewright.stain.outcome`). Never worse than
doing nothing: when normalizing moves the sample's tissue colour further from the target than it
started, the fallback is tried (if the slide's own estimate was used), and when that too moves
it away the slide is stored as scanned, un-normalized, with a ``stain-not-normalized`` warning.
A normalized sample past the documented limits is stored normalized with a ``stain-off-target``
warning. The measures go to the store (``stain_outcome``) and the manifest (``stain_check``,
``stain_delta_e_raw``, ``stain_delta_e``).
"""

from __future__ import annotations

import numpy as np

__all__ = ["bind_normalizer", "stain_columns", "CHECKS"]

#: Values of the manifest's ``stain_check`` ("" when not checked: no normalization, per-tile mode):
#: ``uncertain`` is within the limits but from an estimate flagged by
#: :func:`tilewright.stain.estimate.uncertain` (the reason is in the store's ``stain_outcome``).
CHECKS = ("ok", "uncertain", "off-target", "not-normalized")


#: Tiles of the sample the outcome is measured on (every k-th tile; the estimate reads them all).
OUTCOME_TILES = 16


def _measure(target, bound, sample, glass) -> dict:
    from tilewright.stain.outcome import measure_outcome

    sample = sample[:: max(1, len(sample) // OUTCOME_TILES)]
    stains = getattr(target, "stain_matrix", None)
    maxima = getattr(target, "max_concentrations", None)
    return measure_outcome(sample, bound.transform(sample), glass=glass, target_colour=target.target_colour,
                           target_stains=stains, target_maxima=maxima)


def _fallback(target, sample, glass):
    bound = target.with_glass(glass)
    bound.source, how = bound._fallback_source(np.asarray(sample), bound.glass)
    return bound, how


def _checked(target, bound, replaced: str, sample, glass):
    """``(normalizer or None, outcome, notes)`` after the never-worse rule (see the module notes)."""
    from tilewright.stain.outcome import off_target_reason, pushed_away

    outcome = _measure(target, bound, sample, glass)
    notes = [f"stain-replaced: {replaced}"] if replaced else []
    if pushed_away(outcome) and not replaced:
        alt, how = _fallback(target, sample, glass)
        alt_outcome = _measure(target, alt, sample, glass)
        if not pushed_away(alt_outcome):
            notes.append(f"stain-replaced: the slide's own stain estimate moved its tissue colour away from the "
                         f"target (CIEDE2000 {outcome['delta_e_raw']:.1f} -> {outcome['delta_e']:.1f}); "
                         f"replaced by {how}")
            bound, outcome = alt, alt_outcome
    if pushed_away(outcome):
        notes.append(f"stain-not-normalized: normalizing moved the slide's tissue colour away from the target "
                     f"(CIEDE2000 {outcome['delta_e_raw']:.1f} -> {outcome['delta_e']:.1f}); its tiles are stored "
                     "as scanned")
        return None, {**outcome, "check": "not-normalized"}, notes
    reason = off_target_reason(outcome)
    if reason:
        notes.append(f"stain-off-target: {reason}")
    doubt = _uncertain(bound.source)
    check = "off-target" if reason else ("uncertain" if doubt else "ok")
    return bound, {**outcome, "uncertain": doubt or None, "check": check}, notes


def _uncertain(source) -> str:
    """Why the bound Macenko estimate may be off (:func:`tilewright.stain.estimate.uncertain`)."""
    from tilewright.stain.estimate import StainProfile, uncertain

    return uncertain(source) if isinstance(source, StainProfile) else ""


def bind_normalizer(view, plan, config, target, path, glass=None):
    """Fit the target (if needed), bind the slide's own stain estimate from a tile sample and
    check the outcome (see the module notes); optical density is measured against the slide's
    glass colour ``glass``.

    Returns
    -------
    (normalizer or None, shared target or None, notes, outcome or None)
        ``notes``: list of ``code: reason`` warnings; ``outcome``: the measures and ``check``
        (None when nothing was measured: no tile, or per-tile estimates).
    """
    from tilewright.run.reference import make_target, own_target, sample_tiles

    sample = sample_tiles(view, plan.yx, config.tile, config.stain_sample, config.seed, threads=config.threads)
    if len(sample) == 0:
        return None, None, [], None  # nothing will be stored; no estimate needed
    if target is None and config.reference is not None:
        target = make_target(config.normalizer, config.reference, config)
    used = target  # the shared target (None: the slide's own estimate is its target)
    notes = []
    if target is None:
        target, note = own_target(config.normalizer, sample, glass, path)
        notes += [f"stain-replaced: {note}"] if note else []
    if config.per_tile_stain:
        return target.with_glass(glass), used, notes, None
    bound, replaced = target.fit_source_checked(sample, glass=glass)
    bound, outcome, more = _checked(target, bound, replaced, sample, glass)
    return bound, used, notes + more, outcome


def stain_columns(attrs: dict) -> dict:
    """The manifest's stain columns from a store's attributes (empty when it was not checked)."""
    outcome = attrs.get("stain_outcome") or {}
    return {"stain_check": outcome.get("check", ""), "stain_delta_e_raw": outcome.get("delta_e_raw"),
            "stain_delta_e": outcome.get("delta_e")}
