"""A normalizer bound to a slide, checked on its outcome: never worse than doing nothing.

The sample of the slide's tissue is normalized and measured against the target
(:func:`tilewright.stain.outcome.measure_outcome`). When normalizing moves the sample's tissue
colour further from the target than it started, the fallback estimate is tried (if the slide's own
estimate was used), and when that too moves it away the slide is left un-normalized (``None``,
warning ``stain-not-normalized``). A normalized sample past the documented limits is kept with a
``stain-off-target`` warning. Used by a normalizing run (:mod:`tilewright.run.stain_bind`) and by
normalize-on-read (:mod:`tilewright.store.read_normalize`), so both bind a slide the same way.
"""

from __future__ import annotations

import numpy as np

from .outcome import measure_outcome, off_target_reason, pushed_away

__all__ = ["checked_binding", "OUTCOME_TILES"]


#: Tiles of the sample the outcome is measured on (every k-th tile; the estimate reads them all).
OUTCOME_TILES = 16


def _measure(target, bound, sample, glass) -> dict:
    sample = sample[:: max(1, len(sample) // OUTCOME_TILES)]
    stains = getattr(target, "stain_matrix", None)
    maxima = getattr(target, "max_concentrations", None)
    return measure_outcome(sample, bound.transform(sample), glass=glass, target_colour=target.target_colour,
                           target_stains=stains, target_maxima=maxima)


def _fallback(target, sample, glass):
    bound = target.with_glass(glass)
    bound.source, how = bound._fallback_source(np.asarray(sample), bound.glass)
    return bound, how


def checked_binding(target, bound, replaced: str, sample, glass):
    """``(normalizer or None, outcome, notes)`` after the never-worse rule (see the module notes).

    ``target``: the fitted target; ``bound``: it bound to the slide's estimate (or a fallback,
    then ``replaced`` says why); ``sample``: the slide's tissue tiles (or pixels, as (1, n, 3));
    ``glass``: the slide's glass colour."""

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
    from .estimate import StainProfile, uncertain

    return uncertain(source) if isinstance(source, StainProfile) else ""
